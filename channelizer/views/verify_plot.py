"""The verification figure: predicted paths against the measured tones."""

import math

import numpy as np

from ..planning.response import fold
from ..checks.tones import _path_gain, _resampler, _tested_bands
from ..checks.verify import _FLOOR_MARGIN_DB


def plot_verification(v, path, *, plan=None, title=None):
    """Write the verification figure to ``path`` (PNG).

    Panel (a): measured gains at the tones' input frequencies over the predicted
    composite response across the input band.  Panel (b): the alias tones at
    their landing frequencies, the tested bands' predicted responses folded
    onto the output band, and the rejection target.  Panel (c): the passband,
    predicted against measured.

    Parameters
    ----------
    v : Verification
    path : str
        PNG file, written via a temporary name.
    plan : channelizer.plan.Plan, optional
        Whose predicted response to draw; by default the stages the
        verification predicted from (``v.stages``).
    """
    from .plots import _db as _db_curve, _hz_axis, new_figure, save_figure

    fig, axes = new_figure(3, 1, size=(11, 11))
    ax, bx, cx = axes[0, 0], axes[1, 0], axes[2, 0]
    fs, fs_out, fp = v.input_rate, v.output_rate, v.bandwidth / 2.0
    pb, al = v.passband, v.aliases
    dc = next((t.measured_db for t in pb if t.input_hz == 0.0), 0.0)
    target = dc - v.spec_rejection_db
    deep = min([t.predicted_db for t in al if math.isfinite(t.predicted_db)] + [target - 40.0])
    ylo = max(min(deep, target - 40.0), -200.0) - 10.0

    # the input-band view spans the tested tones (all of the band when they reach its edges)
    reach = max([abs(t.input_hz) for t in v.tones] + [4.0 * fp])
    span = min(fs / 2.0, 1.1 * reach)
    stages = tuple(plan.stages) if plan is not None else tuple(v.stages)
    if stages:
        up, fs_r = _resampler(stages, fs)
        f = np.linspace(-span, span, 8001)
        f = np.unique(np.concatenate([f, [t.input_hz for t in v.tones]]))
        ax.plot(f, _db_curve(_path_gain(stages, f, fs=fs, image=0, up=up)), color="black", lw=0.9,
                label="predicted (direct path)")
        for k in sorted({t.image for t in al} - {0}):
            ax.plot(f, _db_curve(_path_gain(stages, f, fs=fs, image=k, up=up)), lw=0.6, alpha=0.6,
                    label=f"predicted (image path {k})")
        # folded curves of the tested bands
        first = True
        for k, lo, hi in _tested_bands(stages, fs, v.bandwidth, al):
            x = np.linspace(lo, hi, 96)
            land = fold(x + k * fs_r, fs_out) if up > 1 else fold(x, fs_out)
            jump = np.abs(np.diff(land, prepend=land[:1])) > fs_out / 2
            land = np.where(jump, np.nan, land)
            bx.plot(land, _db_curve(_path_gain(stages, x, fs=fs, image=k, up=up)), color="tab:blue", lw=0.6,
                    alpha=0.4, label="predicted, tested bands folded" if first else None)
            first = False
        xp = np.linspace(-fp, fp, 801)
        hp = _db_curve(_path_gain(stages, xp, fs=fs, image=0, up=up))
        bx.plot(xp, hp, color="black", lw=1.2, label="predicted channel")
        cx.plot(xp, hp, color="black", lw=1.2, label="predicted")
    for axis, xs in ((ax, "input_hz"), (bx, "landing_hz")):
        axis.plot([getattr(t, xs) for t in pb], [t.measured_db for t in pb], "o", ms=4, color="tab:green",
                  label="measured, passband")
        above = [t for t in al if t.measured_db > t.floor_db + _FLOOR_MARGIN_DB]
        floor = [t for t in al if t.measured_db <= t.floor_db + _FLOOR_MARGIN_DB]
        axis.plot([getattr(t, xs) for t in above], [t.measured_db for t in above], "x", ms=4, color="tab:red",
                  label="measured, alias")
        if floor:
            axis.plot([getattr(t, xs) for t in floor], [max(t.measured_db, ylo) for t in floor], "x", ms=3,
                      color="0.55", label="measured, alias at the measurement floor")
        axis.axhline(target, color="tab:red", ls="--", lw=1, label=f"target: {v.spec_rejection_db:g} dB below 0 Hz")
        axis.set_ylim(ylo, max(5.0, dc + 5.0))
        axis.grid(alpha=0.3)
        axis.set_ylabel("gain (dB)")
        _hz_axis(axis)
    if math.isfinite(v.worst_alias_hz):
        w = max(al, key=lambda t: t.measured_db)
        ax.annotate(f"worst {v.measured_rejection_db:.1f} dB", (w.input_hz, w.measured_db), xytext=(8, 8),
                    textcoords="offset points", fontsize=8, color="tab:red")
    ax.set_xlim(-span, span)
    ax.set_xlabel("input frequency offset from channel centre" + ("" if span >= fs / 2.0 else " (tested span)"))
    ax.legend(loc="lower left", fontsize=7, ncol=2)
    mode = "bit-true" if v.bit_true else "float"
    ax.set_title(title or f"(a) {mode} tone sweep over the input band: {len(v.tones)} tones")
    bx.set_xlim(-fp * 1.05, fp * 1.05)
    bx.axvspan(-fp, fp, color="tab:green", alpha=0.06)
    bx.set_xlabel("output frequency (offset from channel centre)")
    bx.legend(loc="lower left", fontsize=7)
    bx.set_title(f"(b) folded view: measured rejection {v.measured_rejection_db:.2f} dB, "
                 f"predicted {v.predicted_rejection_db:.2f} dB")
    cx.plot([t.input_hz for t in pb], [t.measured_db for t in pb], "o", ms=5, color="tab:green", label="measured")
    cx.set_xlim(-fp * 1.05, fp * 1.05)
    pm = [t.measured_db for t in pb]
    mid = (max(pm) + min(pm)) / 2.0
    half = max(v.spec_ripple_db, max(pm) - min(pm)) * 0.75 + 0.01
    cx.set_ylim(mid - half, mid + half)
    cx.axhspan(max(pm) - v.spec_ripple_db, max(pm), color="tab:green", alpha=0.08,
               label=f"ripple allowance {v.spec_ripple_db:g} dB")
    cx.grid(alpha=0.3)
    cx.set_xlabel("input frequency offset from channel centre")
    cx.set_ylabel("gain (dB)")
    _hz_axis(cx)
    cx.legend(loc="lower center", fontsize=7)
    cx.set_title(f"(c) passband: measured ripple {v.measured_ripple_db:.4f} dB, predicted {v.predicted_ripple_db:.4f} dB")
    save_figure(fig, path)
