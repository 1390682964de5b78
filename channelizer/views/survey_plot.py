"""The survey figure: PSD with detections above a spectrogram."""

import math

import numpy as np



def plot_survey(result, path):
    """PSD (with detections marked) above a spectrogram, absolute Hz when the centre is known."""
    from .plots import _hz_axis, new_figure, save_figure

    psd, sg = result.psd, result.spectrogram
    fig, axes = new_figure(2, 1, size=(11, 8))
    ax, bx = axes[0, 0], axes[1, 0]
    ax.plot(psd.freqs, psd.dbfs_per_hz(), lw=0.7)
    ax.axhline(result.noise_floor_dbfs_per_hz, color="gray", ls=":", lw=1, label="estimated noise floor")
    for i, s in enumerate(result.signals, 1):
        ax.axvspan(s.lower_hz, s.upper_hz, color="tab:orange", alpha=0.25)
        ax.annotate(str(i), (s.center_hz, s.power_dbfs - 10 * math.log10(max(s.occupied_bandwidth_hz, 1.0))), fontsize=8, ha="center")
    ax.set_ylabel("PSD (dBFS/Hz)")
    ax.set_title(f"Welch PSD, {psd.window} window, {psd.bin_hz:.4g} Hz resolution; shaded: occupied (99 %) bands")
    ax.legend(loc="upper right", fontsize=8)
    ax.grid(alpha=0.3)
    _hz_axis(ax)
    ax.set_xlim(psd.freqs[0], psd.freqs[-1])
    p = sg.power_db
    finite = p[np.isfinite(p)]
    vmin = np.percentile(finite, 5) if finite.size else None
    im = bx.imshow(
        p,
        aspect="auto",
        origin="lower",
        extent=[sg.freqs[0], sg.freqs[-1], sg.times[0], sg.times[-1] if len(sg.times) > 1 else sg.times[0] + 1e-3],
        vmin=vmin,
        cmap="viridis",
    )
    fig.colorbar(im, ax=bx, label="dBFS/Hz", pad=0.01)
    bx.set_ylabel("time (s)")
    bx.set_xlabel("frequency" if result.capture.center_frequency is not None else "offset from centre")
    bx.set_title("spectrogram")
    _hz_axis(bx)
    save_figure(fig, path)
