"""Figures of a plan's response: per-stage and composite, and the folded view."""

import math

import numpy as np

from ..planning.response import alias_intervals, composite_response, fold, image_step
from ..planning.stages import chain_rates
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

    Panel (a): each stage's response and the composite over the input band, with
    the bands that fold onto the passband shaded.  Panel (b): every alias image
    folded onto the output band and overlaid, with the rejection target.
    """
    fs = plan.input_rate
    fp = plan.bandwidth / 2.0
    target = plan.spec["rejection_db"]
    fig, axes = new_figure(2, 1, size=(11, 8.5))
    ax, bx = axes[0, 0], axes[1, 0]

    f = np.linspace(-fs / 2.0, fs / 2.0, 8001)
    intervals = alias_intervals(plan.stages, fs=fs, bandwidth=plan.bandwidth)
    f = np.unique(np.concatenate([f, [lo for lo, _, _ in intervals], [hi for _, hi, _ in intervals], [-fp, fp, 0.0]]))
    rates = chain_rates(plan.stages, fs=fs)
    rows, _ = stage_rows(plan)
    for st, rate, row in zip(plan.stages, rates, rows):
        ax.plot(f, _db(st.response(f, fs=rate)), lw=0.6, alpha=0.45, label=f"{row['stage']}: {row['kind']} {row['ratio']}")
    h = composite_response(plan.stages, f, fs=fs)
    ax.plot(f, _db(h), color="black", lw=1.4, label="composite")
    mask = np.zeros(f.shape, dtype=bool)
    for lo, hi, _ in intervals:
        mask |= (f >= lo) & (f <= hi)
    ylo = -(target + 40.0)
    ax.fill_between(f, ylo, 10, where=mask, color="tab:red", alpha=0.15, lw=0, label="folds onto passband")
    ax.axhline(-target, color="tab:red", ls="--", lw=1, label=f"target -{target:g} dB")
    ax.set_ylim(ylo, 10)
    ax.set_xlim(-fs / 2.0, fs / 2.0)
    ax.set_ylabel("magnitude (dB)")
    ax.set_xlabel("input frequency offset from centre")
    _hz_axis(ax)
    ax.grid(alpha=0.3)
    ax.legend(loc="lower left", fontsize=8, ncol=2)
    ax.set_title(title or f"(a) stage and composite response, {fs / 1e6:g} Msps in, {plan.output_rate / 1e3:g} ksps out")

    fs_out = plan.output_rate
    xs, ys = [], []
    step = image_step(plan.stages, fs=fs)
    for k in sorted({k for _, _, k in intervals}):
        bands = [(lo, hi) for lo, hi, kk in intervals if kk == k]
        x = np.concatenate([np.append(np.linspace(lo, hi, 48), np.nan) for lo, hi in bands])
        att = _db(composite_response(plan.stages, np.nan_to_num(x), fs=fs, image=k))
        land = fold(x + k * step, fs_out)
        # a band straddling the output band's edge would draw across it: break the line there
        jump = np.abs(np.diff(land, prepend=land[:1])) > fs_out / 2
        land[jump] = np.nan
        xs.append(land)
        ys.append(np.where(np.isnan(x), np.nan, att))
    if xs:
        bx.plot(np.concatenate(xs), np.concatenate(ys), color="tab:blue", lw=0.6, alpha=0.5)
    worst = plan.predicted.get("alias_rejection_db", float("nan"))
    pb = np.linspace(-fs_out / 2, fs_out / 2, 1201)
    bx.plot(pb, _db(composite_response(plan.stages, pb, fs=fs)), color="black", lw=1.4, label="direct path (no folding)")
    bx.plot([], [], color="tab:blue", lw=0.8, label=f"{len(intervals)} folded alias bands")
    bx.axhline(-target, color="tab:red", ls="--", lw=1, label=f"target -{target:g} dB")
    bx.axvspan(-fp, fp, color="tab:green", alpha=0.08, label="passband")
    edge = plan.spec.get("stopband_edge")
    if edge:
        for e in (-edge, edge):
            bx.axvline(e, color="tab:purple", ls="-.", lw=1)
        bx.plot([], [], color="tab:purple", ls="-.", label=f"stopband edge +-{edge / 1e3:g} kHz")
    bx.set_xlim(-fs_out / 2, fs_out / 2)
    bx.set_ylim(-(target + 60.0), 5)
    bx.set_xlabel("output frequency (offset from channel centre)")
    bx.set_ylabel("level relative to passband (dB)")
    _hz_axis(bx)
    bx.grid(alpha=0.3)
    bx.legend(loc="lower left", fontsize=8)
    bx.set_title(f"(b) folded view: worst alias {worst:.1f} dB below the channel")
    save_figure(fig, path)


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
    ax.set_title(title or f"input spectrum (Welch, {psd.window} window, {psd.bin_hz:.4g} Hz bins) and extracted channels")
    save_figure(fig, path)


def plot_channel(psd, *, name, bandwidth, alias_floor_dbfs_per_hz=None, audit=(), path, title=None):
    """One output's spectrum with its passband edges and the predicted alias floor.

    ``audit``: folded signals as dicts with ``landing_offset_hz`` and
    ``output_level_dbfs_per_hz`` drawn as markers.
    """
    fig, axes = new_figure(1, 1, size=(10, 5))
    ax = axes[0, 0]
    f = psd.freqs - psd.center_frequency
    ax.plot(f, psd.dbfs_per_hz(), lw=0.8, color="tab:blue", label="output spectrum")
    for edge in (-bandwidth / 2, bandwidth / 2):
        ax.axvline(edge, color="tab:green", ls="--", lw=1)
    ax.axvspan(-bandwidth / 2, bandwidth / 2, color="tab:green", alpha=0.06, label="passband")
    if alias_floor_dbfs_per_hz is not None and math.isfinite(alias_floor_dbfs_per_hz):
        ax.axhline(alias_floor_dbfs_per_hz, color="tab:red", ls=":", lw=1.2, label="predicted alias floor")
    for i, a in enumerate(audit):
        ax.plot([a["landing_offset_hz"]], [a["output_level_dbfs_per_hz"]], marker="v", color="tab:red" if a.get("above_noise") else "tab:orange", ls="none", label="folded signal (predicted)" if i == 0 else None)
    ax.set_xlabel("offset from channel centre")
    ax.set_ylabel("PSD (dBFS/Hz)")
    _hz_axis(ax)
    ax.grid(alpha=0.3)
    ax.legend(loc="lower center", fontsize=8)
    ax.set_title(title or f"{name}: output at {psd.fs / 1e3:g} ksps")
    save_figure(fig, path)
