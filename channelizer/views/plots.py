"""Figures of a plan's response: per-stage and composite, and the folded view."""

import math

import numpy as np

from ..planning.response import alias_intervals, normalised_response
from ..planning.stages import chain_rates
from ..units import format_hz
from .table import stage_rows

__all__ = ["plot_plan", "new_figure", "save_figure"]


def new_figure(rows=1, cols=1, *, size=(11, 6.5)):
    """A figure on the non-interactive backend (no display needed)."""
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(rows, cols, figsize=size, squeeze=False)
    return fig, axes


def save_figure(fig, path):
    """Save a figure via a temporary name so that a failed save leaves nothing complete-looking."""
    import matplotlib.pyplot as plt

    from ..io.atomic import atomic_output
    from ..io.paths import figure_format

    fig.tight_layout()
    with atomic_output(path, "wb") as fh:
        fig.savefig(fh, format=figure_format(path), dpi=110)
    plt.close(fig)


def _hz_axis(ax, which="x"):
    from matplotlib.ticker import EngFormatter

    getattr(ax, f"{which}axis").set_major_formatter(EngFormatter(unit="Hz"))


def _db(x, floor=-250.0):
    return np.maximum(20.0 * np.log10(np.maximum(np.abs(x), 1e-300)), floor)


def plot_plan(plan, path, *, title=None):
    """Write the plan's response figure to ``path`` (PNG).

    Panel (a): the composite response over the input band (drawn densely: the
    highest and lowest level within each pixel column), each stage over its own
    input band, the bands that fold onto the passband as a strip along the bottom,
    and an inset around the channel where those bands are shaded.  Panel (b): the
    worst folded level over all bands at each output frequency of the passband
    (see :mod:`channelizer.views.plan_panels`), with the worst band on its own.
    """
    from .plan_panels import alias_envelope

    fs = plan.input_rate
    fp = plan.bandwidth / 2.0
    fs_out = plan.output_rate
    target = plan.spec["rejection_db"]
    fig, axes = new_figure(2, 1, size=(11, 9))
    ax, bx = axes[0, 0], axes[1, 0]
    ylo = -(target + 40.0)
    intervals = alias_intervals(plan.stages, fs=fs, bandwidth=plan.bandwidth)

    rates = chain_rates(plan.stages, fs=fs)
    rows, _ = stage_rows(plan)
    for st, rate, row in zip(plan.stages, rates, rows):
        g = np.linspace(-rate / 2.0, rate / 2.0, 4001)  # a stage only sees its own input band
        # a rational stage's filter has gain L: drawn over L, like the composite
        ax.plot(g, _db(st.response(g, fs=rate) / st.interpolation), lw=0.7, alpha=0.5, label=f"{row['stage']}: {row['kind']} {row['ratio']} (over its input band)")
    fc, hi_db, lo_db = _composite_columns(plan, -fs / 2.0, fs / 2.0)
    ax.fill_between(fc, np.maximum(lo_db, ylo), np.maximum(hi_db, ylo), color="black", lw=0.8, label="composite")
    ax.hlines(np.full(len(intervals), ylo + 2.0), [lo for lo, _, _ in intervals], [hi for _, hi, _ in intervals],
              color="tab:red", lw=6, label=f"{len(intervals)} bands that fold onto the passband")
    ax.axhline(-target, color="tab:red", ls="--", lw=1, label=f"target -{target:g} dB")
    ax.set_ylim(ylo, 10)
    ax.set_xlim(-fs / 2.0, fs / 2.0)
    ax.set_ylabel("magnitude (dB)")
    ax.set_xlabel("input frequency offset from centre")
    _hz_axis(ax)
    ax.grid(alpha=0.3)
    ax.legend(loc="upper left", fontsize=8)
    ax.set_title(title or f"(a) stage and composite response, {format_hz(fs, 'sps')} in, {format_hz(fs_out, 'sps')} out")
    _zoom_inset(ax, plan, intervals, target, ylo)

    env = alias_envelope(plan)
    pb = np.linspace(-fs_out / 2, fs_out / 2, 2001)
    bx.plot(pb, _db(normalised_response(plan.stages, pb, fs=fs)), color="black", lw=1.4, label="direct path (no folding)")
    bx.plot(env.freqs, env.level_db, color="tab:blue", lw=1.4, label=f"worst of {env.bands} folded bands")
    if env.worst_band is not None:
        lo, hi, _ = env.worst_band
        bx.plot(env.freqs, env.worst_db, color="tab:red", lw=1.0, label=f"worst band: input {format_hz(lo, signed=True)} to {format_hz(hi, signed=True)}")
    bx.axhline(-target, color="tab:red", ls="--", lw=1, label=f"target -{target:g} dB")
    bx.axvspan(-fp, fp, color="tab:green", alpha=0.08, label="passband")
    edge = plan.spec.get("stopband_edge")
    if edge:
        for e in (-edge, edge):
            bx.axvline(e, color="tab:purple", ls="-.", lw=1)
        bx.plot([], [], color="tab:purple", ls="-.", label=f"stopband edge +-{format_hz(edge)}")
    worst = plan.predicted.get("alias_rejection_db", float("nan"))
    bx.set_xlim(-fs_out / 2, fs_out / 2)
    bx.set_ylim(-(target + 60.0), 5)
    bx.set_xlabel("output frequency (offset from channel centre)")
    bx.set_ylabel("level relative to passband (dB)")
    _hz_axis(bx)
    bx.grid(alpha=0.3)
    bx.legend(loc="upper left", fontsize=8)
    bx.set_title(f"(b) folded view: worst alias {worst:.1f} dB below the channel")
    save_figure(fig, path)


def _composite_columns(plan, lo, hi, columns=1600):
    """The composite response from ``lo`` to ``hi`` Hz, sampled densely and reduced per pixel column."""
    from .plan_panels import peak_envelope

    per = max(8, min(256, int(16 * plan.input_rate / plan.output_rate * (hi - lo) / plan.input_rate)))
    f = np.linspace(lo, hi, columns * per)
    return peak_envelope(f, _db(normalised_response(plan.stages, f, fs=plan.input_rate)), columns)


def _zoom_inset(ax, plan, intervals, target, ylo):
    """An inset around the channel: the composite and the folding bands within three output rates."""
    span = min(3.0 * plan.output_rate, plan.input_rate / 2.0)
    if span >= plan.input_rate / 2.0 * 0.5:
        return  # the main axis already shows this well
    from matplotlib.ticker import MaxNLocator

    ins = ax.inset_axes([0.63, 0.4, 0.355, 0.48])
    fc, hi_db, lo_db = _composite_columns(plan, -span, span, columns=600)
    ins.fill_between(fc, np.maximum(lo_db, ylo), np.maximum(hi_db, ylo), color="black", lw=0.8)
    for lo, hi, _ in intervals:
        if hi > -span and lo < span:
            ins.axvspan(max(lo, -span), min(hi, span), color="tab:red", alpha=0.18, lw=0)
    ins.axvspan(-plan.bandwidth / 2.0, plan.bandwidth / 2.0, color="tab:green", alpha=0.15, lw=0)
    ins.axhline(-target, color="tab:red", ls="--", lw=1)
    ins.set_xlim(-span, span)
    ins.set_ylim(ylo, 10)
    ins.tick_params(labelsize=7)
    _hz_axis(ins)
    ins.xaxis.set_major_locator(MaxNLocator(5))
    ins.set_title("near the channel: passband green, folding bands red", fontsize=8)
    ins.grid(alpha=0.3)


def plot_overview(psd, channels, path, *, title=None):
    """Input power spectral density with each channel's passband marked.

    ``channels``: sequence of (name, centre in Hz on the PSD's axis, bandwidth).
    """
    fig, axes = new_figure(1, 1, size=(11, 5))
    ax = axes[0, 0]
    ax.plot(psd.freqs, psd.dbfs_per_hz(), lw=0.7, color="tab:blue")
    lo, hi = ax.get_ylim()
    for i, (name, centre, bw) in enumerate(channels):
        ax.axvspan(centre - bw / 2, centre + bw / 2, color=f"C{(i % 8) + 1}", alpha=0.25)
        ax.annotate(name, (centre, hi), xytext=(0, -12 - 11 * (i % 3)), textcoords="offset points", ha="center", fontsize=8)
    ax.set_xlabel("frequency" if psd.center_frequency else "offset from centre")
    ax.set_ylabel("PSD (dBFS/Hz)")
    _hz_axis(ax)
    ax.grid(alpha=0.3)
    ax.set_title(title or f"input spectrum (Welch, {psd.window} window, {format_hz(psd.bin_hz, digits=4)} bins) and extracted channels")
    save_figure(fig, path)


def plot_channel(
    psd, *, name, bandwidth, alias_floor_dbfs_per_hz=None, audit=(), path, title=None, rejection_db=None, noise_floor_dbfs_per_hz=None
):
    """One output's spectrum with its passband edges and the predicted alias floor.

    ``audit``: folded signals as dicts with ``landing_offset_hz`` and
    ``output_level_dbfs_per_hz`` drawn as markers.  The level axis stops 10 dB
    under ``noise_floor_dbfs_per_hz`` (the capture's noise floor; by default the
    output's) less ``rejection_db`` (the plan's rejection; 60 dB when not given),
    where the chain leaves the rejected noise: what lies further down is drawn on
    the axis's lower edge, marked as below it.  The legend sits beside the axes, never over the data.
    """
    fig, axes = new_figure(1, 1, size=(12, 5))
    ax = axes[0, 0]
    f = psd.freqs - psd.center_frequency
    ax.plot(f, psd.dbfs_per_hz(), lw=0.8, color="tab:blue", label="output spectrum")
    for edge in (-bandwidth / 2, bandwidth / 2):
        ax.axvline(edge, color="tab:green", ls="--", lw=1)
    ax.axvspan(-bandwidth / 2, bandwidth / 2, color="tab:green", alpha=0.06, label="passband")
    if alias_floor_dbfs_per_hz is not None and math.isfinite(alias_floor_dbfs_per_hz):
        ax.axhline(alias_floor_dbfs_per_hz, color="tab:red", ls=":", lw=1.2, label="predicted alias floor")
    bottom, top = _channel_levels(psd, rejection_db, noise_floor_dbfs_per_hz)
    below = False
    for i, a in enumerate(audit):
        level = a["output_level_dbfs_per_hz"]
        below |= level < bottom
        ax.plot([a["landing_offset_hz"]], [max(level, bottom + 1.0)], marker="v", color="tab:red" if a.get("above_noise") else "tab:orange",
                ls="none", clip_on=False, label="folded signal (predicted)" if i == 0 else None)
    if alias_floor_dbfs_per_hz is not None and math.isfinite(alias_floor_dbfs_per_hz) and alias_floor_dbfs_per_hz < bottom:
        below = True
    if below:
        ax.plot([], [], ls="none", label=f"(at the lower edge: predicted below {bottom:.0f} dBFS/Hz)")
    ax.set_ylim(bottom, top)
    ax.set_xlabel("offset from channel centre")
    ax.set_ylabel("PSD (dBFS/Hz)")
    _hz_axis(ax)
    ax.grid(alpha=0.3)
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, borderaxespad=0.0)
    ax.set_title(title or f"{name}: output at {psd.fs / 1e3:g} ksps")
    save_figure(fig, path)


def _channel_levels(psd, rejection_db, noise_db):
    """Level axis of a channel plot: from the noise floor less the rejection to above the peak."""
    from ..dsp.detection import estimate_noise_floor

    dens = psd.dbfs_per_hz()
    finite = dens[np.isfinite(dens)]
    top = float(finite.max()) + 10.0 if finite.size else 0.0
    if noise_db is None or not math.isfinite(noise_db):
        noise = estimate_noise_floor(psd)
        noise_db = 10.0 * math.log10(noise) if noise > 0 else (float(finite.min()) if finite.size else -200.0)
    depth = rejection_db if rejection_db is not None and math.isfinite(rejection_db) else 60.0
    return noise_db - depth - 10.0, top
