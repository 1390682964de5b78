"""Oversampled polyphase DFT analysis bank, and every channel's fine stages after it.

What is computed (enough to reproduce it outside this package)
---------------------------------------------------------------
Inputs: complex samples ``x[m]``, ``m = 0, 1, ...`` (``x[m] = 0`` for ``m < 0``),
a real prototype low-pass ``h[j]`` of length ``K M`` (unit gain at DC), ``M``
bins and the oversampling ``O`` (``M`` a multiple of ``O``); the bank decimates
by ``D = M / O``.  Bin ``k`` (``0 <= k < M``) is centred on ``k fs / M``
(folded into ``[-fs/2, fs/2)``) and its ``n``-th output is

    y_k[n] = sum_{j=0}^{KM-1} h[j] x[nD - j] exp(-2j pi k (nD - j) / M),

i.e. the input mixed down by the bin centre, filtered by ``h`` and kept at every
``D``-th sample: ``upfirdn(h, x * exp(-2j pi k m / M), 1, D)``, the first
``floor(N / D)`` outputs after ``N`` inputs in any block split (the emission
rule of :mod:`channelizer.engines.streaming`).

How: with ``j = mM + p`` the exponential splits into
``exp(-2j pi k nD / M) exp(+2j pi k p / M)``, so the branch sums
``v_p[n] = sum_{m<K} h[mM + p] x[nD - mM - p]`` (the polyphase branches, fed by
the commutator) go through one ``M``-point DFT per output, and the factor
``exp(-2j pi k nD / M)`` becomes the circular shift of the branch outputs by
``s = nD mod M`` (it takes ``O`` values) before the DFT.  Written with the
time-reversed window ``u[r] = sum_m h[KM-1-mM-r] x[nD-KM+1+mM+r]``
(``v_p = u[M-1-p]``), ``y[n] = FFT_M(roll(u, s + 1))``, computed as
``FFT_M(u)[k] exp(-2j pi k (s + 1) / M)`` on the kept bins (shift theorem;
on the FFT path with ``O = 1``, where ``s + 1 = 1`` always, the roll is taken on the
transform's input instead).  Cost per input sample:
``K O`` real-by-complex multiplies plus one ``M``-point FFT per ``D`` inputs.

For long prototypes (:func:`channelizer.planning.bank.bank_method`) the branch sums run as
overlap-save FFT correlations along time, and the ``M``-point DFT is taken in
the transformed domain by residues ``k = c + O q``: ``O`` transforms of ``D``
points, of which only the kept bins are transformed back (see
:meth:`PolyphaseBank._by_fft`).  Per input sample that is about ``N / S`` (frame
length over new rows, near 1.1) transforms along time, ``O`` products and ``O``
``D``-point transforms, and ``len(keep) / D`` inverse transforms, whatever ``K``.
Both paths compute the sums above; only rounding differs.

Where numba is installed (the ``fast`` extra), short prototypes (``K O`` up to
:data:`COMPILED_UP_TO_TAPS`) run the branch sums above as compiled loops instead
(:mod:`channelizer.engines.branch_kernel`: each row summed over ``m`` from 0 up,
one fused multiply-add per tap, so a row does not depend on the block split), the
``M``-point FFT down the columns of each run's transpose (bins out as rows) and the
shift phase on the kept bins while they are copied out (see
:meth:`PolyphaseBank._by_kernel`).  The planner's costs count the numpy paths, so a
plan does not depend on what the machine has installed.

A channel at offset ``f_c`` from the capture centre takes the bin ``k`` nearest
to it; its residual ``r = f_c - k fs / M`` is removed at the bin rate
``fs_b = fs / D`` by the first of its fine stages, exactly as
:func:`channelizer.engines.float_chain.build_chain` does for a chain fed at
``fs_b`` with ``offset = r`` (``exp(-2j pi r n / fs_b)``, phase 0 at ``n = 0``);
the fine stages (decimation, rational stage) then run as that chain.  The
channel therefore sees the prototype shifted by its residual:
``H(u + r) F(u)`` at offset ``u`` from its centre.

References
----------
R. E. Crochiere and L. R. Rabiner, *Multirate Digital Signal Processing*,
Prentice-Hall, 1983, ch. 7 (DFT filter banks; from memory).
P. P. Vaidyanathan, *Multirate Systems and Filter Banks*, Prentice-Hall, 1993,
ch. 4 and 8 (from memory).
f. j. harris, C. Dick and M. Rice, "Digital receivers and transmitters using
polyphase filter banks for wireless communications", IEEE Trans. MTT
51(4):1395-1412, 2003 (the circular shift of the oversampled form; from memory).
"""

import threading

import numpy as np
import scipy.fft

from ..errors import ChannelizerError
from ..planning.bank import bank_method, fft_frame, kept_bins
from .float_chain import build_chain
from .streaming import _EMPTY, _as_block, _check_factor, _check_taps

__all__ = ["PolyphaseBank", "BankChannelizer", "compiled_kernel", "why_not_compiled"]

#: Threads for the FFTs (rows are independent; the targets count 2 cores).
FFT_WORKERS = 2
#: Complex values per pass over a batch's rows on the FFT path (a pass stays in cache).
CHUNK = 1 << 17
#: With numba installed (the ``fast`` extra), banks of at most this many taps per input
#: sample (``K O``) run their branch sums compiled (:mod:`channelizer.engines.branch_kernel`)
#: whatever :func:`~channelizer.planning.bank.bank_method` says: timed on 2 cores (best of
#: three runs each, alternating), the 12.5 kHz raster of 2.4 Msps (``K O = 27``) ran in 0.78
#: of its FFT path's wall time (0.74 of its CPU time), the 200 kHz raster of 61.44 Msps
#: (``K O = 36``) in 0.74 (0.76).  The kernel's cost grows with the taps, the FFT path's does not.
COMPILED_UP_TO_TAPS = 64
#: Complex values per run of the compiled branch sums (the run's work arrays stay in cache,
#: and two threads share the runs of a block evenly).
KERNEL_RUN = 1 << 16
#: Frames taken together through each step of the FFT path (each slice of the residue
#: spectra ``G`` is then read once for all of them).  One: on 2 threads, batches of two
#: frames of the 61.44 Msps bank ran 8 % slower (their work arrays leave the cache).
BATCH = 1


class PolyphaseBank:
    """Streaming oversampled polyphase DFT analysis bank (see the module docstring).

    Parameters
    ----------
    prototype : array_like
        Real low-pass of length ``K M``.
    bins : int
        ``M``, the number of bins (DFT size).
    oversampling : int
        ``O``; ``M`` must be a multiple of it.  The bank decimates by ``M / O``.
    keep : sequence of int, optional
        Bins whose outputs are returned (all by default).
    method : {'auto', 'fft', 'direct', 'compiled'}
        How the branch filters run: overlap-save FFT correlation, ``K``
        element-wise passes, or compiled loops (numba, the ``fast`` extra); ``'auto'``
        takes ``'compiled'`` for ``K O <= COMPILED_UP_TO_TAPS`` where numba is installed,
        otherwise as :func:`channelizer.planning.bank.bank_method` chooses.  All compute
        the same sums.

    Examples
    --------
    >>> import numpy as np
    >>> bank = PolyphaseBank(np.ones(32) / 32, 8, 2)
    >>> bank.process(np.ones(20, np.complex64)).shape
    (5, 8)
    """

    interpolation = 1

    def __init__(self, prototype, bins, oversampling, *, keep=None, method="auto"):
        h = _check_taps(prototype, "prototype")
        if np.iscomplexobj(h):
            raise ChannelizerError("prototype: expected real taps")
        M = _check_factor(bins, "bins")
        O = _check_factor(oversampling, "oversampling")
        if M % O:
            raise ChannelizerError(f"bins: {M} is not a multiple of the oversampling {O}")
        if h.size % M:
            raise ChannelizerError(f"prototype: length {h.size} is not a multiple of {M} bins")
        self.bins, self.oversampling = M, O
        self.decimation = M // O
        self.K = h.size // M
        self.delay = (h.size - 1) / 2.0
        self.keep = None if keep is None else np.asarray(keep, dtype=np.intp)
        if self.keep is not None and (self.keep.ndim != 1 or self.keep.size == 0 or self.keep.min() < 0 or self.keep.max() >= M):
            raise ChannelizerError(f"keep: expected bin numbers from 0 to {M - 1}")
        self._runs = None if self.keep is None else _runs(self.keep)
        k = np.arange(M) if self.keep is None else self.keep
        shifts = (np.arange(O)[:, None] * (M // O) + 1) % M  # s + 1 for n % O == c
        self._phase = np.exp(-2j * np.pi * ((k[None, :] * shifts) % M) / M).astype(np.complex64)
        # hr[m, r] = h[KM-1-mM-r], laid out as float32 pairs to multiply I and Q alike
        hr = h[::-1].reshape(self.K, M).astype(np.float32)
        # branch filters by overlap-save FFT correlation, K element-wise passes (short
        # prototypes, or on request: see _branches), or compiled loops (numba: _by_kernel)
        if method not in ("auto", "fft", "direct", "compiled"):
            raise ChannelizerError(f"method: expected 'auto', 'fft', 'direct' or 'compiled', got {method!r}")
        if method == "compiled" and compiled_kernel() is None:
            raise ChannelizerError(f"method: 'compiled' is not available here: {why_not_compiled()}")
        if method == "auto":
            method = "compiled" if self.K * O <= COMPILED_UP_TO_TAPS and compiled_kernel() is not None else bank_method(self.K, O, M)
        self.method = method
        if self.method == "fft":
            self._N, self._S = fft_frame(self.K, O)  # frame length, new rows per frame
            self._G = _residue_spectra(hr, O, self.decimation, self._N)
            if O == 1:  # frames come rolled by one column (see _by_fft): so do their spectra
                self._G = np.roll(self._G, 1, axis=-1)
            self._batch = max(1, int(BATCH))
            self._chunk = max(1, min(self._N, CHUNK // (self._batch * M)))  # rows of a batch per pass (a pass stays in cache)
            self._local = threading.local()
            # kept bin k = c + Oq sits at c D + q of the residues' transforms
            self._idx = None if self.keep is None and O == 1 else (k % O) * self.decimation + k // O
        elif self.method == "compiled":
            self._kernel = compiled_kernel()
            self._h2 = _aligned((self.K, 2 * M), np.float32, fill=np.repeat(hr, 2, axis=1))
            step = 4 * O  # rows per run: a multiple of 4 O whose work arrays stay in cache
            self._chunk = max(step, KERNEL_RUN // M // step * step)
            self._local = threading.local()
            self._kept = np.arange(M) if self.keep is None else self.keep
        else:
            self._h2 = np.repeat(hr, 2, axis=1)
            self._rows = max(16, 32768 // M)  # rows per pass: the pass stays in cache
        self._hist = np.zeros(h.size - 1, dtype=np.complex64)
        self.n_in = 0
        self.n_out = 0

    def _branches(self, buf, n_new):
        """``u[n, t] = sum_m hr[m, t] buf[nD + mM + t]`` for ``n < n_new``, by ``K``
        element-wise passes; complex64 ``(n_new, M)``."""
        M, D, K = self.bins, self.decimation, self.K
        fb = buf.view(np.float32)
        out = np.empty((n_new, 2 * M), np.float32)
        tmp = np.empty((self._rows, 2 * M), np.float32)
        step = 2 * D * 4
        for r0 in range(0, n_new, self._rows):
            r1 = min(n_new, r0 + self._rows)
            o, t = out[r0:r1], tmp[: r1 - r0]
            for m in range(K):
                base = fb[2 * (m * M + r0 * D) :]
                w = np.lib.stride_tricks.as_strided(base, shape=(r1 - r0, 2 * M), strides=(step, 4), writeable=False)
                if m == 0:
                    np.multiply(w, self._h2[0], out=o)
                else:
                    np.multiply(w, self._h2[m], out=t)
                    o += t
        return out.view(np.complex64)

    def _by_kernel(self, hist, x, n_new, first_c):
        """The kept bins' outputs ``(len(keep), n_new)``, shift phase included, by the compiled
        branch sums (:mod:`channelizer.engines.branch_kernel`) and one ``M``-point FFT per output.

        Runs of ``self._chunk`` rows (a multiple of ``4 O``; their work arrays stay in cache) are
        handed to ``FFT_WORKERS`` threads, each taking the next run when it is free and copying
        the stretch of ``buf`` (the history then ``x``) that its rows read into its own aligned
        array (no copy of the whole block up front, and the stretch is in cache when read).  Each run's
        rows are transformed down the columns of their transpose, so that the bins come out as
        rows, time along each (the FFT's own copy-out does the transposition): the kept rows are
        then copied out times their shift phase, one contiguous pass (``spread_bins``).
        """
        M, D, O = self.bins, self.decimation, self.oversampling
        R, hs, KM = self._chunk, hist.size, self.K * M
        nk = M if self.keep is None else self.keep.size
        out = np.empty((nk, n_new), np.complex64)
        # row i of a run is output r0 + i, r0 a multiple of O: its phase is c = (first_c + i) % O
        phase = np.ascontiguousarray(self._phase[:1].T if O == 1 else self._phase[(first_c + np.arange(R)) % O].T)
        todo = iter(range(0, n_new, R))

        def work():
            w = self._local.__dict__.get("arrays")
            if w is None:
                w = self._local.arrays = (_aligned(((R - 1) * D + KM,), np.complex64), _aligned((R, 2 * M), np.float32))
            stretch, u = w
            for r0 in todo:  # the iterator hands each run to one thread (it runs under the GIL)
                r1 = min(n_new, r0 + R)
                a, b = r0 * D, (r1 - 1) * D + KM  # rows r0 <= n < r1 read buf[a:b]
                if a < hs:
                    stretch[: min(b, hs) - a] = hist[a:b]
                    stretch[hs - a : b - a] = x[: max(0, b - hs)]
                else:
                    stretch[: b - a] = x[a - hs : b - hs]
                self._kernel.branch_sums(stretch.view(np.float32), self._h2, D, M, 0, r1 - r0, u)
                y = scipy.fft.fft(u[: r1 - r0].view(np.complex64).T, axis=0)  # (M, r1 - r0)
                self._kernel.spread_bins(y, self._kept, phase, out, r0)

        workers = min(FFT_WORKERS, -(-n_new // R))
        pending = [_pool().submit(work) for _ in range(workers - 1)]
        work()
        for p in pending:
            p.result()
        return out

    def _take_kept(self, y):
        """The kept bins of ``y`` (bins on the last axis), by strided runs (far quicker than a gather)."""
        if self.keep is None:
            return y
        out = np.empty(y.shape[:-1] + (self.keep.size,), np.complex64)
        for d0, first, count, step in self._runs:
            out[..., d0 : d0 + count] = y[..., first : first + (count - 1) * step + 1 : step]
        return out

    def _by_fft(self, hist, x, n_new, first_c):
        """The kept bins' outputs ``(len(keep), n_new)``, shift phase included, by
        overlap-save correlation; ``X[i, b] = buf[iD + b]``, ``buf`` the history
        then the block ``x`` (zero past it).

        With ``t = aD + b``, ``u[n, t] = sum_l c_t[l] X[n + l, b]``,
        ``c_t[mO + a] = hr[m, t]`` (``l < KO``): frames of ``N`` rows of ``X``
        (``S <= N - KO + 1`` apart, ``S`` a multiple of ``O``) are transformed
        along time to ``F[f, b]`` and the ``M``-point DFT over ``t`` (it commutes
        with the transform along time) is taken by residues: for ``k = c + Oq``,
        ``W_M^{kt} = W_O^{ca} W_M^{cb} W_D^{qb}`` (``W_P = exp(-2j pi / P)``), so
        ``Y[f, c + Oq] = FFT_D(F[f, :] G[f, c, :])[q]`` with
        ``G[f, c, b] = W_M^{cb} sum_a conj(FFT_N(c_{aD+b}))[f] W_O^{ca}``:
        ``O`` transforms of ``D`` points instead of one of ``M``.  The kept bins
        are transformed back along time; the first ``S`` rows of each frame are
        exact (no circular wrap).  Frames go ``BATCH`` at a time through each step; the
        batches of a block go to ``FFT_WORKERS`` threads, each taking the next one when
        it is free (numpy and the FFT release the GIL).
        """
        D, O, N, M, S = self.decimation, self.oversampling, self._N, self.bins, self._S
        nb = -(-n_new // S)
        hs = hist.size
        nk = M if self.keep is None else self.keep.size
        out = np.empty((nk, nb, S), np.complex64)
        # O = 1: every output has the shift s + 1 = 1, taken as roll(u, 1): the frame's
        # columns and G come rolled by one (F[:, b - 1] G[:, b - 1] at column b, the
        # transform of u[t - 1]); else the phase after the transform back
        phase = None if O == 1 else np.ascontiguousarray(self._phase[(first_c + np.arange(S)) % O].T)[:, None, :]  # (nk, 1, S)
        G, idx = self._G, self._idx

        def fill(flat, start):
            """``flat[j] = buf[start + j]``: the history, then the block, then zeros."""
            h = min(max(hs - start, 0), flat.size)
            flat[:h] = hist[start : start + h]
            b0 = max(start - hs, 0)
            n_x = min(max(x.size - b0, 0), flat.size - h)
            flat[h : h + n_x] = x[b0 : b0 + n_x]
            flat[h + n_x :] = 0

        def frame(rows, f):
            """Rows ``X[fS : fS + N]`` of frame ``f`` into ``rows`` (``N + 1`` rows of ``D``);
            with ``O = 1`` rolled by one column, ``X[i, b - 1]`` at column ``b``: the samples
            from one earlier (``buf[a - 1 + j]``, ``a = fSD``), column 0 then taken from
            the next row (``X[i, D - 1] = buf[a - 1 + (i + 1) D]``)."""
            flat, a = rows.reshape(-1), f * S * D
            if O > 1:
                fill(flat[: N * D], a)
                return
            if a == 0:  # buf[-1] lands in column 0 of row 0, which is replaced below
                flat[0] = 0
                fill(flat[1 : N * D + 1], 0)
            else:
                fill(flat[: N * D + 1], a - 1)
            rows[:N, 0] = flat[D : N * D + 1 : D]

        def batch(f0, f1):
            frames, Y, P = self._buffers()  # this thread's work arrays: transforms run in place
            B = f1 - f0
            for i in range(B):
                frame(frames[i], f0 + i)
            F = scipy.fft.fft(frames[:B, :N], axis=1, overwrite_x=True)  # (B, N, D)
            if Y is None:  # one residue, every bin: no gather
                F *= G[:, 0]
                Y = scipy.fft.fft(F, axis=2, overwrite_x=True)
            else:
                rows = P.shape[1]
                for r0 in range(0, N, rows):
                    r1 = min(N, r0 + rows)
                    p = P[:B, : r1 - r0]
                    np.multiply(F[:, r0:r1, None, :], G[r0:r1], out=p)
                    Z = scipy.fft.fft(p, axis=3, overwrite_x=True).reshape(B, r1 - r0, M)
                    if idx is None:
                        Y[:B, r0:r1] = Z
                    else:
                        np.take(Z, idx, axis=2, out=Y[:B, r0:r1], mode="clip")
                Y = Y[:B]
            y = scipy.fft.ifft(Y.transpose(0, 2, 1), axis=2)  # (B, nk, N): the transform's copy-in transposes
            if phase is None:
                np.copyto(out[:, f0:f1], y[:, :, :S].transpose(1, 0, 2))
            else:
                np.multiply(y[:, :, :S].transpose(1, 0, 2), phase, out=out[:, f0:f1])

        # batches handed out one at a time to whichever thread is free (the calling
        # thread works too): a thread slowed by another process takes fewer of them
        todo = iter([(g, min(nb, g + self._batch)) for g in range(0, nb, self._batch)])

        def work():
            for f0, f1 in todo:  # the iterator hands each batch to one thread (it runs under the GIL)
                batch(f0, f1)

        workers = min(FFT_WORKERS, -(-nb // self._batch))
        pending = [_pool().submit(work) for _ in range(workers - 1)]
        work()
        for p in pending:
            p.result()
        return out.reshape(nk, nb * S)[:, :n_new]

    def _buffers(self):
        """The calling thread's work arrays ``(frames, Y, P)`` for :meth:`_by_fft` (made on first use)."""
        w = self._local.__dict__.get("arrays")
        if w is None:
            N, D, O, M = self._N, self.decimation, self.oversampling, self.bins
            B = self._batch
            frames = np.empty((B, N + 1, D), np.complex64)  # a row more for the roll (O = 1)
            if self._idx is None and O == 1:
                w = (frames, None, None)
            else:
                nk = M if self.keep is None else self.keep.size
                w = (frames, np.empty((B, N, nk), np.complex64), np.empty((B, self._chunk, O, D), np.complex64))
            self._local.arrays = w
        return w

    def process(self, block):
        """Feed the next block; returns ``(n_new, len(keep))`` complex64 bin outputs."""
        return self.process_by_bin(block).T

    def process_by_bin(self, block):
        """As :meth:`process`, laid out ``(len(keep), n_new)``: one contiguous row per bin."""
        x = _as_block(block)
        M, D, O = self.bins, self.decimation, self.oversampling
        total = self.n_in + x.size
        m_end = total // D
        n_new = m_end - self.n_out
        self.n_in = total
        hist = self._hist
        if n_new <= 0:
            self._hist = np.concatenate((hist, x))
            return np.zeros((M if self.keep is None else self.keep.size, 0), np.complex64)
        # the circular shift roll(u, s + 1), s = nD mod M, is applied after the FFT as
        # the phase exp(-2j pi k (s + 1) / M) on the kept bins only (shift theorem)
        first_c = self.n_out % O
        hs = hist.size
        if self.method == "fft":
            out = self._by_fft(hist, x, n_new, first_c)
        elif self.method == "compiled":
            out = self._by_kernel(hist, x, n_new, first_c)
        else:
            buf = np.concatenate((hist, x))
            u = self._branches(buf, n_new)  # a fresh array: the FFT may overwrite it
            y = scipy.fft.fft(u, axis=1, overwrite_x=True, workers=FFT_WORKERS)
            out = np.empty((M if self.keep is None else self.keep.size, n_new), np.complex64)
            out[:] = self._take_kept(y).T
            for c in range(O):  # outputs n with n % O == c: rows i = (c - n_out) mod O, step O
                out[:, (c - first_c) % O :: O] *= self._phase[c][:, None]
        # the samples from output n_new on: what is left of the history, then the block
        cut = n_new * D
        self._hist = x[cut - hs :].copy() if cut >= hs else np.concatenate((hist[cut:], x))
        self.n_out = m_end
        return out


_KERNEL = []
#: Why :func:`compiled_kernel` found no compiled loops.
_KERNEL_WHY = "it needs numba, the fast extra: python3 -m pip install '.[fast]'"


def _aligned(shape, dtype, *, fill=None):
    """An empty C-ordered array (``fill``'s values where given) starting on a 64-byte boundary.

    Vector loads that straddle two cache lines cost about twice as much: the compiled
    branch sums ran about 20 % faster on aligned arrays (whose rows of ``2 D`` floats stay
    aligned when ``D`` is a multiple of 8).
    """
    nbytes = int(np.prod(shape)) * np.dtype(dtype).itemsize
    raw = np.empty(nbytes + 64, np.uint8)
    start = -raw.ctypes.data % 64
    out = raw[start : start + nbytes].view(dtype).reshape(shape)
    if fill is not None:
        out[...] = fill
    return out


def compiled_kernel():
    """The compiled loops (the module :mod:`channelizer.engines.branch_kernel`), or None
    where numba is not installed or cannot set them up (:data:`_KERNEL_WHY` says which).
    Imported on first use only."""
    global _KERNEL_WHY
    if not _KERNEL:
        try:
            from . import branch_kernel
        except ImportError:
            branch_kernel = None
        except (RuntimeError, OSError) as exc:  # numba found no folder to cache its code in, ...
            branch_kernel = None
            _KERNEL_WHY = f"numba could not set up the compiled loops ({exc})"
        _KERNEL.append(branch_kernel)
    return _KERNEL[0]


def why_not_compiled():
    """Why the compiled loops are not available here, in words ('' where they are)."""
    return "" if compiled_kernel() is not None else _KERNEL_WHY


def _runs(keep):
    """``keep`` as arithmetic runs ``(position, first bin, count, step)``."""
    runs, i = [], 0
    while i < keep.size:
        step = int(keep[i + 1] - keep[i]) if i + 1 < keep.size and keep[i + 1] > keep[i] else 1
        j = i + 1
        while j < keep.size and keep[j] - keep[j - 1] == step:
            j += 1
        runs.append((i, int(keep[i]), j - i, step))
        i = j
    return runs


_POOL = []


def _pool():
    """The shared worker threads of the FFT path (made on first use)."""
    if not _POOL:
        from concurrent.futures import ThreadPoolExecutor

        _POOL.append(ThreadPoolExecutor(FFT_WORKERS, thread_name_prefix="bank"))
    return _POOL[0]


def _residue_spectra(hr, O, D, N):
    """``G[f, c, b]`` of :meth:`PolyphaseBank._by_fft` for frames of ``N`` rows, laid out ``(N, O, D)``.

    Built one residue at a time, so that the temporaries stay near the size of ``G``.
    """
    K, M = hr.shape
    L = K * O
    C = np.empty((O, N, D), np.complex64)  # C[a] = conj(FFT_N(c_{aD+b})), c_{aD+b}[mO + a] = hr[m, aD+b]
    for a in range(O):
        c = np.zeros((N, D))
        c[a:L:O] = hr[:, a * D : (a + 1) * D]
        C[a] = np.conj(np.fft.fft(c, axis=0))
    G = np.empty((N, O, D), np.complex64)
    for r in range(O):
        acc = np.zeros((N, D), complex)
        for a in range(O):
            acc += C[a] * np.exp(-2j * np.pi * r * a / O)
        acc *= np.exp(-2j * np.pi * r * np.arange(D) / M)
        G[:, r] = acc
    return G


class BankChannelizer:
    """A polyphase bank and each channel's fine stages: one input, every channel out.

    Parameters
    ----------
    prototype, bins, oversampling
        As :class:`PolyphaseBank`.
    channels : sequence of (bin, residual)
        Each channel's bin and residual offset in Hz from the bin centre.
    fine_stages : sequence of stages
        Planned stages run after the bin at ``fs * oversampling / bins`` (may be
        empty: the bin output is the channel).
    fs : float
        Capture sample rate in Hz.

    Notes
    -----
    Channel ``i``'s output equals ``build_chain(fine_stages, offset=residual_i,
    fs=fs_b)`` fed with its bin's output; with no fine stages, the bin output
    mixed by the residual (a plain mixer, skipped for a zero residual).
    """

    def __init__(self, prototype, bins, oversampling, *, channels, fine_stages, fs):
        channels = list(channels)
        if not channels:
            raise ChannelizerError("channels: a bank needs at least one channel")
        used = sorted({int(b) for b, _ in channels})
        if kept_bins(len(used), bins) == bins:  # most bins in use: no gather of the kept ones
            used = list(range(bins))
        self.bank = PolyphaseBank(prototype, bins, oversampling, keep=None if len(used) == bins else used)
        col = {b: i for i, b in enumerate(used)}
        self._cols = [col[int(b)] for b, _ in channels]
        fs_b = fs * oversampling / bins
        fine_stages = tuple(fine_stages)
        self._chains = []
        for _, residual in channels:
            if fine_stages:
                self._chains.append(build_chain(fine_stages, offset=residual, fs=fs_b))
            elif residual:
                from .streaming import Mixer

                self._chains.append(Mixer(residual, fs=fs_b))
            else:
                self._chains.append(None)
        self.n_channels = len(channels)

    def process(self, block):
        """Feed one block; returns one complex64 array per channel, in order."""
        y = self.bank.process_by_bin(block)
        cols = [_EMPTY] * y.shape[0] if y.shape[1] == 0 else list(y)
        return [cols[c] if ch is None else ch.process(cols[c]) for c, ch in zip(self._cols, self._chains)]
