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
(``v_p = u[M-1-p]``), ``y[n] = FFT_M(roll(u, s + 1))``.  Cost per input sample:
``K O`` real-by-complex multiplies plus one ``M``-point FFT per ``D`` inputs.

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

import numpy as np
import scipy.fft

from ..errors import ChannelizerError
from .float_chain import build_chain
from .streaming import _EMPTY, _as_block, _check_factor, _check_taps

__all__ = ["PolyphaseBank", "BankChannelizer"]


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

    Examples
    --------
    >>> import numpy as np
    >>> bank = PolyphaseBank(np.ones(32) / 32, 8, 2)
    >>> bank.process(np.ones(20, np.complex64)).shape
    (5, 8)
    """

    interpolation = 1

    def __init__(self, prototype, bins, oversampling, *, keep=None):
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
        # hr[m, r] = h[KM-1-mM-r], laid out as float32 pairs to multiply I and Q alike
        hr = h[::-1].reshape(self.K, M).astype(np.float32)
        # branch filters as one batched matrix product when few taps are structural
        # zeros (O <= 2); otherwise K element-wise passes (see _branches)
        self._blas = O <= 2
        if self._blas:
            self._G, self._B, self._Q = _branch_matrices(hr, O, self.decimation)
        else:
            self._h2 = np.repeat(hr, 2, axis=1)
            self._rows = max(16, 32768 // M)  # rows per pass: the pass stays in cache
        self._hist = np.zeros(h.size - 1, dtype=np.complex64)
        self.n_in = 0
        self.n_out = 0

    def _branches(self, buf, n_new):
        """``u[n, t] = sum_m hr[m, t] buf[nD + mM + t]`` for ``n < n_new`` (at least).

        Returned as a float32 view ``(R, J, O, D, 2)``: ``n = r J + j``, ``t = a D + b``,
        real and imaginary parts last.
        """
        if self._blas:
            return self._branches_product(buf, n_new)
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
        return out.reshape(n_new, 1, self.oversampling, D, 2)

    def _branches_product(self, buf, n_new):
        """:meth:`_branches` as one batched product over the ``D`` input phases.

        With ``t = aD + b`` and ``S_b[i] = buf[iD + b]``,
        ``u[n, aD + b] = sum_l g_ab[l] S_b[n + l]``, ``l = a + mO < KO``,
        ``g_ab[a + mO] = hr[m, aD + b]``; rows of ``B`` samples of every ``S_b``
        (I and Q as separate rows) times ``G_b`` give ``Q`` partial sums per output.
        """
        D, O, K = self.decimation, self.oversampling, self.K
        B, Q = self._B, self._Q
        rows = -(-n_new // B)
        need = (rows + Q - 1) * B
        L = min(n_new + K * O - 1, buf.size // D)
        S = np.zeros((D, 2, need), np.float32)
        seq = buf[: L * D].view(np.float32).reshape(L, D, 2)
        S[:, :, :L] = seq.transpose(1, 2, 0)
        Z = np.matmul(S.reshape(D, 2 * need // B, B), self._G)  # (D, 2 need/B, Q O B)
        Z = Z.reshape(D, 2, need // B, Q, O, B)
        y = Z[:, :, :rows, 0].copy()
        for q in range(1, Q):
            y += Z[:, :, q : q + rows, q]
        # (D, 2, rows, O, B) seen as u[n = tB + j, aD + b]
        return y.transpose(2, 4, 3, 0, 1)

    def process(self, block):
        """Feed the next block; returns ``(n_new, len(keep))`` complex64 bin outputs."""
        x = _as_block(block)
        M, D, O = self.bins, self.decimation, self.oversampling
        total = self.n_in + x.size
        m_end = total // D
        n_new = m_end - self.n_out
        buf = np.concatenate((self._hist, x))
        self.n_in = total
        if n_new <= 0:
            self._hist = buf
            return np.zeros((0, M if self.keep is None else self.keep.size), np.complex64)
        u = self._branches(buf, n_new)
        R, J = u.shape[:2]
        z = np.empty((R, J, M, 2), np.float32)
        for c in range(O):
            # z[n] = roll(u[n], s + 1), s = nD mod M = (n mod O) D: rows (J == 1) or
            # columns j (J a multiple of O) of the outputs n with n % O == c
            first = (c - self.n_out) % O
            pick = (slice(first, None, O), slice(None)) if J == 1 else (slice(None), slice(first, None, O))
            shift = (c * D + 1) % M
            for a in range(O):
                d0 = (a * D + shift) % M  # where u's block a begins in z; it may wrap
                cut = min(D, M - d0)
                z[pick + (slice(d0, d0 + cut),)] = u[pick + (a, slice(0, cut))]
                if cut < D:
                    z[pick + (slice(0, D - cut),)] = u[pick + (a, slice(cut, D))]
        z = z.reshape(R * J, M * 2).view(np.complex64)[:n_new]
        y = scipy.fft.fft(z, axis=1, overwrite_x=True)
        self._hist = buf[n_new * D :].copy()
        self.n_out = m_end
        if self.keep is None:
            return y
        out = np.empty((n_new, self.keep.size), np.complex64)
        for d0, first, count, step in self._runs:  # strided copies: far quicker than a gather
            out[:, d0 : d0 + count] = y[:, first : first + (count - 1) * step + 1 : step]
        return out


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


def _branch_matrices(hr, O, D):
    """``G[b, i, q, a, j] = g_ab[qB + i - j]`` (zero outside ``0 .. KO-1``), and ``B``, ``Q``."""
    K = hr.shape[0]
    KO = K * O
    B = max(16, -(-KO // 8) * 8)
    Q = -(-(KO - 1 + B) // B)
    g = np.zeros((D, O, KO), np.float32)  # g[b, a, l]
    for a in range(O):
        g[:, a, a::O] = hr[:, a * D : (a + 1) * D].T
    i = np.arange(B)[:, None, None]
    q = np.arange(Q)[None, :, None]
    j = np.arange(B)[None, None, :]
    lag = q * B + i - j  # (B, Q, B)
    valid = (lag >= 0) & (lag < KO)
    G = np.zeros((D, B, Q, O, B), np.float32)
    for a in range(O):
        G[:, :, :, a, :] = np.where(valid[None], g[:, a, np.clip(lag, 0, KO - 1)], 0)
    return np.ascontiguousarray(G.reshape(D, B, Q * O * B)), B, Q


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
        if 2 * len(used) >= bins:  # most bins in use: no gather of the kept ones
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
        y = self.bank.process(block)
        if y.shape[0] == 0:
            cols = [_EMPTY] * y.shape[1]
        else:
            cols = list(np.ascontiguousarray(y.T))
        return [cols[c] if ch is None else ch.process(cols[c]) for c, ch in zip(self._cols, self._chains)]
