"""Minimax fit of a linear-phase FIR to an arbitrary passband shape, with caps.

Without caps the fit is the Remez exchange's (:mod:`.remez_exchange`).  With caps
``|A(f)| <= u(f)`` on further points (a stage that must "never amplify"), the
exchange's fit is the answer whenever it keeps under them (it is the best fit of
the larger problem, so also of this one); otherwise the problem is solved as a
linear programme.  The amplitude of a symmetric FIR of length ``n`` is linear in its free coefficients:
``A(f) = sum_k a_k c_k(f)`` with ``c_k = cos(2 pi f k / fs)`` (odd ``n``, type I) or
``cos(2 pi f (k + 1/2) / fs)`` (even ``n``, type II).  Minimising the largest weighted
error over a dense grid is then a linear programme (minimise ``t`` subject to
``-t <= w (A - D) <= t``), solved exactly by HiGHS through ``scipy.optimize.linprog``;
hard caps ``|A(f)| <= u(f)`` on further points ("never amplify") are more linear
constraints.

References
----------
L. R. Rabiner, "Linear program design of finite impulse response (FIR) digital
filters", IEEE Trans. Audio Electroacoust. 20(4):280-288, 1972 (from memory).
"""

import numpy as np

from .remez_exchange import equiripple_fit
from .stages import fir_response

__all__ = ["linear_phase_basis", "taps_from_amplitude", "minimax_fit", "CAP_SLACK"]

#: A cap counts as kept when the exchange's fit exceeds it by at most this fraction.
CAP_SLACK = 1e-9


def linear_phase_basis(n, f, *, fs):
    """Matrix ``B`` with ``A(f) = B @ a`` for a symmetric FIR of length ``n``."""
    f = np.asarray(f, dtype=float)
    w = 2.0 * np.pi * f / fs
    if n % 2:
        k = np.arange((n - 1) // 2 + 1)
        b = np.cos(np.outer(w, k))
        b[:, 1:] *= 2.0
    else:
        k = np.arange(n // 2) + 0.5
        b = 2.0 * np.cos(np.outer(w, k))
    return b


def taps_from_amplitude(n, a):
    """Impulse response of length ``n`` from the amplitude coefficients ``a``."""
    a = np.asarray(a, dtype=float)
    if n % 2:
        return np.concatenate([a[:0:-1], a])
    return np.concatenate([a[::-1], a])


def _solve(b, w, d, bc, u):
    # imported here: the exchange serves most fits, and scipy.optimize costs a
    # command a few tenths of a second to import
    import scipy.optimize
    from scipy import sparse

    m = b.shape[1]
    bw = b * w[:, None]
    dw = d * w
    ones = np.ones((b.shape[0], 1))
    rows = [np.hstack([bw, -ones]), np.hstack([-bw, -ones])]
    rhs = [dw, -dw]
    if bc is not None and bc.shape[0]:
        zero = np.zeros((bc.shape[0], 1))
        rows += [np.hstack([bc, zero]), np.hstack([-bc, zero])]
        rhs += [u, u]
    cost = np.zeros(m + 1)
    cost[-1] = 1.0
    res = scipy.optimize.linprog(
        cost, A_ub=sparse.csr_matrix(np.vstack(rows)), b_ub=np.concatenate(rhs),
        bounds=[(None, None)] * m + [(0, None)], method="highs",
    )
    return res.x[:m] if res.status == 0 else None


def minimax_fit(n, *, fs, f, desired, weight, cap_f=None, cap=None, lattice=None):
    """Symmetric length-``n`` FIR minimising ``max |weight (A - desired)|`` over ``f``.

    Parameters
    ----------
    n : int
        Filter length (odd: type I, even: type II).
    fs : float
        Rate at which the filter runs, Hz.
    f, desired, weight : array_like
        Grid (Hz), the amplitude wanted there and the weight of its error.
    cap_f, cap : array_like, optional
        Further points where ``|A|`` must not exceed ``cap`` (a hard constraint).
    lattice : int, optional
        Passed to :func:`.remez_exchange.equiripple_fit`.

    Returns
    -------
    (taps, err) : (ndarray, float)
        The taps and the largest weighted error; ``(None, inf)`` when the
        programme has no solution.
    """
    has_cap = cap_f is not None and len(cap_f)
    h, err = equiripple_fit(n, fs=fs, f=f, desired=desired, weight=weight, lattice=lattice)
    if np.all(np.isfinite(h)):
        if not has_cap:
            return h, err
        u = np.asarray(cap, dtype=float)
        if np.all(np.abs(fir_response(h, cap_f, fs=fs)) <= u * (1.0 + CAP_SLACK)):
            return h, err
    b = linear_phase_basis(n, f, fs=fs)
    d = np.asarray(desired, dtype=float)
    bc = linear_phase_basis(n, cap_f, fs=fs) if has_cap else None
    u = np.asarray(cap, dtype=float) if has_cap else None
    a = _solve(b, np.asarray(weight, dtype=float), d, bc, u)
    if a is None:
        return None, np.inf
    return taps_from_amplitude(n, a), float(np.max(np.abs(b @ a - d) * weight))
