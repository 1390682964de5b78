"""Streaming floating-point runners for a planned decimation chain.

Every runner takes complex64 blocks of any length, keeps its own state (history,
phase, sample counts) and returns complex64 blocks, so that feeding a capture in
pieces gives the same samples as feeding it at once.

Emission rule (all stages)
--------------------------
A stage that raises the rate by ``L`` and lowers it by ``M`` (``L = 1`` for a
decimator) emits output ``y[m]`` as soon as ``(m + 1) M <= N L``, ``N`` being the
number of input samples fed so far.  After ``N`` inputs, in any split, exactly
``floor(N L / M)`` outputs have come out, and they equal the first outputs of
``scipy.signal.upfirdn(h, x, L, M)`` (zero-extended where ``upfirdn`` stops at
the last non-zero sample).  Every input an emitted output depends on has
arrived by then, so no ``flush`` is needed; the last ``delay`` samples of the
filter tail are never produced.

Cost model
----------
The FIR runners lay the polyphase components (Crochiere & Rabiner 1981;
Vaidyanathan 1993, sec. 4.3, from memory) out once as a block-Toeplitz matrix: ``B`` outputs
per row of ``B D`` inputs, so one matrix product per block (BLAS ``cgemm``, taken
directly on the caller's block, no copy of it) plus one or two shifted additions
at the output rate.  That costs up to about ``2 L`` complex multiplies per output
against the direct form's ``L``, but runs many times faster than a per-tap loop.
Measured on one core of a shared 2-core x86 machine, blocks of 2**16 to 2**20
samples: a 76-tap decimator by 16 (CIC N = 5, R = 16 as its boxcar-power FIR)
700-880 Msps, with the channel's mixing folded in 600-760 Msps; one channel of
that stage and three half-bands 360-590 Msps; eight such channels fed from one
block 42-71 Msps, against 61.44 Msps for real time.
"""

from fractions import Fraction
import math
import os
import numbers

import numpy as np

from ..errors import ChannelizerError
from ..planning.stages import is_halfband
from . import blas_threads

__all__ = [
    "FirDecimator",
    "HalfbandDecimator",
    "Mixer",
    "MixingFirDecimator",
    "MixingFirBank",
]

_EMPTY = np.zeros(0, dtype=np.complex64)


# ----------------------------------------------------------------------------- checks
def _as_block(block):
    """The block as a contiguous 1-D complex64 array (no copy when it already is one)."""
    x = np.asarray(block)
    if x.ndim != 1:
        raise ChannelizerError(f"block: expected a 1-D array of samples, got shape {x.shape}")
    if x.dtype != np.complex64:
        if not (np.issubdtype(x.dtype, np.number) or x.size == 0):
            raise ChannelizerError(f"block: expected numeric samples, got dtype {x.dtype}")
        x = x.astype(np.complex64)
    return np.ascontiguousarray(x)


def _check_taps(taps, name="taps"):
    h = np.asarray(taps)
    if h.ndim != 1 or h.size == 0:
        raise ChannelizerError(f"{name}: expected a non-empty 1-D sequence, got shape {h.shape}")
    if not np.issubdtype(h.dtype, np.number) or np.issubdtype(h.dtype, np.bool_):
        raise ChannelizerError(f"{name}: expected numbers, got dtype {h.dtype}")
    h = h.astype(np.complex128 if np.iscomplexobj(h) else np.float64)
    if not np.all(np.isfinite(h)):
        raise ChannelizerError(f"{name}: every tap must be finite")
    return h


def _check_factor(value, name):
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 1:
        raise ChannelizerError(f"{name}: expected a positive integer, got {value!r}")
    return int(value)


def _exact(value, name, *, positive=False):
    """A finite real number as an exact Fraction (floats are taken at their binary value)."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise ChannelizerError(f"{name}: expected a number in Hz, got {value!r}")
    if isinstance(value, float) and not math.isfinite(value):
        raise ChannelizerError(f"{name}: must be finite, got {value!r}")
    f = Fraction(value)
    if positive and f <= 0:
        raise ChannelizerError(f"{name}: must be positive, got {value!r}")
    return f


def _read_only(a):
    a = np.array(a)
    a.setflags(write=False)
    return a


# ----------------------------------------------------------------------------- phase
class _Rotator:
    """Samples of ``exp(-2j pi frac(ratio * (offset + step * k)))``, ``k = 0, 1, ...``.

    The phase at the start of each call is computed exactly with Fractions from the
    integer index, so it never drifts however long the stream; inside a call a
    table of ``_CHUNK`` phasors is scaled by one phasor per chunk (float64 phase,
    error below ``1e-12`` cycles for blocks of millions of samples).
    """

    _CHUNK = 4096

    def __init__(self, ratio, *, step=1, offset=0):
        self._ratio = Fraction(ratio)
        self._step = int(step)
        self._offset = int(offset)
        inc = (self._ratio * self._step) % 1
        t = np.arange(self._CHUNK, dtype=np.float64)
        self._table = np.exp(-2j * np.pi * np.mod(t * float(inc), 1.0)).astype(np.complex64)
        self._chunk_inc = float((inc * self._CHUNK) % 1)
        self._k = 0

    @property
    def index(self):
        return self._k

    def apply(self, x, out):
        """``out = x * phasors`` for the next ``len(x)`` indices (``out`` may be ``x``)."""
        n = x.size
        k0 = self._k
        self._k += n
        if n == 0:
            return out
        phi0 = float((self._ratio * (self._offset + self._step * k0)) % 1)
        T = self._CHUNK
        c = -(-n // T)
        phis = np.mod(phi0 + np.arange(c) * self._chunk_inc, 1.0)
        s = np.exp(-2j * np.pi * phis).astype(np.complex64)
        full = n // T
        if full:
            xr = x[: full * T].reshape(full, T)
            o = out[: full * T].reshape(full, T)
            np.multiply(xr, self._table, out=o)
            o *= s[:full, None]
        r = n - full * T
        if r:
            np.multiply(x[full * T :], self._table[:r], out=out[full * T :])
            out[full * T :] *= s[full]
        return out


# ----------------------------------------------------------------------------- FIR engine
# OpenBLAS runs a product on several threads once m n k reaches a threshold; on a
# loaded 2-core machine (or beside our own worker threads) those threads stalled
# calls by up to a factor of 300 in our measurements, so every product is cut into
# pieces that stay single-threaded.  With the OpenBLAS 0.3.31 that numpy 2.4 ships,
# complex products ran on one thread for m n k < 65536 and on two from 65536 on.
# OpenBLAS is on one thread when OPENBLAS_NUM_THREADS=1 was set before numpy loaded it;
# where numpy came first, each product sets one thread while it runs, or, where it
# cannot, the products are cut small (channelizer/engines/blas_threads.py).
_BLAS_MODE = os.environ.get(blas_threads.MARK)
_BLAS_ONE_THREAD = os.environ.get("OPENBLAS_NUM_THREADS") == "1" and _BLAS_MODE != blas_threads.SEVERAL
_ONE_THREAD = blas_threads.OneThread(blas_threads.find_thread_setter() if _BLAS_MODE == blas_threads.EACH_PRODUCT else None)
_BLAS_SINGLE_THREAD_MNK = 1 << 22 if _BLAS_ONE_THREAD else 65535
_DIRECT_BLOCK = 16384  # blocks up to this many samples are copied into one buffer


def _layout(L, D):
    """``(B, P, Q)``: outputs per row, inputs per row (``B D``), row blocks per output.

    Short filters take the fewest outputs per row that need only two row blocks
    (``B D >= L - D``); longer ones cap ``B`` near 12 and accept more row blocks,
    up to about 7.  Chosen from timings on a 2-core x86 machine (CIC 76/16,
    half-bands of 11 to 47 taps, 24- and 76-tap FIRs): the product's speed depends
    on the matrix shape more than on its multiply count.
    """
    if L <= D:
        return 1, D, 1
    B = -(-(L - D) // D)
    if B > 12:
        B = max(12, -(-(L - D) // (6 * D)))
    P = B * D
    return B, P, 1 + -(-(L - D) // P)


class _BlockFir:
    """``y[n] = sum_k h[k] x[n D - k]`` with the emission rule of the module docstring.

    Rows of ``P = B D`` inputs, row ``r`` (counted from the first output still to
    come) starting at input ``s + r P`` with ``s = n_out D - (Q - 1) P - D + 1``;
    ``Z = rows @ G`` with ``G[i, q, j] = h[q P + j D + D - 1 - i]``, and the ``B``
    outputs of row ``u`` are ``sum_q Z[u + Q - 1 - q, q, :]``.
    """

    def __init__(self, taps, decimation):
        h = np.asarray(taps)
        # several filters of one length (one per row of ``taps``) share the input rows:
        # their matrices sit side by side, so one product serves every channel
        self._multi = h.ndim == 2
        hs = h if self._multi else h[None, :]
        C, L = hs.shape
        D = decimation
        B, P, Q = _layout(L, D)
        i = np.arange(P)[:, None, None]
        q = np.arange(Q)[None, :, None]
        j = np.arange(B)[None, None, :]
        k = q * P + j * D + D - 1 - i
        valid = (k >= 0) & (k < L)
        G = np.where(valid[:, None], hs[:, np.clip(k, 0, L - 1)].transpose(1, 0, 2, 3), 0)  # (P, C, Q, B)
        self._G = np.ascontiguousarray(G.reshape(P, C * Q * B).astype(np.complex64))
        self._C = C
        self._L, self._D, self._B, self._P, self._Q = L, D, B, P, Q
        self._chunk_rows = max(1, _BLAS_SINGLE_THREAD_MNK // (P * Q * B * C))
        self._hist = np.zeros((Q - 1) * P + D - 1, dtype=np.complex64)
        self.n_in = 0
        self.n_out = 0

    def _product(self, samples, out):
        """``out = samples.reshape(-1, P) @ G`` in single-threaded pieces (see above)."""
        P = self._P
        rows = out.shape[0]
        step = self._chunk_rows
        with _ONE_THREAD:
            for r0 in range(0, rows, step):
                r1 = min(rows, r0 + step)
                np.matmul(samples[r0 * P : r1 * P].reshape(r1 - r0, P), self._G, out=out[r0:r1])

    def run(self, x):
        """Feed ``x`` (1-D complex64, may be strided); return the outputs now due."""
        D, B, P, Q = self._D, self._B, self._P, self._Q
        hist = self._hist
        hs = hist.size
        n = x.size
        total = self.n_in + n
        m_end = total // D
        n_new = m_end - self.n_out
        if n_new <= 0:
            self._hist = np.concatenate((hist, x))
            self.n_in = total
            return np.zeros((self._C, 0), np.complex64) if self._multi else _EMPTY
        nro = -(-n_new // B)
        nrows = nro + Q - 1
        need = nrows * P  # samples from hist[0] that the rows cover
        have = hs + n
        C = self._C
        Z = np.empty((nrows, C * Q * B), dtype=np.complex64)
        if n <= max(_DIRECT_BLOCK, 4 * (hs + P + D)):
            # small block: one buffer of history, block and zero padding
            buf = np.empty(max(need, have), dtype=np.complex64)
            buf[:hs] = hist
            buf[hs:have] = x
            buf[have:] = 0
            self._product(buf[:need], Z)
            self._hist = buf[n_new * D : have].copy()
        else:
            # large block: rows inside the block are read in place
            x = np.ascontiguousarray(x)
            rh = -(-hs // P)  # rows that begin in the history
            rt = max(rh, min(nrows, have // P))  # rows before any that pass the end
            head = np.empty(rh * P, dtype=np.complex64)
            head[:hs] = hist
            head[hs:] = x[: rh * P - hs]
            self._product(head, Z[:rh])
            self._product(x[rh * P - hs : rt * P - hs], Z[rh:rt])
            if nrows > rt:
                tail = np.zeros((nrows - rt) * P, dtype=np.complex64)
                tail[: have - rt * P] = x[rt * P - hs :]
                self._product(tail, Z[rt:])
            self._hist = x[n_new * D - hs :].copy()
        self.n_in = total
        self.n_out = m_end
        if not self._multi:
            if Q == 1:
                return Z.reshape(-1)[:n_new]
            Z3 = Z.reshape(nrows, Q, B)
            y = np.add(Z3[Q - 1 : Q - 1 + nro, 0, :], Z3[Q - 2 : Q - 2 + nro, 1, :])
            for qq in range(2, Q):
                y += Z3[Q - 1 - qq : Q - 1 - qq + nro, qq, :]
            return y.reshape(-1)[:n_new]
        Z4 = Z.reshape(nrows, C, Q, B)
        y = Z4[Q - 1 : Q - 1 + nro, :, 0, :].copy()
        for qq in range(1, Q):
            y += Z4[Q - 1 - qq : Q - 1 - qq + nro, :, qq, :]
        return y.transpose(1, 0, 2).reshape(C, -1)[:, :n_new]


# ----------------------------------------------------------------------------- public stages
class Mixer:
    """Shift a channel to zero frequency: ``y[n] = x[n] exp(-2j pi f_c n / fs)``.

    Parameters
    ----------
    offset : float
        Channel centre ``f_c`` in Hz relative to the capture centre.
    fs : float
        Input sample rate in Hz.
    start_index : int, optional
        Absolute index ``n`` of the first sample fed (0 at the first sample of the
        capture, where the phase is 0).

    Notes
    -----
    The phase of each block's first sample is ``frac(n0 f_c / fs)`` computed
    exactly with rationals from the integer index ``n0``, so the phase is as good
    after billions of samples as at the start.  Cost: two complex multiplies per
    sample.

    References
    ----------
    A. V. Oppenheim and R. W. Schafer, *Discrete-Time Signal Processing*, 3rd ed.,
    2010, sec. 2.9 (modulation property of the DTFT; section from memory).
    """

    interpolation = 1
    decimation = 1
    delay = 0.0

    def __init__(self, offset, *, fs, start_index=0):
        ratio = _exact(offset, "offset") / _exact(fs, "fs", positive=True)
        self.offset = float(offset)
        self.fs = float(fs)
        self._start = _check_index(start_index)
        self._rot = _Rotator(ratio, step=1, offset=self._start)

    @property
    def input_count(self):
        return self._rot.index

    @property
    def output_count(self):
        return self._rot.index

    def process(self, block):
        """Mix the next block; returns a new complex64 array of the same length."""
        x = _as_block(block)
        return self._rot.apply(x, np.empty_like(x))


def _check_index(value):
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 0:
        raise ChannelizerError(f"start_index: expected a non-negative integer, got {value!r}")
    return int(value)


class FirDecimator:
    """FIR filter and down-sampler: ``y[n] = sum_k h[k] x[n D - k]``.

    Equal to ``scipy.signal.upfirdn(taps, x, 1, decimation)[:len(x) // decimation]``
    in any block split (see the module docstring for when samples come out).

    Parameters
    ----------
    taps : array_like
        Impulse response ``h`` at the input rate, real or complex.
    decimation : int
        Down-sampling factor ``D`` (1 for a plain filter).

    Attributes
    ----------
    delay : float
        Group delay in input samples, ``(L - 1) / 2``; exact for linear-phase taps,
        nominal otherwise.

    Notes
    -----
    Polyphase form (only the outputs that are kept are computed), laid out as a
    block-Toeplitz matrix product; see the module docstring for the cost.

    References
    ----------
    R. E. Crochiere and L. R. Rabiner, "Interpolation and decimation of digital
    signals - a tutorial review", Proc. IEEE 69(3):300-331, 1981; *Multirate
    Digital Signal Processing*, Prentice-Hall, 1983, ch. 3 (from memory).
    P. P. Vaidyanathan, *Multirate Systems and Filter Banks*, Prentice-Hall,
    1993, sec. 4.3 (polyphase representation; section from memory).
    """

    interpolation = 1

    def __init__(self, taps, decimation):
        h = _check_taps(taps)
        self.decimation = _check_factor(decimation, "decimation")
        self.taps = _read_only(h)
        self.delay = (h.size - 1) / 2.0
        self._engine = _BlockFir(h, self.decimation)

    @property
    def input_count(self):
        return self._engine.n_in

    @property
    def output_count(self):
        return self._engine.n_out

    def process(self, block):
        """Filter the next block; returns the complex64 outputs that became due."""
        return self._engine.run(_as_block(block))


class MixingFirDecimator:
    """Mixer followed by FIR decimator, computed at the output rate.

    ``y[n] = exp(-j w n D) sum_k h[k] exp(+j w k) x[n D - k]``, ``w = 2 pi f_c / fs``:
    the same samples as ``Mixer(offset, fs=fs)`` then ``FirDecimator(taps, D)``,
    because ``exp(-j w (n D - k)) = exp(-j w n D) exp(+j w k)``.  The taps are
    modulated once and the rotation is applied to one sample in ``D``.

    Parameters
    ----------
    taps : array_like
        Low-pass impulse response ``h`` at the input rate.
    decimation : int
        ``D``.
    offset : float
        Channel centre ``f_c`` in Hz relative to the capture centre.
    fs : float
        Input sample rate in Hz.
    start_index : int, optional
        Absolute capture index of the first sample fed (phase 0 at index 0).

    References
    ----------
    A. V. Oppenheim and R. W. Schafer, *Discrete-Time Signal Processing*, 3rd ed.,
    2010, sec. 2.9 (modulation) and 4.6 (down-sampling) (sections from memory).
    R. E. Crochiere and L. R. Rabiner, *Multirate Digital Signal Processing*,
    1983, ch. 7 (band-pass decimation with modulated filters; from memory).
    """

    interpolation = 1

    def __init__(self, taps, decimation, *, offset, fs, start_index=0):
        h = _check_taps(taps)
        self.decimation = _check_factor(decimation, "decimation")
        ratio = _exact(offset, "offset") / _exact(fs, "fs", positive=True)
        self.offset = float(offset)
        self.fs = float(fs)
        start = _check_index(start_index)
        self.taps = _read_only(h)
        self.delay = (h.size - 1) / 2.0
        inc = float(ratio % 1)
        k = np.arange(h.size, dtype=np.float64)
        modulated = h * np.exp(2j * np.pi * np.mod(k * inc, 1.0))
        self._engine = _BlockFir(modulated, self.decimation)
        self._rot = _Rotator(ratio, step=self.decimation, offset=start)

    @property
    def input_count(self):
        return self._engine.n_in

    @property
    def output_count(self):
        return self._engine.n_out

    def process(self, block):
        """Mix, filter and decimate the next block; returns complex64 outputs."""
        y = self._engine.run(_as_block(block))
        if y.size == 0:
            return y
        return self._rot.apply(y, np.empty_like(y))


class MixingFirBank:
    """Several :class:`MixingFirDecimator` of one filter, one product for all.

    Channels whose chains start with the same low-pass ``h`` and decimation read
    the same input rows; their modulated filters ``h[k] exp(+j w_c k)`` are laid
    side by side in one matrix, so the input is traversed once for all of them.
    Each channel's output equals its own :class:`MixingFirDecimator`.

    Parameters
    ----------
    taps : array_like
        Low-pass impulse response at the input rate.
    decimation : int
    offsets : sequence of float
        Channel centres in Hz relative to the capture centre.
    fs : float
        Input sample rate in Hz.
    start_index : int, optional
        Absolute capture index of the first sample fed.
    """

    interpolation = 1

    def __init__(self, taps, decimation, *, offsets, fs, start_index=0):
        h = _check_taps(taps)
        self.decimation = _check_factor(decimation, "decimation")
        start = _check_index(start_index)
        self.offsets = tuple(float(o) for o in offsets)
        if not self.offsets:
            raise ChannelizerError("offsets: a bank needs at least one channel")
        self.taps = _read_only(h)
        self.delay = (h.size - 1) / 2.0
        k = np.arange(h.size, dtype=np.float64)
        rows, self._rots = [], []
        for off in self.offsets:
            ratio = _exact(off, "offset") / _exact(fs, "fs", positive=True)
            rows.append(h * np.exp(2j * np.pi * np.mod(k * float(ratio % 1), 1.0)))
            self._rots.append(_Rotator(ratio, step=self.decimation, offset=start))
        self._engine = _BlockFir(np.array(rows), self.decimation)

    def process(self, block):
        """Mix, filter and decimate the next block for every channel; a list of arrays."""
        ys = self._engine.run(_as_block(block))
        if ys.shape[1] == 0:
            return [_EMPTY] * len(self.offsets)
        return [rot.apply(y, np.empty_like(y)) for rot, y in zip(self._rots, ys)]


class HalfbandDecimator:
    """Half-band low-pass and down-sampler by 2, multiplying only non-zero taps.

    A half-band response of length ``4K - 1`` has ``h[2K - 1] = 1/2`` and
    ``h[k] = 0`` at every other odd ``k``, so
    ``y[n] = sum_j h[2j] x[2(n - j)] + h[2K - 1] x[2(n - K) + 1]``:
    a ``2K``-tap filter on the even samples plus one scaled, delayed odd sample.

    Parameters
    ----------
    taps : array_like
        Half-band impulse response (checked with
        :func:`channelizer.stages.is_halfband`; ``ChannelizerError`` otherwise).

    Attributes
    ----------
    delay : float
        ``(L - 1) / 2`` input samples.

    Notes
    -----
    Only the ``2K`` even-indexed taps enter the matrix product and the centre tap
    costs one real-by-complex multiply per output; the ``2K - 1`` zero taps are
    never multiplied (the block-Toeplitz layout of the module Notes still pads
    rows with structural zeros).  Against :class:`FirDecimator` on the same taps,
    which multiplies the zeros too, this path measured about as fast for 11 taps
    and 1.1 to 1.5 times faster for 47 taps on blocks of 4096 samples or more,
    about 0.8 times as fast on blocks of 1000, where per-call overhead dominates.

    References
    ----------
    P. P. Vaidyanathan and T. Q. Nguyen, "A trick for the design of FIR half-band
    filters", IEEE Trans. Circuits Syst. 34(3):297-300, 1987.
    P. P. Vaidyanathan, *Multirate Systems and Filter Banks*, 1993, sec. 4.6
    (from memory).
    """

    interpolation = 1
    decimation = 2

    def __init__(self, taps):
        h = _check_taps(taps)
        if np.iscomplexobj(h) or not is_halfband(h):
            raise ChannelizerError(
                f"taps: not a half-band response (length {h.size}; need odd length 4K-1, "
                "centre tap 0.5, zero taps at even distances from the centre, symmetry)"
            )
        self.taps = _read_only(h)
        self.delay = (h.size - 1) / 2.0
        K = (h.size + 1) // 4
        self._K = K
        self._centre = np.float32(h[2 * K - 1])
        self._even = _BlockFir(h[0::2], 1)
        self._odd_hist = np.zeros(K, dtype=np.complex64)
        self._pending = _EMPTY
        self._n_in = 0

    @property
    def input_count(self):
        return self._n_in

    @property
    def output_count(self):
        return self._even.n_out

    def process(self, block):
        """Filter and decimate the next block; returns complex64 outputs."""
        x = _as_block(block)
        self._n_in += x.size
        if self._pending.size:
            x = np.concatenate((self._pending, x))
        npairs = x.size // 2
        self._pending = x[2 * npairs :].copy()
        if npairs == 0:
            return _EMPTY
        pairs = x[: 2 * npairs].reshape(npairs, 2)
        y = self._even.run(pairs[:, 0])
        # y[n] += h[2K - 1] x[2(n - K) + 1]: the odd samples, K behind, from history first
        odd = np.concatenate((self._odd_hist, pairs[:, 1]))
        y += self._centre * odd[:npairs]
        self._odd_hist = odd[npairs:].copy()
        return y


# ----------------------------------------------------------------------------- chains


