"""Design of the individual stages, each only as strict as the final channel needs.

A stage that decimates from ``fs`` to ``fo = fs / D`` must attenuate only the
bands ``k fo +- fp`` (k >= 1), which fold onto the final passband ``[0, fp]``
at its output; everything else is left free ("don't care").  Later stages
remove what lands elsewhere (Crochiere & Rabiner, Proc. IEEE 69(3), 1981).
Half-bands use the Vaidyanathan & Nguyen (1987) construction; FIRs are
equiripple (Parks-McClellan, :mod:`.remez_exchange`); the CIC compensator is a
minimax fit to ``1/|H_cic|`` (the same exchange, or a linear programme where a
cap on the don't-care bands binds, :mod:`.minimax`).  numpy alone: importing
scipy.signal would cost every ``plan`` command about a second.
"""

import functools
import math

import numpy as np

from ..errors import ChannelizerError
from ..units import format_hz
from .limits import check_time
from .kaiser import kaiser_beta, kaiser_length, kaiser_lowpass
from .minimax import minimax_fit
from .remez_exchange import equiripple_fit, remez_bands
from .stages import CicStage, fir_response

__all__ = [
    "alias_bands",
    "herrmann_length",
    "design_halfband",
    "design_decimator",
    "design_compensator",
    "choose_cic_order",
    "design_kaiser",
    "FirDesign",
]

MAX_TAPS = 4001
#: Longest compensator whose length the capped fit (:func:`minimax.minimax_fit`) tries
#: to shorten by a few taps; longer ones keep the uncapped fit's length.
MAX_LP_TAPS = 100


def alias_bands(fs, decimation, fp):
    """Bands in ``[0, fs/2]`` that fold onto ``[-fp, fp]`` after decimating by ``decimation``."""
    fo = fs / decimation
    bands = []
    k = 1
    while k * fo - fp < fs / 2.0:
        bands.append((k * fo - fp, min(k * fo + fp, fs / 2.0)))
        k += 1
    return bands


def herrmann_length(dp, ds, df):
    """Equiripple FIR length estimate of Herrmann, Rabiner & Chan (BSTJ 52(6), 1973).

    ``N = Dinf(dp, ds) / df - f(dp, ds) df + 1`` with ``df`` the transition width
    over the sample rate.
    """
    lp, ls = math.log10(dp), math.log10(ds)
    a = (5.309e-3, 7.114e-2, -4.761e-1, -2.66e-3, -5.941e-1, -4.278e-1)
    dinf = (a[0] * lp**2 + a[1] * lp + a[2]) * ls + (a[3] * lp**2 + a[4] * lp + a[5])
    f = 11.01217 + 0.51244 * (lp - ls)
    return dinf / df - f * df + 1


class FirDesign:
    """Result of a stage design: taps and the worst deviations found on its bands."""

    def __init__(self, taps, passband_error, stopband_peak):
        self.taps = tuple(float(t) for t in taps)
        self.passband_error = float(passband_error)
        self.stopband_peak = float(stopband_peak)


def _dense(lo, hi, n):
    return np.linspace(lo, hi, max(int(n), 8))


def _band_grid(lo, hi, *, fs, lattice, least):
    """``[lo, hi]``: its edges and the points ``k fs / (2 lattice)`` between them (runs
    the exchange evaluates by FFT), or ``least`` evenly spaced points."""
    step = fs / (2.0 * lattice)
    k = np.arange(int(np.floor(lo / step)) + 1, int(np.ceil(hi / step)))
    g = np.concatenate([[lo], k * step, [hi]])
    return g if g.size >= least else _dense(lo, hi, least)


def _check(taps, *, fs, fp, stopbands, dp, ds, target=None, gain=1.0, shaping=None):
    """Does a design meet its bands?  Returns (ok, passband error, stopband peak).

    The response is taken on a dense FFT grid (at least 16 points per tap) plus
    the exact band edges.  With ``shaping`` (the response of the stages before),
    the stopband is judged on the product, as the chain sees it.
    """
    h = np.asarray(taps, dtype=float)
    if not np.all(np.isfinite(h)):
        return False, math.inf, math.inf
    n = h.size
    nfft = 1 << max(12, int(math.ceil(math.log2(16 * n))))
    mag = np.abs(np.fft.rfft(h, nfft)) / gain
    grid = np.arange(mag.size) * fs / nfft
    edges = [fp] + [e for band in stopbands for e in band]
    mag_e = np.abs(fir_response(h, np.array(edges), fs=fs)) / gain
    if shaping is not None:
        mag_e[1:] *= shaping(np.array(edges[1:]))
    sel = grid <= fp
    f_pb = np.concatenate([grid[sel], [fp]])
    h_pb = np.concatenate([mag[sel], mag_e[:1]])
    t = np.ones_like(f_pb) if target is None else target(f_pb)
    pb_err = float(np.max(np.abs(h_pb / t - 1.0)))
    sb_peak = float(np.max(mag_e[1:])) if len(edges) > 1 else 0.0
    for lo, hi in stopbands:
        sel = (grid >= lo) & (grid <= hi)
        if np.any(sel):
            sb = mag[sel] if shaping is None else mag[sel] * shaping(grid[sel])
            sb_peak = max(sb_peak, float(np.max(sb)))
    # nowhere may the stage (times ``shaping``, the response before it) amplify
    # beyond its passband gain, don't-care bands included
    over = float(np.max(mag if shaping is None else mag * shaping(grid)))
    limit = (1.0 + dp) * (1.0 if shaping is not None else float(np.max(t)))
    ok = pb_err <= dp and sb_peak <= ds and over <= limit
    return ok, pb_err, sb_peak


def _merge(bands, min_gap):
    out = []
    for lo, hi in sorted(bands):
        if out and lo - out[-1][1] < min_gap:
            out[-1] = (out[-1][0], max(out[-1][1], hi))
        else:
            out.append((lo, hi))
    return out


def _remez(numtaps, fp, stopbands, fs, dp, ds, gain):
    edges = [0.0, fp]
    desired = [gain]
    weight = [1.0]
    for lo, hi in stopbands:
        edges += [lo, hi]
        desired.append(0.0)
        weight.append(dp / ds)
    h = remez_bands(numtaps, edges, desired, weight=weight, fs=fs)
    if not np.all(np.isfinite(h)):
        # Parks-McClellan breaks down on very narrow bands; a Kaiser-window design
        # (Kaiser 1974) with the cutoff mid-transition serves instead.
        beta = kaiser_beta(-20.0 * math.log10(min(dp, ds)))
        cutoff = 0.5 * (fp + stopbands[0][0])
        h = gain * kaiser_lowpass(numtaps, cutoff, beta=beta, fs=fs)
    return h


def _search_length(make, estimate, *, step_limit=40, even=False):
    """Smallest odd length for which ``make(n)`` meets its target, starting near ``estimate``.

    Brackets the answer by steps of about 5 % from the estimate, then bisects, so a
    typical stage costs a handful of designs.  With ``even``, the even length just
    below the odd answer is tried too (a type II filter, one tap shorter).
    """
    memo = {}

    def ok(n):
        check_time()  # each design of a long filter can take a while: stop when the budget is spent
        if n not in memo:
            memo[n] = make(n)
        return memo[n][0]

    n = max(3, int(math.ceil(estimate)) | 1)
    step = max(2, (n // 20) & ~1)
    if ok(n):
        hi = n
        lo = n - step
        while lo >= 3 and ok(lo):
            hi, lo = lo, lo - step
            step *= 2
        lo = max(lo, 1)
    else:
        lo = n
        hi = n + step
        tries = 0
        while not ok(hi):
            lo, hi = hi, hi + step
            step *= 2
            tries += 1
            if hi > MAX_TAPS or tries > step_limit:
                return None, None
    # invariant: ok(hi), not ok(lo) (or lo below 3)
    while hi - lo > 2:
        mid = ((lo + hi) // 2) | 1
        if mid >= hi:
            mid = hi - 2
        if mid <= lo:
            break
        if ok(mid):
            hi = mid
        else:
            lo = mid
    if even and hi > 3 and ok(hi - 1):
        hi -= 1
    return hi, memo[hi]


@functools.lru_cache(maxsize=512)
def design_decimator(fp, decimation, *, fs, dp, ds, gain=1.0, full_stopband=False, protect=None, stop_edge=None):
    """Equiripple low-pass for decimation by ``decimation``, alias-aware.

    Parameters
    ----------
    fp : float
        Passband edge in Hz.
    decimation : int
        Decimation that follows the filter.
    fs : float
        Rate at which the filter runs, Hz.
    dp, ds : float
        Largest passband deviation and stopband magnitude (relative to ``gain``).
    gain : float
        Passband gain (``L`` for an interpolation filter).
    full_stopband : bool
        Attenuate everything from the first alias band edge to ``fs/2`` instead
        of the alias bands alone.
    protect : float, optional
        Half-width of the band kept free of aliases (default ``fp``).
    stop_edge : float, optional
        Attenuate everything from this frequency to ``fs/2`` (a final stage that
        also removes the neighbours).

    Returns
    -------
    FirDesign or None
        None when no length up to the limit meets the target.
    """
    protect = fp if protect is None else protect
    if stop_edge is not None:
        bands = [(stop_edge, fs / 2.0)]
    else:
        bands = alias_bands(fs, decimation, protect)
        if not bands:
            raise ChannelizerError(f"decimation {decimation} at {format_hz(fs, 'sps')} folds nothing onto the passband")
    if bands[0][0] <= fp:
        return None
    if full_stopband and stop_edge is None:
        bands = [(bands[0][0], fs / 2.0)]
    else:
        bands = _merge(bands, min_gap=(bands[0][0] - fp) * 0.5)
    df = (bands[0][0] - fp) / fs
    est = herrmann_length(dp, ds, df)

    def make(n):
        h = _remez(n, fp, bands, fs, dp, ds, gain)
        return _check(h, fs=fs, fp=fp, stopbands=bands, dp=dp, ds=ds, gain=gain) + (h,)

    n, res = _search_length(make, est, even=True)
    if n is None:
        if not full_stopband and stop_edge is None:
            return design_decimator(fp, decimation, fs=fs, dp=dp, ds=ds, gain=gain, full_stopband=True, protect=protect)
        return None
    return FirDesign(res[3], res[1], res[2])


@functools.lru_cache(maxsize=128)
def design_kaiser(fp, stop, *, fs, delta, gain=1.0):
    """Kaiser-window low-pass (:mod:`.kaiser`): passband ``[0, fp]``,
    stopband from ``stop``, deviation ``delta`` on both, passband gain ``gain``.

    For the long filters of a rational stage with a large ``L``, where Parks-McClellan
    is slow and unreliable; the length follows Kaiser's formula (Kaiser 1974).
    """
    atten = -20.0 * math.log10(delta)
    numtaps, beta = kaiser_length(atten, stop - fp, fs=fs)
    h = kaiser_lowpass(numtaps, 0.5 * (fp + stop), beta=beta, fs=fs)
    return FirDesign(gain * h / h.sum(), 0.0, 0.0)


@functools.lru_cache(maxsize=512)
def design_halfband(fp, *, fs, delta):
    """Half-band decimator by 2 with passband ``[0, fp]`` and stopband ``[fs/2 - fp, fs/2]``.

    Construction of Vaidyanathan & Nguyen (IEEE Trans. CAS 34(3), 1987, from memory):
    an even-length ``2K`` equiripple ``g`` on ``[0, 2 fp / fs]`` gives
    ``h = (z^{-(2K-1)} + G(z^2)) / 2`` of length ``4K - 1``, centre tap 0.5, every
    other tap zero, with equal passband and stopband ripple ``delta``.

    Returns
    -------
    FirDesign or None
        None when ``fp >= fs/4`` (no half-band can serve) or no length meets ``delta``.
    """
    fpn = fp / fs
    if fpn >= 0.25:
        return None
    stop = [(fs / 2.0 - fp, fs / 2.0)]

    def make(n4):
        # n4 = 4K - 1 -> K
        k = (n4 + 1) // 4
        if k < 1:
            k = 1
        g = remez_bands(2 * k, [0.0, 2.0 * fpn], [1.0], fs=1.0)
        if np.all(np.isfinite(g)):
            h = np.zeros(4 * k - 1)
            h[0::2] = g / 2.0
            h[2 * k - 1] = 0.5
        else:
            # Narrow passbands defeat Parks-McClellan; a Kaiser-windowed ideal half-band
            # 0.5 sinc(n/2) w[n] keeps the centre tap 0.5 and the zeros exact.
            beta = kaiser_beta(-20.0 * math.log10(delta))
            n = np.arange(4 * k - 1) - (2 * k - 1)
            h = 0.5 * np.sinc(n / 2.0) * np.kaiser(4 * k - 1, beta)
        return _check(h, fs=fs, fp=fp, stopbands=stop, dp=delta, ds=delta) + (h,)

    est = herrmann_length(delta, delta, 0.5 - 2 * fpn)
    k = k0 = max(1, int(math.ceil((est + 1) / 4)))
    while True:
        res = make(4 * k - 1)
        if res[0]:
            while k > 1:
                r2 = make(4 * (k - 1) - 1)
                if not r2[0]:
                    break
                k, res = k - 1, r2
            return FirDesign(res[3], res[1], res[2])
        k += 1
        if 4 * k - 1 > MAX_TAPS or k > 3 * k0 + 10:
            return None


def choose_cic_order(decimation, *, fs, fp, ds, differential_delay=1, max_order=8, compensated=True, min_order=1):
    """Smallest CIC order whose alias bands are all attenuated below ``ds``.

    The CIC alone carries the rejection of the bands ``k fs/R +- fp``, which land on
    the passband after decimation (Hogenauer 1981).  An input at ``k fs/R + g`` lands
    at ``g``, where a droop compensator later boosts it by ``1/|H(g)|``; with
    ``compensated`` the order is chosen on that ratio ``|H(k fs/R + g)| / |H(g)|``.
    Returns None when even ``max_order`` is not enough.
    """
    fo = fs / decimation
    g = _dense(-fp, fp, 33)
    # |H_1(k fo + g)| = |sin(pi g / fo)| / (R M |sin(pi (k fo + g) / fs)|): the numerator
    # is the same for every k and the denominator grows with k up to fs/2, so the first
    # alias band (k = 1) holds the worst ratio of every band
    ks = np.arange(1, 2)
    x = (ks[:, None] * fo + g[None, :]).ravel()
    keep = x <= fs / 2.0
    x, gl = x[keep], np.broadcast_to(g, (ks.size, g.size)).ravel()[keep]
    # |H_N| = |H_1|^N (Hogenauer 1981): the worst ratio of order N is that of order 1
    # to the N-th power, so one evaluation serves every order
    st = CicStage(decimation=decimation, order=1, differential_delay=differential_delay)
    att = np.abs(st.response(x, fs=fs))
    if compensated:
        att = att / np.abs(st.response(gl, fs=fs))
    worst = float(np.max(att))
    for order in range(max(1, min_order), max_order + 1):
        if worst**order <= ds:
            return order
    return None


@functools.lru_cache(maxsize=256)
def design_compensator(cic, fp, decimation, *, fs_cic, dp, ds, fs=None, protect=None, stop_edge=None,
                       gain=1.0, fold_rate=None):
    """FIR whose passband is ``gain / |H_cic|`` on ``[0, fp]``: it undoes the CIC's droop.

    A true minimax fit (:func:`minimax.minimax_fit`: the Remez exchange, or a linear
    programme where a cap binds) of a symmetric FIR of any length running at ``fs`` (default: the CIC's output rate).  Its
    stopbands are the alias bands of its own decimation (or everything from
    ``stop_edge`` to ``fs/2``, a final stage that also removes the neighbours).  A
    stage that does not decimate has no stopband: it only may not amplify, i.e. the
    CIC times the stage stays at or below the passband gain everywhere.  The same
    bound holds in every don't-care band of any stage.  ``fold_rate`` is the stage's
    input rate when it differs from ``fs`` (a rational stage whose filter runs at
    ``L`` times its input rate, passband gain ``gain = L``); ``protect`` is the
    half-width kept free of aliases (default ``fp``).

    Returns
    -------
    FirDesign or None

    References
    ----------
    L. R. Rabiner, "Linear program design of finite impulse response (FIR) digital
    filters", IEEE Trans. Audio Electroacoust. 20(4):280-288, 1972 (from memory); the
    CIC response is Hogenauer's (1981).
    """
    fs = fs_cic / cic.decimation if fs is None else fs
    fold_rate = fs if fold_rate is None else fold_rate
    protect = fp if protect is None else protect
    if stop_edge is not None:
        stop = [(stop_edge, fs / 2.0)]
    elif decimation == 1:
        stop = []
    else:
        stop = _merge(alias_bands(fs, decimation, protect), min_gap=0.0)
        if stop[0][0] <= fp:
            return None

    def target(f):
        return 1.0 / np.abs(cic.response(f, fs=fs_cic))

    def shaping(f):
        g = (np.asarray(f) + fold_rate / 2.0) % fold_rate - fold_rate / 2.0
        return np.abs(cic.response(g, fs=fs_cic))

    def make(n, fast=False):
        lattice = 16 * n  # grid: 32 points per cycle of the ripple (the exchange's FFT makes density cheap)
        f_pb = _band_grid(0.0, fp, fs=fs, lattice=lattice, least=16)
        t_pb = target(f_pb)
        f_sb = np.concatenate([_band_grid(lo, hi, fs=fs, lattice=lattice, least=8) for lo, hi in stop]) if stop else np.zeros(0)
        f = np.concatenate([f_pb, f_sb])
        want = np.concatenate([gain * t_pb, np.zeros(f_sb.size)])
        # the CIC before already attenuates the stopband: only the product must reach ds
        weight = np.concatenate([1.0 / (dp * gain * t_pb), shaping(f_sb) / (gain * ds)])
        lo = fp + 0.25 * fs / n if not stop else fp
        cap_f = _dense(lo, fs / 2.0, 3 * n)
        if stop:
            inside = np.zeros(cap_f.size, bool)
            for a, b in stop:
                inside |= (cap_f >= a) & (cap_f <= b)
            cap_f = cap_f[~inside]
        cap = gain * (1.0 + dp) / np.maximum(shaping(cap_f), 1e-3)
        check_time()  # the planner's CPU-time budget (planning/limits.py)
        if fast:
            h, err = equiripple_fit(n, fs=fs, f=f, desired=want, weight=weight, lattice=lattice)
        else:
            h, err = minimax_fit(n, fs=fs, f=f, desired=want, weight=weight, cap_f=cap_f, cap=cap, lattice=lattice)
        if h is None or not np.all(np.isfinite(h)) or err > 1.0:
            return False, math.inf, math.inf, h
        return _check(h, fs=fs, fp=fp, stopbands=stop, dp=dp, ds=ds, target=target, shaping=shaping, gain=gain) + (h,)

    est = herrmann_length(dp, ds, (stop[0][0] - fp) / fs) if stop else 3
    if stop:
        # bracket with the exchange's fit (no caps), then shorten with the capped one
        n, res = _search_length(lambda m: make(m, fast=True), est, step_limit=30, even=True)
        if n is None:
            n, res = _search_length(make, est, step_limit=30, even=True)
        elif n <= MAX_LP_TAPS:
            for m in range(n - 1, max(n - 4, 2), -1):
                r2 = make(m)
                if not r2[0]:
                    break
                n, res = m, r2
    else:
        n, res = _search_length(make, est, step_limit=30, even=True)
    if n is None or n > 1001:
        return None
    return FirDesign(res[3], res[1], res[2])
