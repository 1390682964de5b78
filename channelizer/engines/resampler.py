"""Streaming rational resampler: up by L, filter, down by M, computing only the kept phases.

Same emission rule as the other runners (see :mod:`channelizer.engines.streaming`):
after N inputs, in any split, exactly ``floor(N L / M)`` outputs have come out.
"""

import math

import numpy as np

from .streaming import _EMPTY, _as_block, _check_factor, _check_taps, _read_only

__all__ = ["RationalResampler"]


class RationalResampler:
    """Up-sample by ``L`` (zeros), filter, down-sample by ``M``.

    ``y[m] = scipy.signal.upfirdn(taps, x, up, down)[m]``; after ``N`` inputs in
    any split exactly ``floor(N up / down)`` outputs have come out (``y[m]`` once
    ``(m + 1) down <= N up``; samples past the end of ``upfirdn``'s output are the
    zeros of the up-sampler).

    Parameters
    ----------
    taps : array_like
        Interpolation filter at ``up`` times the input rate, gain ``up``.
    up, down : int
        ``L`` and ``M``; they are not reduced, as the taps fix the inner rate.

    Attributes
    ----------
    delay : float
        ``(len(taps) - 1) / (2 up)`` input samples.

    Notes
    -----
    Runs ``scipy.signal.upfirdn`` (polyphase, compiled) on the history and the new
    block, the history starting at a multiple of ``down / gcd(up, down)`` inputs so
    that the output grid stays aligned; a resampler sits at the end of a chain, at
    its lowest rate, where this costs little.

    References
    ----------
    R. E. Crochiere and L. R. Rabiner, *Multirate Digital Signal Processing*,
    1983, ch. 3 (conversion by a rational factor; from memory).
    P. P. Vaidyanathan, *Multirate Systems and Filter Banks*, 1993, sec. 4.3
    (from memory).
    """

    def __init__(self, taps, up, down):
        h = _check_taps(taps)
        self.interpolation = _check_factor(up, "up")
        self.decimation = _check_factor(down, "down")
        self.taps = _read_only(h)
        self.delay = (h.size - 1) / 2.0 / self.interpolation
        self._h = h.astype(np.complex64 if np.iscomplexobj(h) else np.float32)
        g = math.gcd(self.interpolation, self.decimation)
        self._m_red = self.decimation // g
        self._buf = _EMPTY
        self._i_s = 0  # input index of _buf[0], a multiple of _m_red
        self._n_in = 0
        self._n_out = 0

    @property
    def input_count(self):
        return self._n_in

    @property
    def output_count(self):
        return self._n_out

    def process(self, block):
        """Resample the next block; returns complex64 outputs."""
        x = _as_block(block)
        L, M = self.interpolation, self.decimation
        self._n_in += x.size
        buf = np.concatenate((self._buf, x)) if self._buf.size else x
        m_end = (self._n_in * L) // M
        y = _EMPTY
        if m_end > self._n_out:
            m0 = self._i_s * L // M  # output index of upfirdn's first sample (exact)
            import scipy.signal  # here, not at import: a command that never resamples skips its start-up cost

            full = scipy.signal.upfirdn(self._h, buf, L, M).astype(np.complex64, copy=False)
            want = m_end - m0
            if full.size < want:  # trailing up-sampler zeros that upfirdn leaves out
                full = np.concatenate((full, np.zeros(want - full.size, np.complex64)))
            y = np.ascontiguousarray(full[self._n_out - m0 : want])
            self._n_out = m_end
        # oldest input any future output needs: i >= (n_out M - len(h) + 1) / L
        need = -(-(self._n_out * M - self._h.size + 1) // L)
        new_s = max(0, (need // self._m_red) * self._m_red)
        new_s = max(new_s, self._i_s)
        self._buf = buf[new_s - self._i_s :].copy()
        self._i_s = new_s
        return y
