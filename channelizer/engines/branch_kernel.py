"""The filter bank's branch sums, and the spreading of its transforms into the bins'
outputs, in compiled code (numba), for the ``fast`` extra.

Imported only by :mod:`channelizer.engines.filterbank`, and only when a bank
runs: importing this module imports numba, which raises ``ImportError`` where it
is not installed (``pip install '.[fast]'``).

What is computed is the direct path's sums of :mod:`channelizer.engines.filterbank`,
``u[n, t] = sum_{m<K} hr[m, t] buf[nD + mM + t]``, in the same order (``m`` from 0
up, each product and sum fused into one multiply-add where the CPU has it, one
rounding each), on float32 pairs (I and Q multiplied by the same tap).  Each output row
is summed on its own, so the result does not depend on how the rows are split
between calls or threads.

numba compiles :func:`branch_sums` to machine code on first use (about a second,
cached on disk for the next process); the inner loop over ``t`` runs on the CPU's
vector registers.  It releases the GIL, so the bank's threads run it side by side.

References
----------
S. K. Lam, A. Pitrou and S. Seibert, "Numba: a LLVM-based Python JIT compiler",
Proc. LLVM-HPC 2015 (from memory).
"""

import numba

__all__ = ["branch_sums", "spread_bins", "version"]

version = numba.__version__


@numba.njit(nogil=True, cache=True, boundscheck=False, fastmath={"contract"})
def branch_sums(fb, h2, D, M, n0, n1, out):
    """Rows ``n0 <= n < n1`` of ``out`` (float32 ``(rows, 2M)``, I and Q interleaved):
    ``out[n, j] = sum_m h2[m, j] fb[2 (nD + mM) + j]``, summed from ``m = 0`` up; ``fb`` is
    the buffer as float32 pairs, ``h2`` the taps ``hr`` with each column repeated for I and Q.

    Four rows and two taps go through each pass (``o = o + p a + q b`` keeps the order of
    the sum), so that each row of taps is read once for four rows and each output once
    for two taps; the last rows and taps go one at a time (:func:`_row`).
    """
    if D == M:
        n = _rows_in_step(fb, h2, M, n0, n1, out)
    else:
        n = _rows_apart(fb, h2, D, M, n0, n1, out)
    while n < n1:
        _row(fb, h2, D, M, n, out[n])
        n += 1


@numba.njit(nogil=True, cache=True, boundscheck=False, fastmath={"contract"})
def _rows_in_step(fb, h2, M, n0, n1, out):
    """:func:`branch_sums` without oversampling (``D = M``), four rows at a time; returns
    the first row not done.  Row ``n + 1`` at tap ``m`` reads what row ``n`` reads at tap
    ``m + 1``, so a pass reads five stretches of input instead of eight (the 2.4 Msps bank's
    sums ran about a quarter quicker)."""
    K, W = h2.shape
    d = 2 * M
    n = n0
    while n + 4 <= n1:
        o0, o1, o2, o3 = out[n], out[n + 1], out[n + 2], out[n + 3]
        for j in range(W):
            o0[j] = 0.0
            o1[j] = 0.0
            o2[j] = 0.0
            o3[j] = 0.0
        m = 0
        while m + 2 <= K:
            b = d * (n + m)
            ha, hb = h2[m], h2[m + 1]
            x0, x1, x2 = fb[b : b + W], fb[b + d : b + d + W], fb[b + 2 * d : b + 2 * d + W]
            x3, x4 = fb[b + 3 * d : b + 3 * d + W], fb[b + 4 * d : b + 4 * d + W]
            for j in range(W):
                p, q = ha[j], hb[j]
                v1, v2, v3 = x1[j], x2[j], x3[j]
                o0[j] = o0[j] + p * x0[j] + q * v1
                o1[j] = o1[j] + p * v1 + q * v2
                o2[j] = o2[j] + p * v2 + q * v3
                o3[j] = o3[j] + p * v3 + q * x4[j]
            m += 2
        if m < K:
            _last_tap(fb, h2[m], d * (n + m), d, o0, o1, o2, o3)
        n += 4
    return n


@numba.njit(nogil=True, cache=True, boundscheck=False, fastmath={"contract"})
def _rows_apart(fb, h2, D, M, n0, n1, out):
    """:func:`branch_sums` with oversampling (``D < M``), four rows at a time; returns the
    first row not done.  (Rows ``O`` apart share input as above; taking them together
    was slower on the 61.44 Msps bank.)"""
    K, W = h2.shape
    d = 2 * D
    n = n0
    while n + 4 <= n1:
        o0, o1, o2, o3 = out[n], out[n + 1], out[n + 2], out[n + 3]
        for j in range(W):
            o0[j] = 0.0
            o1[j] = 0.0
            o2[j] = 0.0
            o3[j] = 0.0
        m = 0
        while m + 2 <= K:
            b = 2 * (n * D + m * M)
            c = b + 2 * M
            ha, hb = h2[m], h2[m + 1]
            a0, a1, a2, a3 = fb[b : b + W], fb[b + d : b + d + W], fb[b + 2 * d : b + 2 * d + W], fb[b + 3 * d : b + 3 * d + W]
            b0, b1, b2, b3 = fb[c : c + W], fb[c + d : c + d + W], fb[c + 2 * d : c + 2 * d + W], fb[c + 3 * d : c + 3 * d + W]
            for j in range(W):
                p, q = ha[j], hb[j]
                o0[j] = o0[j] + p * a0[j] + q * b0[j]
                o1[j] = o1[j] + p * a1[j] + q * b1[j]
                o2[j] = o2[j] + p * a2[j] + q * b2[j]
                o3[j] = o3[j] + p * a3[j] + q * b3[j]
            m += 2
        if m < K:
            _last_tap(fb, h2[m], 2 * (n * D + m * M), d, o0, o1, o2, o3)
        n += 4
    return n


@numba.njit(nogil=True, cache=True, boundscheck=False, fastmath={"contract"})
def _last_tap(fb, hm, b, d, o0, o1, o2, o3):
    """The last tap of an odd ``K`` for four rows whose input starts at ``b``, ``d`` apart."""
    W = hm.size
    a0, a1, a2, a3 = fb[b : b + W], fb[b + d : b + d + W], fb[b + 2 * d : b + 2 * d + W], fb[b + 3 * d : b + 3 * d + W]
    for j in range(W):
        p = hm[j]
        o0[j] += p * a0[j]
        o1[j] += p * a1[j]
        o2[j] += p * a2[j]
        o3[j] += p * a3[j]


@numba.njit(nogil=True, cache=True, boundscheck=False, fastmath={"contract"})
def _row(fb, h2, D, M, n, o):
    """Row ``n`` of :func:`branch_sums` on its own, into ``o``: the same sum in the same order."""
    K, W = h2.shape
    for j in range(W):
        o[j] = 0.0
    for m in range(K):
        b = 2 * (n * D + m * M)
        hm = h2[m]
        xs = fb[b : b + W]
        for j in range(W):
            o[j] += hm[j] * xs[j]


@numba.njit(nogil=True, cache=True, boundscheck=False)
def spread_bins(y, bins, phase, out, c0):
    """``out[i, c0 + j] = y[bins[i], j] phase[i, j]`` for ``j < y.shape[1]`` (complex64).

    ``phase`` is ``(len(bins), 1)`` (one factor per bin, used for every ``j``) or
    ``(len(bins), >= y.shape[1])``.  One complex product per output (numpy's
    complex64 product loop is not vectorized, and took four times as long).
    """
    n = y.shape[1]
    for i in range(bins.size):
        yr = y[bins[i]]
        o = out[i, c0 : c0 + n]
        if phase.shape[1] == 1:
            p = phase[i, 0]
            for j in range(n):
                o[j] = yr[j] * p
        else:
            ph = phase[i]
            for j in range(n):
                o[j] = yr[j] * ph[j]
