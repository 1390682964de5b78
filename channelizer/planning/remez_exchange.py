"""Equiripple linear-phase FIRs by the Remez exchange, on numpy alone.

The amplitude of a symmetric FIR of length ``n`` is ``A(w) = Q(w) P(cos w)``, with
``Q = 1`` and ``P`` a polynomial of degree ``r - 1``, ``r = (n + 1) / 2`` (odd ``n``,
type I), or ``Q = cos(w / 2)``, ``r = n / 2`` (even ``n``, type II).  The weighted
error ``W (D - A)`` on a dense grid is made to alternate with equal magnitude on
``r + 1`` extremal points; the points are exchanged for the error's extrema until
they settle (Parks & McClellan 1972).  ``P`` is carried in barycentric Lagrange
form (Berrut & Trefethen 2004), with the weights in logarithms so that long
filters neither overflow nor underflow.  The desired response ``D`` and the
weight ``W`` are arbitrary samples on the grid: piecewise-constant bands as well
as a CIC-droop compensator's ``1 / |H_cic|``.

References
----------
T. W. Parks and J. H. McClellan, "Chebyshev approximation for nonrecursive digital
filters with linear phase", IEEE Trans. Circuit Theory 19(2):189-194, 1972.
J. H. McClellan, T. W. Parks and L. R. Rabiner, "A computer program for designing
optimum FIR linear phase digital filters", IEEE Trans. Audio Electroacoust.
21(6):506-526, 1973 (the grid of 16 points per extremal, from memory).
J.-P. Berrut and L. N. Trefethen, "Barycentric Lagrange interpolation", SIAM
Review 46(3):501-517, 2004.
N. J. Higham, "The numerical stability of barycentric Lagrange interpolation", IMA
J. Numer. Anal. 24(4):547-556, 2004.
"""

import numpy as np

__all__ = ["equiripple_fit", "lattice_grid", "remez_bands", "GRID_DENSITY"]

#: Grid points per extremal of the piecewise-constant designs (McClellan et al. 1973).
GRID_DENSITY = 16
MAX_ITERATIONS = 100
#: The exchange stops when the largest error exceeds the levelled one by less than this
#: fraction (or the extremal points stay where they are).
CONVERGED = 1e-4
#: Exchanges in a row that may fail to raise the levelled error by a millionth before
#: the exchange stops.
STALL = 15
#: Up to this many coefficients, they come from a linear solve at the nodes.
SOLVE_UP_TO = 700
#: Grid points x nodes evaluated at once (bounds the memory of one step).
_CHUNK = 1 << 20
#: From this length on, piecewise-constant designs go to ``scipy.signal.remez`` (compiled;
#: its import costs about a second, which only these long designs pay): the exchange here
#: evaluates its interpolant in numpy, O(grid x nodes) per step, and on filters of several
#: hundred taps took seconds where the compiled one takes tenths.
COMPILED_FROM = 256


def _log_weights(x):
    """Barycentric weights ``1 / prod_{j != i} (x_i - x_j)`` as (sign, log |.|)."""
    d = x[:, None] - x[None, :]
    np.fill_diagonal(d, 1.0)
    sign = np.where(np.count_nonzero(d < 0, axis=1) % 2, -1.0, 1.0)
    return sign, -np.sum(np.log(np.abs(d)), axis=1)


def _interpolate(xn, yn, x, weights=None):
    """Values at ``x`` of the polynomial through ``(xn, yn)`` (barycentric form);
    ``weights`` are :func:`_log_weights` of ``xn`` when known."""
    sign, logw = _log_weights(xn) if weights is None else weights
    bw = sign * np.exp(logw - np.max(logw))
    out = np.empty(x.size)
    step = max(1, _CHUNK // max(xn.size, 1))
    for i in range(0, x.size, step):
        xi = x[i : i + step]
        d = xi[:, None] - xn[None, :]
        with np.errstate(all="ignore"):
            c = bw / d
            val = (c @ yn) / np.sum(c, axis=1)
        rows = np.flatnonzero(~np.isfinite(val))  # at a node
        val[rows] = yn[np.argmin(np.abs(d[rows]), axis=1)]
        out[i : i + step] = val
    return out


def _lagrange(xn, yn, x):
    """Values at ``x`` of the polynomial through ``(xn, yn)``, each Lagrange basis
    polynomial formed in logarithms (the first barycentric form: stable at points far
    from every node too, Higham 2004)."""
    sign, logw = _log_weights(xn)
    out = np.empty(x.size)
    step = max(1, _CHUNK // max(xn.size, 1))
    for i in range(0, x.size, step):
        d = x[i : i + step, None] - xn[None, :]
        hit = d == 0.0
        d[hit] = 1.0
        logd = np.log(np.abs(d))
        neg = d < 0
        log_l = np.sum(logd, axis=1, keepdims=True)
        sign_l = np.where(np.count_nonzero(neg, axis=1) % 2, -1.0, 1.0)[:, None]
        basis = sign_l * sign * np.where(neg, -1.0, 1.0) * np.exp(log_l + logw - logd)
        val = basis @ yn
        rows, cols = np.nonzero(hit)
        val[rows] = yn[cols]
        out[i : i + step] = val
    return out


def _exchange(err, ext):
    """The next ``len(ext)`` alternating points: each point moves to the largest error of
    its run of equal sign, and the largest error of all, when it lies in a run without a
    point, comes in for the neighbour of its sign (or, beyond an end, for the far end).

    ``err`` holds the levelled value ``+-delta`` at ``ext``, so the points' runs alternate
    and every step keeps ``|delta|`` growing (Parks & McClellan 1972; the exchange of the
    global extremum, E. Ya. Remez 1934, from memory).
    """
    pos = err >= 0
    change = np.flatnonzero(pos[1:] != pos[:-1]) + 1
    run = np.zeros(err.size, dtype=np.int64)
    run[change] = 1
    run = np.cumsum(run)
    mag = np.abs(err)
    # the index of the largest |err| in each run: its first point reaching the run's maximum
    starts = np.concatenate([[0], change])
    peak = np.maximum.reduceat(mag, starts)
    hits = np.flatnonzero(mag == peak[run])
    _, first = np.unique(run[hits], return_index=True)
    top = hits[first]
    new = top[run[ext]]
    g = int(np.argmax(mag))
    rg = run[g]
    taken = run[new]
    if rg in set(taken.tolist()):
        return new
    k = int(np.searchsorted(taken, rg))  # g lies between new[k - 1] and new[k]
    same = lambda i: pos[new[i]] == pos[g]  # noqa: E731
    if k == 0:
        new = np.concatenate([[g], new[:-1]]) if not same(0) else np.concatenate([[g], new[1:]])
    elif k == new.size:
        new = np.concatenate([new[1:], [g]]) if not same(-1) else np.concatenate([new[:-1], [g]])
    else:
        i = k - 1 if same(k - 1) else k
        new = new.copy()
        new[i] = g
    return np.sort(new)


def _chebyshev(xn, yn, r, *, careful, weights=None):
    """Coefficients ``c`` with ``P(cos w) = sum_m c_m cos(m w)`` for the polynomial of
    degree ``r - 1`` through ``(xn, yn)``.

    Fast: ``P`` sampled at the Chebyshev-Lobatto points by the barycentric formula and
    transformed by a DCT-I (an FFT of the even extension).  ``careful``: the
    Chebyshev-Vandermonde system at the nodes solved by LU (up to ``SOLVE_UP_TO``
    coefficients), else the samples by the first barycentric form (Higham 2004),
    accurate where the second loses digits far from every node.
    """
    if r == 1:
        return np.array([yn[0]])
    if careful and r <= SOLVE_UP_TO:
        with np.errstate(all="ignore"):
            try:
                return np.linalg.solve(np.cos(np.outer(np.arccos(np.clip(xn, -1.0, 1.0)), np.arange(r))), yn)
            except np.linalg.LinAlgError:
                pass
    xk = np.cos(np.pi * np.arange(r) / (r - 1))
    pk = _lagrange(xn, yn, xk) if careful else _interpolate(xn, yn, xk, weights)
    v = np.real(np.fft.fft(np.concatenate([pk, pk[-2:0:-1]]))) / (r - 1)
    c = v[:r].copy()
    c[0] /= 2.0
    c[-1] /= 2.0
    return c


def _cosine_sum(c, w, lattice):
    """``sum_m c_m cos(m w)`` on a grid: one FFT for each run of points a step
    ``pi / lattice`` apart (``a_m = c_m exp(-j m w0)`` transformed gives the run from
    ``w0``), directly at the others (band edges)."""
    out = np.empty(w.size)
    step = np.pi / lattice
    size = 2 * lattice
    done = np.zeros(w.size, bool)
    if w.size > 1 and size >= c.size:
        linked = np.abs(np.diff(w) - step) <= 1e-9 * step
        # runs of linked neighbours: [start, stop) over the points
        edges = np.flatnonzero(np.diff(np.concatenate([[0], linked.astype(np.int8), [0]])))
        for a, b in zip(edges[0::2], edges[1::2] + 1):
            if b - a < 8 or b - a > size:
                continue
            mod = c * np.exp(-1j * w[a] * np.arange(c.size))
            out[a:b] = np.real(np.fft.fft(mod, size))[: b - a]
            done[a:b] = True
    off = np.flatnonzero(~done)
    chunk = max(1, _CHUNK // c.size)
    for i in range(0, off.size, chunk):
        sel = off[i : i + chunk]
        out[sel] = np.cos(np.outer(w[sel], np.arange(c.size))) @ c
    return out


def _band_start(w, r, lattice):
    """Another first guess: the points shared out between the grid's bands (runs of
    grid steps) by their widths, each band's edges among them."""
    gap = np.flatnonzero(np.diff(w) > 1.5 * np.pi / lattice)
    lo = np.concatenate([[0], gap + 1])
    hi = np.concatenate([gap, [w.size - 1]])
    width = (w[hi] - w[lo]) + 1e-12
    share = np.maximum(1, np.round((r + 1) * width / width.sum()).astype(int))
    while share.sum() > r + 1:
        share[np.argmax(share)] -= 1
    while share.sum() < r + 1:
        share[np.argmax(width / share)] += 1
    pts = [np.round(np.linspace(a, b, k)).astype(int) if k > 1 else np.array([a]) for a, b, k in zip(lo, hi, share)]
    ext = np.unique(np.concatenate(pts))
    return ext if ext.size == r + 1 else None


def _solve(w, d, wt, r, maxiter, lattice, ext=None):
    """Exchange on the grid ``w`` (radians, ascending) from the points ``ext`` (default:
    evenly spread over the grid); returns (coefficients of P, converged)."""
    x = np.cos(w)
    if ext is None:
        ext = np.round(np.linspace(0, w.size - 1, r + 1)).astype(int)
    alt = np.where(np.arange(r + 1) % 2, -1.0, 1.0)
    seen = []
    best = (np.inf, None)
    level, stalled = 0.0, 0
    floor = 1e-13 * float(np.max(np.abs(d) * wt))  # float64's resolution of the weighted targets
    for _ in range(maxiter):
        sign, logw = _log_weights(x[ext])
        b = sign * np.exp(logw - np.max(logw))
        delta = float(np.dot(b, d[ext]) / np.dot(b, alt / wt[ext]))
        if not np.isfinite(delta):
            break
        # each exchange raises the levelled error; where it stops rising for a while,
        # float64 has lost the thread (a second start serves better than more rounds)
        stalled = stalled + 1 if abs(delta) <= level * (1.0 + 1e-6) else 0
        level = max(level, abs(delta))
        if stalled > STALL:
            break
        yn = d[ext] - alt * delta / wt[ext]
        # weights of the first r nodes from those of all r + 1: w_i (x_i - x_r)
        gap = x[ext[:-1]] - x[ext[-1]]
        weights = (sign[:-1] * np.sign(gap), logw[:-1] + np.log(np.abs(gap)))
        for careful in (False, True):
            c = _chebyshev(x[ext[:-1]], yn[:-1], r, careful=careful, weights=weights)
            p = _cosine_sum(c, w, lattice)
            # the coefficients hold the interpolant: they meet the nodes, and their sum
            # rounds off less than the error level (a wild one's would not)
            tol = 1e-3 * abs(delta) + floor
            exact = (np.max(np.abs(p[ext[:-1]] - yn[:-1]) * wt[ext[:-1]]) <= tol
                     and 1e-15 * np.sum(np.abs(c)) * np.max(wt) <= tol)
            if exact:
                break
        if abs(delta) <= floor:
            # either the targets are met to float64's resolution of them (a smooth
            # passband alone), or the points are a poor first guess: the grid tells
            pb = _interpolate(x[ext[:-1]], yn[:-1], x, weights)
            if max(np.max(np.abs(d - pb) * wt), np.max(np.abs(p - pb) * wt)) <= 1e3 * floor:
                return c, True
        if not exact:
            # the coefficients lost the interpolant (a wild one, early in the exchange):
            # evaluate the barycentric form on the grid instead
            p = _interpolate(x[ext[:-1]], yn[:-1], x, weights)
        err = wt * (d - p)
        peak = float(np.max(np.abs(err)))
        if exact and peak < best[0]:  # only coefficients that hold the interpolant
            best = (peak, c)
        err[ext] = alt * delta  # exact in theory; float64 may round a tiny delta away in d - P
        new = _exchange(err, ext)
        # settled: the largest error is the levelled one, or the points come back
        # (a cycle of rounding once float64 can level no further)
        if peak - abs(delta) <= CONVERGED * peak or any(np.array_equal(new, s) for s in seen):
            return best[1], True
        seen = [ext, new][-2:]
        ext = new
    return best[1], False


def _peak(c, w, d, wt, lattice):
    """Largest weighted error of the coefficients ``c`` on the grid."""
    return float(np.max(np.abs(wt * (d - _cosine_sum(c, w, lattice)))))


def _taps(n, c):
    """Taps of the length-``n`` symmetric FIR with ``A(w) = Q(w) sum_m c_m cos(m w)``."""
    if n % 2:
        half = np.concatenate([[c[0]], c[1:] / 2.0])  # h[centre + m]
        return np.concatenate([half[:0:-1], half])
    # type II: cos(w/2) cos(m w) = (cos((m + 1/2) w) + cos((m - 1/2) w)) / 2
    b = np.zeros(c.size)
    b[0] = c[0]
    b[1:] += c[1:] / 2.0
    b[:-1] += c[1:] / 2.0
    half = b / 2.0  # h[n/2 + k], k = 0 .. r - 1
    return np.concatenate([half[::-1], half])


def lattice_grid(lo, hi, *, fs, lattice):
    """Grid on ``[lo, hi]`` Hz as McClellan et al. (1973) lay it: from ``lo`` in steps
    of ``fs / (2 lattice)``, the last point moved onto ``hi``."""
    step = fs / (2.0 * lattice)
    pts = lo + step * np.arange(int(np.floor((hi - lo) / step)) + 1)
    pts[-1] = hi
    return pts


def equiripple_fit(n, *, fs, f, desired, weight, maxiter=MAX_ITERATIONS, lattice=None):
    """Symmetric length-``n`` FIR minimising ``max |weight (A - desired)|`` over ``f``.

    Parameters
    ----------
    n : int
        Filter length (odd: type I, even: type II, whose amplitude is 0 at ``fs/2``).
    fs : float
        Rate at which the filter runs, Hz.
    f, desired, weight : array_like
        Grid (Hz, within ``[0, fs/2]``), the amplitude wanted there and the weight of
        its error.
    maxiter : int
        Most exchanges.
    lattice : int, optional
        Runs of grid points ``fs / (2 lattice)`` apart (as :func:`lattice_grid` makes
        them) are evaluated by one FFT each per exchange, the others directly.

    Returns
    -------
    (taps, err) : (ndarray, float)
        The taps and the largest weighted error on ``f``; ``(NaN taps, inf)`` when the
        exchange breaks down.

    References
    ----------
    Parks & McClellan (1972); see the module's references.
    """
    f = np.asarray(f, dtype=float)
    d = np.asarray(desired, dtype=float)
    wt = np.asarray(weight, dtype=float)
    order = np.argsort(f, kind="stable")
    f, d, wt = f[order], d[order], wt[order]
    keep = np.concatenate([[True], np.diff(f) > 0])
    f, d, wt = f[keep], d[keep], wt[keep]
    w = 2.0 * np.pi * f / fs
    if n % 2:
        r, q = (n + 1) // 2, np.ones_like(w)
    else:
        r, q = n // 2, np.cos(w / 2.0)
        ok = q > 1e-6
        w, d, wt, q = w[ok], d[ok], wt[ok], q[ok]
    bad = np.full(n, np.nan), np.inf
    if r < 1 or w.size < r + 1:
        return bad
    lattice = 8 * r if lattice is None else int(lattice)
    with np.errstate(all="ignore"):
        c, converged = _solve(w, d / q, wt * q, r, maxiter, lattice)
        if c is None or not converged:
            # a first guess the exchange could not recover from: start again from the
            # points shared out band by band, and keep the better fit
            start = _band_start(w, r, lattice)
            c2, _ = _solve(w, d / q, wt * q, r, maxiter, lattice, start) if start is not None else (None, False)
            if c is None or (c2 is not None and _peak(c2, w, d / q, wt * q, lattice) < _peak(c, w, d / q, wt * q, lattice)):
                c = c2
        if c is None or not np.all(np.isfinite(c)):
            return bad
        amp = q * _cosine_sum(c, w, lattice)
    return _taps(n, c), float(np.max(np.abs(wt * (amp - d))))


def remez_bands(numtaps, edges, desired, *, weight=None, fs, grid_density=GRID_DENSITY, maxiter=MAX_ITERATIONS):
    """Equiripple filter with piecewise-constant bands, like ``scipy.signal.remez``.

    Parameters
    ----------
    numtaps : int
        Filter length.
    edges : sequence of float
        Band edges in Hz, ascending, pairs ``[lo0, hi0, lo1, hi1, ...]`` within ``[0, fs/2]``.
    desired, weight : sequence of float
        Amplitude and error weight of each band (weight default 1).
    fs : float
        Sample rate, Hz.
    grid_density : int
        Grid points per extremal (16, as McClellan et al. 1973).
    maxiter : int
        Most exchanges.

    Returns
    -------
    ndarray
        The taps, all NaN when the exchange breaks down.

    Notes
    -----
    The grid is that of McClellan et al. (1973): each band from its lower edge in steps
    of ``fs / (2 grid_density r)`` (``r`` extremals less one), the last point moved onto
    its upper edge; one FFT per band and exchange evaluates it.
    """
    edges = np.asarray(edges, dtype=float)
    nb = edges.size // 2
    if edges.size != 2 * nb or len(desired) != nb:
        raise ValueError(f"edges must be pairs, one desired value each: got {edges.size} edges, {len(desired)} values")
    if np.any(np.diff(edges) < 0) or edges[0] < 0 or edges[-1] > fs / 2.0:
        raise ValueError(f"band edges {edges.tolist()} must ascend within [0, fs/2 = {fs / 2.0:g}] Hz")
    weight = np.ones(nb) if weight is None else np.asarray(weight, dtype=float)
    if numtaps >= COMPILED_FROM:
        taps = _compiled_remez(numtaps, edges, desired, weight, fs=fs, grid_density=grid_density)
        if taps is not None:
            return taps
    r = (numtaps + 1) // 2 if numtaps % 2 else numtaps // 2
    lattice = grid_density * r
    f, d, w = [], [], []
    for i in range(nb):
        g = lattice_grid(edges[2 * i], edges[2 * i + 1], fs=fs, lattice=lattice)
        f.append(g)
        d.append(np.full(g.size, float(desired[i])))
        w.append(np.full(g.size, float(weight[i])))
    f, d, w = np.concatenate(f), np.concatenate(d), np.concatenate(w)
    if numtaps % 2 == 0:
        keep = f <= fs / 2.0 * (1.0 - 1.0 / lattice)  # type II: its amplitude is 0 at fs/2
        f, d, w = f[keep], d[keep], w[keep]
    taps, _ = equiripple_fit(numtaps, fs=fs, f=f, desired=d, weight=w, maxiter=maxiter, lattice=lattice)
    return taps


def _compiled_remez(numtaps, edges, desired, weight, *, fs, grid_density):
    """``scipy.signal.remez`` on the same bands (McClellan, Parks & Rabiner 1973), or None
    where it does not converge to finite taps (the numpy exchange then tries)."""
    import warnings

    import scipy.signal

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            taps = scipy.signal.remez(numtaps, edges, desired, weight=weight, fs=fs, maxiter=200,
                                      grid_density=grid_density)
    except ValueError:
        return None
    return taps if np.all(np.isfinite(taps)) else None
