"""Quantisation-aware coefficients: a local search over the rounded integers.

Rounding each tap to the nearest integer leaves a stopband floor a few dB above
what the width could give.  Starting from the rounded taps, each step tries
moving one symmetric pair of taps by +-1 (the centre tap, or the centre pair,
moving the opposite way so the sum, the DC gain, stays exact) and keeps the move
that lowers the largest stopband error (against the unquantised filter) most,
until no move helps.  The stopband is where the unquantised filter is below
``STOP_LEVEL`` of its peak.

References
----------
D. Kodek, "Design of optimal finite wordlength FIR digital filters using integer
programming techniques", IEEE Trans. ASSP 28(3):304-308, 1980 (the problem; this
is the usual greedy neighbourhood search, from memory).
"""

import math

import numpy as np

__all__ = ["improve_integers", "STOP_LEVEL"]

#: Where the unquantised response is below this, the search lowers the peak.
STOP_LEVEL = 1e-2
MAX_STEPS = 60
#: The result is kept only when its peak where the float response is below this is lower.
DEEP_LEVEL = 1e-3


def improve_integers(ints, taps, *, bits):
    """Integers with a lower stopband peak than ``ints`` (same length, sum and symmetry).

    Parameters
    ----------
    ints : array_like of int
        Rounded taps (symmetric).
    taps : array_like of float
        The unquantised taps, scaled like ``ints``.
    bits : int
        Coefficient width: no integer may leave ``[-2**(bits-1), 2**(bits-1) - 1]``.

    Returns
    -------
    ndarray of int64
    """
    q0 = q = np.array(ints, dtype=np.int64)
    h = np.asarray(taps, dtype=float)
    n = q.size
    if n < 4 or n > 512 or not np.array_equal(q, q[::-1]):
        return q
    nfft = 1 << max(10, int(math.ceil(math.log2(16 * n))))
    ref = np.abs(np.fft.rfft(h, nfft))
    stop = ref < STOP_LEVEL * np.max(ref)
    if not stop.any():
        return q
    f = np.flatnonzero(stop) / nfft
    # cosine basis of each symmetric pair (type I or II), at the stopband points
    c = (n - 1) / 2.0
    half = np.arange(n // 2)
    basis = 2.0 * np.cos(2 * np.pi * np.outer(f, c - half))
    centre = (n - 1) // 2 if n % 2 else n // 2 - 1
    if n % 2:
        move_c = -2.0 * np.ones_like(f)  # the centre tap moves by -2 to keep the sum
        pairs = half
    else:
        move_c = -basis[:, centre]
        pairs = np.array([i for i in half if i != centre])
    rot = np.exp(2j * np.pi * f * c)
    # the error against the unquantised amplitude: the float design meets its bands,
    # so the smallest largest error keeps the quantised one closest to it
    amp = np.real(rot * (np.fft.rfft(q.astype(float), nfft)[stop] - np.fft.rfft(h, nfft)[stop]))
    moves = basis[:, pairs] + move_c[:, None]
    lim = 2 ** (bits - 1)
    peak = np.max(np.abs(amp))
    for _ in range(MAX_STEPS):
        best, best_peak = None, peak
        for sign in (1, -1):
            trial = np.max(np.abs(amp[:, None] + sign * moves), axis=0)
            j = int(np.argmin(trial))
            if trial[j] < best_peak:
                best, best_peak = (pairs[j], sign, j), trial[j]
        if best is None:
            break
        i, sign, j = best
        new = q.copy()
        new[i] += sign
        new[n - 1 - i] += sign
        if n % 2:
            new[centre] -= 2 * sign
        else:
            new[centre] -= sign
            new[n - 1 - centre] -= sign
        if np.any(new < -lim) or np.any(new > lim - 1):
            break
        q = new
        amp = amp + sign * moves[:, j]
        peak = best_peak
    # keep the result only when the stopband proper (below DEEP_LEVEL) is lower
    deep = ref < DEEP_LEVEL * np.max(ref)
    if deep.any():
        before = np.max(np.abs(np.fft.rfft(q0.astype(float), nfft)[deep]))
        after = np.max(np.abs(np.fft.rfft(q.astype(float), nfft)[deep]))
        if after > before:
            return q0
    return q
