"""What the plan figure draws, computed densely: the worst alias over all folding bands
at each output frequency, and the composite response reduced to one column per pixel.

At large decimation a chain has hundreds of bands that fold onto the passband; drawn
one line each, they hide one another.  The envelope (the worst of them at each output
frequency) is what decides the rejection, and the band holding its maximum is the
one to look at.
"""

from dataclasses import dataclass

import numpy as np

from ..planning.response import alias_intervals, image_step, normalised_response
from ..planning.stages import chain_rates

__all__ = ["AliasEnvelope", "alias_envelope", "peak_envelope"]


def _db(x):
    return 20.0 * np.log10(np.maximum(np.abs(x), 1e-300))


@dataclass
class AliasEnvelope:
    """Worst folded level at each output frequency of the passband.

    Attributes
    ----------
    freqs : ndarray
        Output frequencies (offset from the channel centre), Hz.
    level_db : ndarray
        The largest folded response over every band at each frequency, dB
        (-inf where no band lands).
    bands : int
        How many bands fold onto the passband.
    worst_band : tuple or None
        ``(lo, hi, image)`` input interval holding the overall maximum.
    worst_db : ndarray
        That band's own folded level at each output frequency (NaN where it
        does not land).
    """

    freqs: np.ndarray
    level_db: np.ndarray
    bands: int
    worst_band: tuple | None
    worst_db: np.ndarray


def alias_envelope(plan, *, points=1201):
    """The :class:`AliasEnvelope` of ``plan`` on ``points`` output frequencies across the passband."""
    fs = plan.input_rate
    fp = plan.bandwidth / 2.0
    fs_out = chain_rates(plan.stages, fs=fs)[-1]
    step = image_step(plan.stages, fs=fs)
    y = np.linspace(-fp, fp, points)
    best = np.full(points, -np.inf)
    intervals = alias_intervals(plan.stages, fs=fs, bandwidth=plan.bandwidth)
    curves = []
    for lo, hi, k in intervals:
        # input frequencies of this band that land on y: x = y - k step + j fs_out
        j = np.round(((lo + hi) / 2.0 + k * step) / fs_out)
        x = y - k * step + j * fs_out
        ok = (x >= lo) & (x <= hi)
        level = np.full(points, np.nan)
        if ok.any():
            level[ok] = _db(normalised_response(plan.stages, x[ok], fs=fs, image=k))
        curves.append(level)
        best = np.fmax(best, np.nan_to_num(level, nan=-np.inf))
    if not curves:
        return AliasEnvelope(y, best, 0, None, np.full(points, np.nan))
    peaks = [np.nanmax(c) if np.isfinite(c).any() else -np.inf for c in curves]
    w = int(np.argmax(peaks))
    return AliasEnvelope(y, best, len(intervals), intervals[w], curves[w])


def peak_envelope(f, level_db, columns):
    """``level_db`` (at ascending ``f``) reduced to ``columns`` columns: centre, max and min of each."""
    n = f.size // columns * columns
    if n < columns:
        return f, level_db, level_db
    f = f[:n].reshape(columns, -1)
    v = level_db[:n].reshape(columns, -1)
    return f.mean(axis=1), v.max(axis=1), v.min(axis=1)
