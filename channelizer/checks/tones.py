"""Where verify puts its tones: the path gains of a plan and the tone grid.

Passband tones on a fixed grid plus the response's extremes; alias tones at each
folding band's predicted worst frequency (coarse ranking over all bands, a dense look
and a golden-section refinement in the worst ones) plus a spread over the rest.  Every
gain is the composite response over the rational stage's interpolation factor, so a
plan with a resampler reads in the same units as one without.
"""

import math

import numpy as np
import scipy.optimize

from ..planning.response import alias_intervals, normalised_response, resampler_of


PASSBAND_GRID = 17


_COARSE_BUDGET = 200_000  # predicted-response points for ranking the alias bands


_DENSE_POINTS = 513  # per selected band, for its worst frequency


_GOLDEN = (math.sqrt(5.0) - 1.0) / 2.0


def _resampler(stages, fs):
    """(interpolation, input rate of the rational stage); (1, output rate) when there is none."""
    res, rate = resampler_of(stages, fs=fs)
    return (res.interpolation if res is not None else 1), rate


def _path_gain(stages, f, *, fs, image, up):
    """Complex gain of path ``image``: the composite response over the up-sampling factor."""
    return normalised_response(stages, f, fs=fs, image=image)


def _db(x):
    x = float(x)
    return 20.0 * math.log10(x) if x > 0 else -math.inf


def _passband_tones(stages, fs, bandwidth, up):
    fp = bandwidth / 2.0
    grid = np.linspace(-fp, fp, PASSBAND_GRID)
    grid[PASSBAND_GRID // 2] = 0.0  # the reference tone, exactly
    dense = np.linspace(-fp, fp, 4097)
    mag = np.abs(_path_gain(stages, dense, fs=fs, image=0, up=up))
    extra = [dense[int(np.argmax(mag))], dense[int(np.argmin(mag))]]
    f = np.concatenate([grid, [x for x in extra if np.min(np.abs(grid - x)) > 1e-9 * max(fp, 1.0)]])
    return [(float(x), 0, False) for x in f]


def _alias_tones(stages, fs, bandwidth, up, budget):
    """(frequency, image, is_band_worst) for the alias sweep and the number of bands tested."""
    intervals = alias_intervals(stages, fs=fs, bandwidth=bandwidth)
    if not intervals:
        return [], 0, 0
    n_int = len(intervals)
    lo = np.array([iv[0] for iv in intervals])
    hi = np.array([iv[1] for iv in intervals])
    img = np.array([iv[2] for iv in intervals])
    # rank the bands by their largest predicted gain on a coarse grid (edges included)
    m = int(np.clip(_COARSE_BUDGET // n_int, 9, 129))
    t = np.linspace(0.0, 1.0, m)
    peak = np.empty(n_int)
    for k in np.unique(img):
        sel = np.flatnonzero(img == k)
        f = lo[sel, None] + (hi[sel] - lo[sel])[:, None] * t[None, :]
        peak[sel] = np.abs(_path_gain(stages, f, fs=fs, image=int(k), up=up)).max(axis=1)
    n_sel = n_int if n_int <= budget // 2 else max(1, budget // 2)
    order = np.argsort(-peak, kind="stable")[:n_sel]
    tones = []
    for i in order:
        tones.append((_band_worst(stages, fs, up, lo[i], hi[i], int(img[i])), int(img[i]), True))
    # the rest of the budget evenly inside the same bands, worst bands first; the
    # grid of each band is shifted by a golden-ratio step so that the bands do not
    # all land on the same output frequencies (a band's centre lands on 0 Hz)
    rest = max(0, budget - n_sel)
    per, extra = divmod(rest, n_sel)
    for rank, i in enumerate(order):
        count = per + (1 if rank < extra else 0)
        if count:
            u = ((rank + 1) * _GOLDEN) % 1.0
            for x in lo[i] + (hi[i] - lo[i]) * (np.arange(count) + u) / count:
                tones.append((float(x), int(img[i]), False))
    return tones, n_int, n_sel


def _band_worst(stages, fs, up, lo, hi, image):
    """Frequency of the largest predicted gain in ``[lo, hi]``: dense argmax, then a bounded search."""
    f = np.linspace(lo, hi, _DENSE_POINTS)
    mag = np.abs(_path_gain(stages, f, fs=fs, image=image, up=up))
    i = int(np.argmax(mag))
    a, b = f[max(i - 1, 0)], f[min(i + 1, f.size - 1)]
    if b > a:
        res = scipy.optimize.minimize_scalar(
            lambda x: -abs(_path_gain(stages, np.array([x]), fs=fs, image=image, up=up)[0]),
            bounds=(a, b),
            method="bounded",
            options={"xatol": (hi - lo) * 1e-7},
        )
        if res.success and -res.fun > mag[i]:
            return float(res.x)
    return float(f[i])


def _noise_gain(stages, fs, up):
    """Output variance per unit of white input variance: the mean over the input band of ``sum_k |H_k / L|^2``."""
    n = 1 << 16
    f = (np.arange(n) / n - 0.5) * fs
    total = 0.0
    for k in range(up):
        total += float(np.mean(np.abs(_path_gain(stages, f, fs=fs, image=k, up=up)) ** 2))
    return total


def _tested_bands(stages, fs, bandwidth, aliases):
    """(image, lo, hi) of every folding band that holds at least one of the alias tones."""
    ivs = alias_intervals(stages, fs=fs, bandwidth=bandwidth)
    if not ivs or not aliases:
        return []
    lo = np.array([iv[0] for iv in ivs])
    hi = np.array([iv[1] for iv in ivs])
    img = np.array([iv[2] for iv in ivs])
    hit = np.zeros(lo.size, dtype=bool)
    for k in {t.image for t in aliases}:
        sel = np.flatnonzero(img == k)
        order = sel[np.argsort(lo[sel])]
        f = np.array([t.input_hz for t in aliases if t.image == k])
        j = np.searchsorted(lo[order], f, side="right") - 1
        ok = (j >= 0) & (f <= hi[order[np.clip(j, 0, None)]])
        hit[order[j[ok]]] = True
    return [(int(img[i]), float(lo[i]), float(hi[i])) for i in np.flatnonzero(hit)]
