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
from .chi2 import chi2_ppf
from .spectrum import _db, _finite

#: Noise-only false-alarm probability of the clip level used by the noise-floor trimming.
_CLIP_FALSE_ALARM = 1e-3

#: Occupied bandwidth: fraction of power left out on each side (ITU-R SM.328).
_OBW_TAIL = 0.005

__all__ = ["DetectedSignal", "estimate_noise_floor", "detect_signals", "channel_list_from_signals"]


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
    floor = float(np.median(p)) / _median_to_mean(nu)
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
        floor = float(np.median(p[keep])) / kept_ratio
    return floor


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
    """

    center_hz: float
    occupied_bandwidth_hz: float
    lower_hz: float
    upper_hz: float
    power_dbfs: float
    snr_db: float
    peak_hz: float


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
    noise_floor : float, optional
        Noise PSD (linear, per Hz); by default :func:`estimate_noise_floor`.

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

    References
    ----------
    .. [1] P. D. Welch, IEEE Trans. Audio Electroacoust. 15(2):70-73, 1967.
    .. [2] F. J. Harris, Proc. IEEE 66(1):51-83, 1978.
    .. [3] ITU-R Recommendation SM.328, Spectra and bandwidth of emissions.
    """
    threshold_db = _finite("threshold_db", threshold_db)
    if min_bandwidth_hz is not None:
        min_bandwidth_hz = _finite("min_bandwidth_hz", min_bandwidth_hz)
    floor = estimate_noise_floor(psd) if noise_floor is None else _finite("noise_floor", noise_floor)
    if floor < 0:
        raise ChannelizerError(f"noise_floor must be a non-negative PSD, got {noise_floor!r}")
    p = np.asarray(psd.psd, dtype=float)
    f = np.asarray(psd.freqs, dtype=float)
    df = psd.bin_hz
    gap = max(3, int(math.ceil(2.0 * psd.enbw_bins)))

    starts, ends = _runs(p > floor * 10.0 ** (threshold_db / 10.0))
    if starts.size == 0:
        return []
    # merge runs separated by fewer than `gap` free bins
    split = (starts[1:] - ends[:-1] - 1) >= gap
    starts = starts[np.concatenate([[True], split])]
    ends = ends[np.concatenate([split, [True]])]

    # widen by the guard, not past the midpoint to the neighbours
    lo = np.maximum(starts - gap, 0)
    hi = np.minimum(ends + gap, p.size - 1)
    mid = (ends[:-1] + starts[1:]) // 2
    lo[1:] = np.maximum(lo[1:], mid + 1)
    hi[:-1] = np.minimum(hi[:-1], mid)

    found = []
    for a, b, s0, s1 in zip(lo, hi, starts, ends):
        part = (p[a : b + 1] - floor) * df
        cum = np.concatenate([[0.0], np.cumsum(part)])
        total = cum[-1]
        if total <= 0:
            continue
        edges = f[a] - df / 2 + df * np.arange(part.size + 1)
        lower = _crossing(cum, edges, _OBW_TAIL * total)
        # upper edge: the same crossing read from the top end
        rcum = np.concatenate([[0.0], np.cumsum(part[::-1])])
        upper = -_crossing(rcum, -edges[::-1], _OBW_TAIL * total)
        obw = upper - lower
        if min_bandwidth_hz is not None and obw < min_bandwidth_hz:
            continue
        peak = s0 + int(np.argmax(p[s0 : s1 + 1]))
        snr = total / (floor * obw) if floor > 0 else math.inf
        found.append(
            DetectedSignal(
                center_hz=0.5 * (lower + upper),
                occupied_bandwidth_hz=obw,
                lower_hz=lower,
                upper_hz=upper,
                power_dbfs=float(_db(total)),
                snr_db=float(_db(snr)),
                peak_hz=float(f[peak]),
            )
        )
    return found


_PREFIX = re.compile(r"^[A-Za-z][A-Za-z0-9_-]*$")


def channel_list_from_signals(signals, *, prefix="sig"):
    """Channel entries for detected signals, named ``sig01``, ``sig02``, ...

    Parameters
    ----------
    signals : sequence of DetectedSignal
    prefix : str
        Start of each name: a letter, then letters, digits, ``_`` or ``-``.

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
    width = max(2, len(str(len(signals))))
    out = []
    for i, s in enumerate(signals, start=1):
        if not isinstance(s, DetectedSignal):
            raise ChannelizerError(f"signal {i} is not a DetectedSignal, got {type(s).__name__}")
        out.append(
            {
                "name": f"{prefix}{i:0{width}d}",
                "frequency": float(s.center_hz),
                "bandwidth": float(s.occupied_bandwidth_hz),
            }
        )
    return out
