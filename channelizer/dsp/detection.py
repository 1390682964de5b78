"""Noise floor and signal detection on a power spectral density.

The noise floor is a robust (median-based) estimate; detection finds the runs of bins
above it and measures each signal's centre, 99 % occupied bandwidth (ITU-R SM.328),
power and SNR.
"""

from dataclasses import dataclass
import math
import re

import numpy as np

from ..errors import ChannelizerError
from ..units import resolution_step
from .chi2 import chi2_ppf
from .spectrum import _db, _finite

#: Noise-only false-alarm probability of the clip level used by the noise-floor trimming.
_CLIP_FALSE_ALARM = 1e-3

#: Occupied bandwidth: fraction of power left out on each side (ITU-R SM.328).
_OBW_TAIL = 0.005

__all__ = [
    "DetectedSignal",
    "estimate_noise_floor",
    "noise_floor_profile",
    "detect_signals",
    "channel_list_from_signals",
    "median",
]

#: Regions of the local noise-floor estimate (fewer when they would hold under 64 bins).
FLOOR_REGIONS = 32
#: Neighbouring regions of the local noise floor differing by less than this (dB) are both noise.
FLOOR_STEP_DB = 3.0
#: Runs less than this far (dB) over the threshold may be fragments of a strong neighbour ...
FRAGMENT_MARGIN_DB = 3.0
#: ... when they lie within this many of its occupied widths.
FRAGMENT_REACH = 2.0
#: A detection whose power is mostly within this many window main lobes of its peak is a carrier.
_CARRIER_SHARE = 0.5


def median(values):
    """Median of the values of an array, as :func:`numpy.median` gives it.

    The middle value of the sorted values, or the mean of the two middle ones for
    an even count (NaN when any value is NaN), found by a partial sort
    (:func:`numpy.partition`).  :func:`numpy.median` itself imports ``numpy.ma`` on
    its first call, about 25 ms of a command's start-up.
    """
    a = np.asarray(values, dtype=float).ravel()
    n = a.size
    if n == 0:
        raise ValueError("median of an empty array")
    if np.isnan(a).any():
        return math.nan
    k = n // 2
    if n % 2:
        return float(np.partition(a, k)[k])
    part = np.partition(a, (k - 1, k))
    return float((part[k - 1] + part[k]) / 2)


def _median_to_mean(dof, quantile=0.5):
    """``q``-quantile over mean of a chi-square variable with ``dof`` degrees of freedom."""
    return chi2_ppf(quantile, dof) / dof


def _dilate(mask, half):
    if half <= 0 or not mask.any():
        return mask
    return np.convolve(mask.astype(np.int64), np.ones(2 * half + 1, dtype=np.int64), mode="same") > 0


def estimate_noise_floor(psd):
    """Noise PSD (linear, per Hz) under the signals of a Welch estimate.

    Parameters
    ----------
    psd : Psd

    Returns
    -------
    float
        Noise power per Hz in full-scale units.

    Notes
    -----
    Each bin of a Welch average of Gaussian noise of density ``N0`` is close to
    ``N0 chi2(nu) / nu`` with ``nu = psd.dof`` equivalent degrees of freedom
    (Welch 1967 [1]_; ``nu = 2K`` for ``K`` segments without overlap), whose
    median is ``N0 m(nu)``, ``m(nu) = chi2.ppf(0.5, nu) / nu`` (``ln 2`` for
    ``nu = 2``, tending to 1).  The estimate starts from the median over all
    bins divided by ``m(nu)``, a median-based noise estimator robust to
    signals in a minority of the bins, then trims them: bins above the level
    noise alone exceeds with probability 1e-3, and their neighbours within
    ``2 * enbw`` bins (window leakage), are left out, and the floor becomes the
    median of the bins kept divided by the median-to-mean ratio of the chi-square
    law truncated at that level, ``chi2.ppf(0.5 (1 - 1e-3), nu) / nu``; this is
    repeated until the set of kept bins settles.  The noise floor is assumed
    flat across the band.

    References
    ----------
    .. [1] P. D. Welch, IEEE Trans. Audio Electroacoust. 15(2):70-73, 1967.
    """
    p = np.asarray(psd.psd, dtype=float)
    if p.size == 0:
        raise ChannelizerError("noise floor of an empty spectrum")
    nu = float(psd.dof)
    floor = median(p) / _median_to_mean(nu)
    if floor <= 0:
        return 0.0
    clip = _median_to_mean(nu, 1.0 - _CLIP_FALSE_ALARM)  # chi2.isf(1e-3, nu) / nu
    kept_ratio = _median_to_mean(nu, 0.5 * (1.0 - _CLIP_FALSE_ALARM))
    guard = int(math.ceil(2.0 * psd.enbw_bins))
    keep = None
    for _ in range(50):
        new_keep = ~_dilate(p > floor * clip, guard)
        if not new_keep.any():
            break
        if keep is not None and np.array_equal(new_keep, keep):
            break
        keep = new_keep
        floor = median(p[keep]) / kept_ratio
    return floor


def noise_floor_profile(psd, *, regions=FLOOR_REGIONS):
    """Noise PSD per bin (linear, per Hz), estimated locally: a shaped receiver passband.

    Parameters
    ----------
    psd : Psd
    regions : int
        The band is cut into this many equal regions (fewer when a region would hold
        fewer than 64 bins).

    Returns
    -------
    ndarray
        One noise density per bin of ``psd``.

    Notes
    -----
    Each region's level is the median of its bins over the chi-square
    median-to-mean ratio (see :func:`estimate_noise_floor`).  Regions within
    ``FLOOR_STEP_DB`` of the band-wide floor are noise; from them the noise grows
    region by region into neighbours whose level differs by less than
    ``FLOOR_STEP_DB`` from theirs: a receiver's passband shape changes smoothly,
    while the edge of a wide signal jumps.  Regions never reached (under a wide
    signal) take the floor interpolated, in dB, from the nearest noise regions.
    Last, bins standing above the local floor by more than noise does with
    probability 1e-3 (and their leakage guard) are left out, and each noise
    region's floor becomes the median of the bins kept, over the truncated
    chi-square ratio.  A wide signal within ``FLOOR_STEP_DB`` of the floor beside
    it is taken for part of the floor's shape.
    """
    p = np.asarray(psd.psd, dtype=float)
    n = p.size
    regions = int(max(1, min(regions, n // 64)))
    floor = estimate_noise_floor(psd)
    if regions == 1 or floor <= 0:
        return np.full(n, floor)
    nu = float(psd.dof)
    bounds = np.linspace(0, n, regions + 1).astype(int)
    centres = 0.5 * (bounds[:-1] + bounds[1:] - 1)
    level = np.array([median(p[a:b]) for a, b in zip(bounds[:-1], bounds[1:])]) / _median_to_mean(nu)
    db = 10.0 * np.log10(np.maximum(level, 1e-300))
    noise = np.abs(db - 10.0 * math.log10(floor)) < FLOOR_STEP_DB
    if not noise.any():
        noise[int(np.argmin(db))] = True
    while True:  # grow into smoothly continuing neighbours
        grow = np.zeros_like(noise)
        grow[1:] |= noise[:-1] & (np.abs(db[1:] - db[:-1]) < FLOOR_STEP_DB)
        grow[:-1] |= noise[1:] & (np.abs(db[:-1] - db[1:]) < FLOOR_STEP_DB)
        grow &= ~noise
        if not grow.any():
            break
        noise |= grow
    profile = 10.0 ** np.interp(np.arange(n), centres[noise], db[noise] / 10.0)
    # refine the noise regions with the trimmed median against the local floor
    clip = _median_to_mean(nu, 1.0 - _CLIP_FALSE_ALARM)  # chi2.isf(1e-3, nu) / nu
    keep = ~_dilate(p > profile * clip, int(math.ceil(2.0 * psd.enbw_bins)))
    kept_ratio = _median_to_mean(nu, 0.5 * (1.0 - _CLIP_FALSE_ALARM))
    for r in np.flatnonzero(noise):
        a, b = bounds[r], bounds[r + 1]
        kept = p[a:b][keep[a:b]]
        if kept.size >= max(8, (b - a) // 4):
            db[r] = 10.0 * math.log10(max(median(kept) / kept_ratio, 1e-300))
    return 10.0 ** np.interp(np.arange(n), centres[noise], db[noise] / 10.0)


@dataclass(frozen=True)
class DetectedSignal:
    """One occupied band found in a spectrum.

    Attributes
    ----------
    center_hz : float
        Centre of the occupied band, ``(lower_hz + upper_hz) / 2``.
    occupied_bandwidth_hz : float
        99 % power bandwidth (ITU-R SM.328): ``upper_hz - lower_hz``.
    lower_hz, upper_hz : float
        Frequencies with 0.5 % of the signal's power below and above them.
    power_dbfs : float
        Noise-subtracted power integrated over the detected region and its guard.
    snr_db : float
        That power over the noise power in the occupied bandwidth,
        ``power / (noise_floor * occupied_bandwidth_hz)``.
    peak_hz : float
        Centre of the strongest bin.
    carrier : bool
        Whether most of the power sits in the window's main lobe around the peak; the
        centre is then the interpolated peak, otherwise the occupied band's middle.
    """

    center_hz: float
    occupied_bandwidth_hz: float
    lower_hz: float
    upper_hz: float
    power_dbfs: float
    snr_db: float
    peak_hz: float
    carrier: bool = False


def _runs(mask):
    """Start and end (inclusive) indices of the runs of True in ``mask``."""
    d = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    return np.flatnonzero(d == 1), np.flatnonzero(d == -1) - 1


def _crossing(cum, edges, target):
    """First frequency where the piecewise-linear ``cum`` (at ``edges``) reaches ``target``."""
    i = int(np.argmax(cum >= target))
    if i == 0:
        return float(edges[0])
    c0, c1 = cum[i - 1], cum[i]
    return float(edges[i - 1] + (edges[i] - edges[i - 1]) * (target - c0) / (c1 - c0))


def detect_signals(psd, *, threshold_db=10.0, min_bandwidth_hz=None, noise_floor=None):
    """Find the occupied bands of a spectrum and measure each.

    Parameters
    ----------
    psd : Psd
    threshold_db : float
        A bin is occupied when it is this far above the noise floor.
    min_bandwidth_hz : float, optional
        Leave out signals whose occupied bandwidth is narrower.
    noise_floor : float or ndarray, optional
        Noise PSD (linear, per Hz), one value or one per bin (e.g.
        :func:`noise_floor_profile`); by default :func:`estimate_noise_floor`.

    Returns
    -------
    list of DetectedSignal
        In order of frequency.

    Notes
    -----
    Runs of occupied bins separated by fewer than ``g = max(3, ceil(2 enbw_bins))``
    free bins are merged (a window's main lobe is about ``2 enbw`` bins wide,
    Harris 1978 [2]_); each region is then widened by ``g`` bins on both sides,
    never past the midpoint to a neighbouring region, to take in the skirts
    below the threshold.  On the noise-subtracted PSD over the widened region,
    read as constant across each bin, the occupied band runs from the frequency
    with 0.5 % of the power below to the one with 0.5 % above (ITU-R SM.328
    [3]_); a flat band of width ``B`` has 99 % bandwidth ``0.99 B``.  Widths are
    limited by the resolution: a pure tone reads about the window's own 99 %
    width (about 2-3 bins for Hann).

    A signal is kept when its in-band SNR (its power over the noise in its
    occupied band) reaches ``threshold_db``.  A run less than
    ``FRAGMENT_MARGIN_DB`` over that, within ``FRAGMENT_REACH`` occupied widths of
    a stronger signal, is a fragment of that emission and joins it; a run under
    the threshold anywhere else is dropped.  When at least half the power lies within ``2 enbw`` bins of the
    peak (a carrier), the centre is the peak refined by Gaussian interpolation
    to a fraction of a bin; otherwise it is the middle of the occupied band.

    References
    ----------
    .. [1] P. D. Welch, IEEE Trans. Audio Electroacoust. 15(2):70-73, 1967.
    .. [2] F. J. Harris, Proc. IEEE 66(1):51-83, 1978.
    .. [3] ITU-R Recommendation SM.328, Spectra and bandwidth of emissions.
    """
    threshold_db = _finite("threshold_db", threshold_db)
    if min_bandwidth_hz is not None:
        min_bandwidth_hz = _finite("min_bandwidth_hz", min_bandwidth_hz)
    p = np.asarray(psd.psd, dtype=float)
    floor = _floor_per_bin(psd, p, noise_floor)
    f = np.asarray(psd.freqs, dtype=float)
    gap = max(3, int(math.ceil(2.0 * psd.enbw_bins)))
    thr = 10.0 ** (threshold_db / 10.0)

    starts, ends = _runs(p > floor * thr)
    if starts.size == 0:
        return []
    # merge runs separated by fewer than `gap` free bins
    split = (starts[1:] - ends[:-1] - 1) >= gap
    starts = starts[np.concatenate([[True], split])]
    ends = ends[np.concatenate([split, [True]])]
    # fragments (in-band SNR under the threshold) join a strong neighbour close by, or go
    first = _measure_runs(psd, p, floor, f, starts, ends, gap)
    snr = np.array([-math.inf if m is None else m.snr_db for m in first])
    width = np.array([0.0 if m is None else m.occupied_bandwidth_hz / psd.bin_hz for m in first])
    starts, ends = _absorb_fragments(starts, ends, snr - threshold_db, np.maximum(width, ends - starts + 1))
    found = []
    for sig in _measure_runs(psd, p, floor, f, starts, ends, gap):
        if sig is None or sig.snr_db < threshold_db:
            continue
        if min_bandwidth_hz is not None and sig.occupied_bandwidth_hz < min_bandwidth_hz:
            continue
        found.append(sig)
    return found


def _floor_per_bin(psd, p, noise_floor):
    if noise_floor is None:
        return np.full(p.size, estimate_noise_floor(psd))
    arr = np.asarray(noise_floor, dtype=float)
    if arr.ndim == 0:
        arr = np.full(p.size, float(_finite("noise_floor", float(arr))))
    if arr.shape != p.shape or not np.all(np.isfinite(arr)):
        raise ChannelizerError(f"noise_floor must be one finite density or one per bin ({p.size}), got shape {arr.shape}")
    if np.any(arr < 0):
        raise ChannelizerError(f"noise_floor must be a non-negative PSD, got {noise_floor!r}")
    return arr


def _absorb_fragments(starts, ends, margin_db, width):
    """Runs after fragments join a strong neighbour close by; weak isolated runs drop out.

    ``margin_db`` is each run's in-band SNR over the threshold and ``width`` its
    width in bins.  A run at least ``FRAGMENT_MARGIN_DB`` over the threshold is
    strong.  Any other run within ``FRAGMENT_REACH`` of a strong run's widths of it
    is a fragment of that emission (a sideband, a lobe of its spectrum, a ragged
    skirt) and joins it; a run under the threshold anywhere else is a noise peak
    that crossed it in a few bins and is dropped.
    """
    strong = margin_db >= FRAGMENT_MARGIN_DB
    s, e = starts.copy(), ends.copy()
    keep = margin_db >= 0
    idx = np.flatnonzero(strong)
    for i in np.flatnonzero(~strong) if idx.size else ():
        gaps = np.where(idx > i, starts[idx] - ends[i] - 1, starts[i] - ends[idx] - 1)
        k = int(np.argmin(gaps))
        j = idx[k]
        if gaps[k] <= FRAGMENT_REACH * width[j]:
            s[j], e[j] = min(s[j], starts[i]), max(e[j], ends[i])
            keep[i] = False
    return s[keep], e[keep]


def _interpolated_peak(p, k):
    """Fractional bin offset of the peak at ``k``: a parabola through the log powers.

    Gaussian interpolation (Gasior & Gonzalez, CERN AB-Note-2004-021): exact for a
    Gaussian window and within a few hundredths of a bin for Hann.
    """
    if k <= 0 or k >= p.size - 1 or min(p[k - 1], p[k], p[k + 1]) <= 0:
        return 0.0
    la, lb, lc = np.log(p[k - 1 : k + 2])
    den = la - 2.0 * lb + lc
    if den >= 0:
        return 0.0
    return float(np.clip(0.5 * (la - lc) / den, -0.5, 0.5))


def _measure_runs(psd, p, floor, f, starts, ends, gap):
    """One DetectedSignal (or None) per run, each widened by ``gap`` bins short of its neighbours."""
    if starts.size == 0:
        return []
    df = psd.bin_hz
    # widen by the guard, not past the midpoint to the neighbours
    lo = np.maximum(starts - gap, 0)
    hi = np.minimum(ends + gap, p.size - 1)
    mid = (ends[:-1] + starts[1:]) // 2
    lo[1:] = np.maximum(lo[1:], mid + 1)
    hi[:-1] = np.minimum(hi[:-1], mid)
    lobe = int(math.ceil(2.0 * psd.enbw_bins))
    out = []
    for a, b, s0, s1 in zip(lo, hi, starts, ends):
        part = (p[a : b + 1] - floor[a : b + 1]) * df
        cum = np.concatenate([[0.0], np.cumsum(part)])
        total = cum[-1]
        if total <= 0:
            out.append(None)
            continue
        edges = f[a] - df / 2 + df * np.arange(part.size + 1)
        lower = _crossing(cum, edges, _OBW_TAIL * total)
        # upper edge: the same crossing read from the top end
        rcum = np.concatenate([[0.0], np.cumsum(part[::-1])])
        upper = -_crossing(rcum, -edges[::-1], _OBW_TAIL * total)
        obw = upper - lower
        peak = s0 + int(np.argmax(p[s0 : s1 + 1]))
        noise = float(np.mean(floor[a : b + 1])) * obw
        snr = total / noise if noise > 0 else math.inf
        near = part[max(peak - lobe, a) - a : min(peak + lobe, b) - a + 1].sum()
        carrier = near >= _CARRIER_SHARE * total
        centre = f[peak] + _interpolated_peak(p, peak) * df if carrier else 0.5 * (lower + upper)
        out.append(
            DetectedSignal(
                center_hz=float(centre),
                occupied_bandwidth_hz=obw,
                lower_hz=lower,
                upper_hz=upper,
                power_dbfs=float(_db(total)),
                snr_db=float(_db(snr)),
                peak_hz=float(f[peak]),
                carrier=bool(carrier),
            )
        )
    return out


_PREFIX = re.compile(r"^[A-Za-z][A-Za-z0-9_-]*$")


def channel_list_from_signals(signals, *, prefix="sig", resolution=None):
    """Channel entries for detected signals, named ``sig01``, ``sig02``, ...

    Parameters
    ----------
    signals : sequence of DetectedSignal
    prefix : str
        Start of each name: a letter, then letters, digits, ``_`` or ``-``.
    resolution : float, optional
        The spectrum's resolution in Hz: centres are rounded, and bandwidths
        rounded up, to the digit it gives (:func:`channelizer.units.resolution_step`).

    Returns
    -------
    list of dict
        ``{'name': str, 'frequency': float, 'bandwidth': float}`` per signal, in
        the given order: the centre (absolute Hz, as on the spectrum's axis) and
        the 99 % occupied bandwidth in Hz.  Numbers have at least two digits,
        more when there are 100 signals or more.
    """
    if not isinstance(prefix, str) or not _PREFIX.match(prefix):
        raise ChannelizerError(
            f"channel name prefix must be a letter followed by letters, digits, '_' or '-', got {prefix!r}"
        )
    signals = list(signals)
    step = None if resolution is None else resolution_step(resolution)
    width = max(2, len(str(len(signals))))
    out = []
    for i, s in enumerate(signals, start=1):
        if not isinstance(s, DetectedSignal):
            raise ChannelizerError(f"signal {i} is not a DetectedSignal, got {type(s).__name__}")
        out.append(
            {
                "name": f"{prefix}{i:0{width}d}",
                "frequency": _rounded(s.center_hz, step, round),
                "bandwidth": _rounded(s.occupied_bandwidth_hz, step, math.ceil),
            }
        )
    return out


def _rounded(value, step, how):
    """``value`` to a whole number of ``step`` (None: unchanged), as a clean float."""
    if step is None:
        return float(value)
    digits = max(0, -int(math.floor(math.log10(step))))
    return float(round(how(value / step) * step, digits))
