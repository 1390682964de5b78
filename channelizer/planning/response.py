"""Composite response of a chain and the figures predicted from it.

The chain is linear and periodically time-varying; seen from its input, a
component at frequency ``x`` (Hz, at the input rate) reaches the output through
every stage's response at ``x`` (each periodic in its own input rate, the noble
identity, Oppenheim & Schafer sec. 4.7) and lands at ``x`` folded into the
output band.  A rational stage (up L, down M) at input rate ``fs_r`` also makes
images: the path ``k`` (0 <= k < L) carries ``x`` through the interpolation
filter at ``x + k fs_r`` and lands at ``x + k fs_r`` folded into the output band.
"""

from dataclasses import dataclass

import numpy as np

from .limits import check_time
from .stages import ResamplerStage, chain_rates

__all__ = ["composite_response", "normalised_response", "impulse_seconds", "alias_intervals", "landing_intervals", "path_of", "resampler_of", "image_step", "Prediction", "predict", "fold"]


def fold(f, fs):
    """Fold ``f`` into ``[-fs/2, fs/2)``."""
    return (np.asarray(f, dtype=float) + fs / 2.0) % fs - fs / 2.0


def composite_response(stages, f, *, fs, image=0):
    """Response from the chain input to its output at input frequencies ``f`` (Hz).

    Parameters
    ----------
    stages : sequence of stages
    f : array_like
        Input frequencies in Hz.
    fs : float
        Input rate in Hz.
    image : int
        Which image path of a rational stage (0: the direct path).

    Returns
    -------
    ndarray of complex
        The product of every stage's response; unit gain at DC for a planned chain.
    """
    f = np.asarray(f, dtype=float)
    rates = chain_rates(stages, fs=fs)
    h = np.ones(f.shape, dtype=complex)
    shift = 0.0
    for st, rate in zip(stages, rates):
        if isinstance(st, ResamplerStage):
            shift = image * rate
        h = h * st.response(f + shift, fs=rate)
    return h


def normalised_response(stages, f, *, fs, image=0):
    """The composite response over the rational stage's interpolation factor L.

    A rational stage's filter has gain L (it follows L-1 inserted zeros), so the
    composite of a plan with one has DC gain L; divided by L, every path reads in
    the units of the chain's output (unit gain at DC).  Every figure shown to a
    user (predictions, verify, the alias audit, the plots) uses this one.

    References
    ----------
    A. V. Oppenheim and R. W. Schafer, *Discrete-Time Signal Processing*, 3rd ed.,
    2010, sec. 4.6.2 (interpolation filter of gain L).
    """
    res, _ = resampler_of(stages, fs=fs)
    up = res.interpolation if res is not None else 1
    return composite_response(stages, f, fs=fs, image=image) / up


def impulse_seconds(stages, *, fs):
    """Length of the chain's impulse response in seconds (every stage's taps at their own rate)."""
    total = 0.0
    for st, rate in zip(stages, chain_rates(stages, fs=fs)):
        tap_rate = rate * st.interpolation if isinstance(st, ResamplerStage) else rate
        total += (st.num_taps - 1) / tap_rate
    return total


def resampler_of(stages, *, fs):
    """The chain's rational stage and its input rate; ``(None, output rate)`` without one."""
    rates = chain_rates(stages, fs=fs)
    for st, rate in zip(stages, rates):
        if isinstance(st, ResamplerStage):
            return st, rate
    return None, rates[-1]


def image_step(stages, *, fs):
    """Frequency step between image paths: the rational stage's input rate (0 without one)."""
    res, rate = resampler_of(stages, fs=fs)
    return rate if res is not None else 0.0


def _interval_arrays(stages, fs, bands, *, skip_direct):
    """Per image path ``k``: arrays (lo, hi) of the input intervals whose path ``k``
    lands in any of ``bands`` (output-band offsets), in the order of :func:`_intervals`."""
    fs_out = chain_rates(stages, fs=fs)[-1]
    res, fs_r = resampler_of(stages, fs=fs)
    n_images = res.interpolation if res is not None else 1
    reach = max(abs(e) for band in bands for e in band)
    edges = np.array(bands, dtype=float)
    out = []
    for k in range(n_images):
        offset = k * fs_r
        j_lo = int(np.floor((-fs / 2.0 + offset - reach) / fs_out))
        j_hi = int(np.ceil((fs / 2.0 + offset + reach) / fs_out))
        centre = np.arange(j_lo, j_hi + 1)[:, None] * fs_out - offset  # (j, band)
        lo = np.maximum(centre + edges[:, 0], -fs / 2.0)
        hi = np.minimum(centre + edges[:, 1], fs / 2.0)
        keep = lo < hi
        if skip_direct and k == 0:
            keep[-j_lo, :] = False  # j = 0 on the direct path: the passband itself
        out.append((k, lo[keep], hi[keep]))
    return out


def _intervals(stages, fs, bands, *, skip_direct):
    """Input intervals whose image paths land in any of ``bands`` (output-band offsets)."""
    return [(a, b, k) for k, lo, hi in _interval_arrays(stages, fs, bands, skip_direct=skip_direct)
            for a, b in zip(lo.tolist(), hi.tolist())]


def alias_intervals(stages, *, fs, bandwidth):
    """Input-frequency intervals that the chain folds onto the final passband.

    Returns
    -------
    list of (lo, hi, image)
        Intervals in Hz within ``[-fs/2, fs/2]`` and the image path that carries
        them; the direct passband ``[-bw/2, bw/2]`` on path 0 is excluded.
    """
    fp = bandwidth / 2.0
    return _intervals(stages, fs, [(-fp, fp)], skip_direct=True)


def landing_intervals(stages, *, fs, lo, hi):
    """Input-frequency intervals that land at ``lo <= |g| <= hi`` in the output band.

    Returns a list of (lo, hi, image) like :func:`alias_intervals`, the direct
    path included.
    """
    return _intervals(stages, fs, [(lo, hi), (-hi, -lo)], skip_direct=False)


def path_of(stages, f, *, fs, bandwidth):
    """The path that carries input frequency ``f`` onto the passband: 0 for an alias
    (or the direct path), ``k > 0`` for image path ``k`` of the rational stage.

    A frequency inside the passband can reach it again only as an image; outside it,
    the direct path's alias is named first when both apply.
    """
    fs_out = chain_rates(stages, fs=fs)[-1]
    res, fs_r = resampler_of(stages, fs=fs)
    k = np.arange(res.interpolation if res is not None else 1)
    x = f + k * fs_r  # where path k puts f, before the final folding
    fp = bandwidth / 2.0
    hit = np.zeros(k.shape, dtype=bool)
    for shift in (-1, 0, 1):  # the fold nearest x, and its neighbours when fp exceeds fs_out / 2
        j = np.round(x / fs_out) + shift
        d = x - j * fs_out
        hit |= (np.abs(d) <= fp) & ~((k == 0) & (j == 0))
    if abs(f) > fs / 2.0:
        hit[:] = False
    if abs(f) <= fp:
        hit[0] = False  # inside the passband only an image can bring it back
    ks = np.flatnonzero(hit)
    return int(ks[0]) if ks.size else 0


@dataclass(frozen=True)
class Prediction:
    """Figures computed from a chain's composite response.

    Attributes
    ----------
    passband_ripple_db : float
        Peak-to-peak ripple of the composite over ``[-bw/2, bw/2]``.
    alias_rejection_db : float
        Smallest attenuation, relative to the gain at DC, of any input frequency
        outside the passband that folds onto the final passband.
    worst_alias_hz : float
        Input frequency (offset from the centre) where that minimum occurs.
    passband_gain_db : float
        Gain at DC of the normalised response (:func:`normalised_response`).
    adjacent_rejection_db : float or None
        With a stopband edge: the smallest attenuation of anything that lands
        beyond the edge in the output band (the neighbours, direct or folded).
    """

    passband_ripple_db: float
    alias_rejection_db: float
    worst_alias_hz: float
    passband_gain_db: float
    adjacent_rejection_db: float | None = None


def _grid(lo, hi, n):
    return np.linspace(lo, hi, n)


def _magnitude(stages, f, *, fs, image):
    """``|normalised_response|`` from each stage's magnitude (no phases formed)."""
    f = np.asarray(f, dtype=float)
    rates = chain_rates(stages, fs=fs)
    res, _ = resampler_of(stages, fs=fs)
    mag = np.full(f.shape, 1.0 / (res.interpolation if res is not None else 1))
    shift = 0.0
    for st, rate in zip(stages, rates):
        if isinstance(st, ResamplerStage):
            shift = image * rate
        mag = mag * (st.magnitude(f + shift, fs=rate) if hasattr(st, "magnitude") else np.abs(st.response(f + shift, fs=rate)))
    return mag


def _worst(stages, by_image, fs, dc, points_per_band, refine=4, refine_points=2001):
    """Smallest attenuation over the intervals ``by_image`` (image, lo array, hi array):
    a coarse pass over every band, then a dense pass over the ``refine`` worst bands of
    each image path (with many image paths, over the ``refine`` x 4 worst bands of all
    paths together)."""
    coarse = []  # (band minimum, image, band)
    worst_db, worst_f = np.inf, float("nan")
    steps = np.linspace(0.0, 1.0, points_per_band)
    paths = [(k, lo, hi) for k, lo, hi in by_image if lo.size]
    for k, lo, hi in paths:
        check_time()  # hundreds of image paths behind a large L: the planner's budget holds here too
        f = (lo[:, None] + (hi - lo)[:, None] * steps).ravel()
        att = -20.0 * np.log10(np.maximum(_magnitude(stages, f, fs=fs, image=k), 1e-300) / dc)
        per_band = att.reshape(lo.size, points_per_band).min(axis=1)
        i = int(np.argmin(att))
        if att[i] < worst_db:
            worst_db, worst_f = float(att[i]), float(f[i])
        coarse += [(float(per_band[b]), k, (float(lo[b]), float(hi[b]))) for b in np.argsort(per_band)[:refine]]
    if len(paths) > refine:
        coarse = sorted(coarse, key=lambda t: t[0])[: 4 * refine]
    for _, k, (lo, hi) in coarse:
        check_time()
        fine = _grid(lo, hi, refine_points)
        a = -20.0 * np.log10(np.maximum(_magnitude(stages, fine, fs=fs, image=k), 1e-300) / dc)
        i = int(np.argmin(a))
        if a[i] < worst_db:
            worst_db, worst_f = float(a[i]), float(fine[i])
    return worst_db, worst_f


def predict(stages, *, fs, bandwidth, stopband_edge=None, points_per_band=24, refine_points=2001):
    """Predicted passband ripple and alias rejection of a chain.

    The alias bands are sampled at ``points_per_band`` points each, edges included,
    the worst few again at ``refine_points``.
    With ``stopband_edge`` the rejection of everything landing beyond it is
    computed too.
    """
    fp = bandwidth / 2.0
    dc = abs(normalised_response(stages, np.array([0.0]), fs=fs)[0])
    pb = _grid(0.0, fp, 257)
    pb = np.concatenate([-pb[::-1], pb])
    mag_pb = np.abs(normalised_response(stages, pb, fs=fs))
    ripple = 20.0 * np.log10(mag_pb.max() / mag_pb.min())
    intervals = _interval_arrays(stages, fs, [(-fp, fp)], skip_direct=True)  # alias_intervals, as arrays
    worst_db, worst_f = _worst(stages, intervals, fs, dc, points_per_band, refine_points=refine_points)
    adjacent = None
    if stopband_edge is not None:
        fs_out = chain_rates(stages, fs=fs)[-1]
        lo, hi = stopband_edge, fs_out / 2.0
        land = _interval_arrays(stages, fs, [(lo, hi), (-hi, -lo)], skip_direct=False)  # landing_intervals
        adjacent, _ = _worst(stages, land, fs, dc, points_per_band, refine_points=refine_points)
    return Prediction(
        passband_ripple_db=float(ripple),
        alias_rejection_db=float(worst_db),
        worst_alias_hz=worst_f,
        passband_gain_db=float(20.0 * np.log10(dc)),
        adjacent_rejection_db=None if adjacent is None else float(adjacent),
    )
