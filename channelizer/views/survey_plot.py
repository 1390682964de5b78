"""The survey figure: PSD with detections above a spectrogram."""

import math

import numpy as np

from ..units import format_hz



def plot_survey(result, path):
    """PSD (with detections marked) above a spectrogram, absolute Hz when the centre is known."""
    from .plots import _hz_axis, new_figure, save_figure

    psd, sg = result.psd, result.spectrogram
    fig, axes = new_figure(2, 1, size=(11, 8.5))
    ax, bx = axes[0, 0], axes[1, 0]
    bx.sharex(ax)  # one frequency axis for both panels
    ax.plot(psd.freqs, psd.dbfs_per_hz(), lw=0.7)
    if getattr(result, "noise_floor_per_bin", None) is not None:
        local = 10 * np.log10(np.maximum(result.noise_floor_per_bin, 1e-300))
        ax.plot(psd.freqs, local, color="black", ls="--", lw=1.2, zorder=3, label="local noise floor")
    else:
        ax.axhline(result.noise_floor_dbfs_per_hz, color="gray", ls=":", lw=1, label="estimated noise floor")
    for i, s in enumerate(result.signals, 1):
        ax.axvspan(s.lower_hz, s.upper_hz, color="tab:orange", alpha=0.25)
        ax.annotate(str(i), (s.center_hz, s.power_dbfs - 10 * math.log10(max(s.occupied_bandwidth_hz, 1.0))), fontsize=8, ha="center")
    ax.set_ylabel("PSD (dBFS/Hz)")
    ax.set_title(f"Welch PSD, {psd.window} window, {format_hz(psd.bin_hz, digits=4)} resolution; shaded: occupied (99 %) bands")
    ax.legend(loc="upper right", fontsize=8)
    ax.grid(alpha=0.3)
    _hz_axis(ax)
    ax.set_xlim(psd.freqs[0], psd.freqs[-1])
    p, fcols = _peak_columns(sg.power_db, sg.freqs)
    finite = p[np.isfinite(p)]
    vmin = np.percentile(finite, 5) if finite.size else None
    im = bx.imshow(
        p,
        aspect="auto",
        origin="lower",
        extent=[fcols[0], fcols[-1], sg.times[0], sg.times[-1] if len(sg.times) > 1 else sg.times[0] + 1e-3],
        vmin=vmin,
        cmap="viridis",
    )
    # below the panel, so that both panels keep the same width and frequency axis
    fig.colorbar(im, ax=bx, label="dBFS/Hz", orientation="horizontal", pad=0.15, fraction=0.05, aspect=60)
    bx.set_ylabel("time (s)")
    bx.set_xlabel("frequency" if result.capture.center_frequency is not None else "offset from centre")
    bx.set_title("spectrogram (each column: the strongest of the bins it covers, so narrow tones stay visible)"
                 if fcols.size < sg.freqs.size else "spectrogram")
    _hz_axis(bx)
    ax.set_xlim(psd.freqs[0], psd.freqs[-1])
    save_figure(fig, path)


#: Most frequency columns drawn in the spectrogram (about the figure's width in pixels).
MAX_COLUMNS = 1024


def _peak_columns(power_db, freqs):
    """Columns reduced to at most MAX_COLUMNS by taking the strongest bin of each group.

    Returns the reduced array and the centre frequency of each column.
    """
    n = power_db.shape[1]
    group = -(-n // MAX_COLUMNS)
    if group <= 1:
        return power_db, np.asarray(freqs)
    cols = n // group
    p = power_db[:, : cols * group].reshape(power_db.shape[0], cols, group).max(axis=2)
    f = np.asarray(freqs)[: cols * group].reshape(cols, group).mean(axis=1)
    return p, f
