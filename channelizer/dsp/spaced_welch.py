"""A Welch estimate from a fixed budget of segments spread evenly over a long stream.

The alias audit needs the input spectrum at the resolution of its segment length
and a few hundred averaged periodograms (the spread of a Welch bin falls as
``1 / sqrt(segments)``: 512 segments hold it near 0.2 dB), not a transform of
every sample: an hour of 61.44 Msps would cost more FFT work than the chain.  So
the segments start on a grid of absolute sample indices fixed by the stream's
length alone, ``s_j = j * hop`` with ``hop = max(nperseg * (1 - overlap), total
// budget)``; short streams keep the ordinary overlapped Welch average, long
ones take one segment in ``hop / nperseg``.

The grid depends only on the length, so any part of the stream can be fed on its
own, with its absolute start, and the sums of the parts added
(:meth:`SpacedWelch.merge`): a distributed run gets the same segments as one
pass.

References
----------
.. [1] P. D. Welch, "The use of fast Fourier transform for the estimation of
   power spectra: a method based on time averaging over short, modified
   periodograms", IEEE Trans. Audio Electroacoust. 15(2):70-73, 1967.
"""

import numpy as np

from ..errors import ChannelizerError
from .spectrum import _finite, _make_window, _positive, _psd_from_sum

__all__ = ["SpacedWelch", "DEFAULT_SEGMENTS"]

#: Segments averaged at most (Welch bin spread about 10 log10(1 + 1/sqrt(512)) = 0.19 dB).
DEFAULT_SEGMENTS = 512
#: Segments transformed in one batch.
_BATCH = 64


class SpacedWelch:
    """Welch PSD of a stream of ``total`` samples from at most ``segments`` periodograms.

    Parameters
    ----------
    fs : float
        Complex sample rate in Hz.
    nperseg : int
        Segment (FFT) length.
    total : int
        Length of the whole stream (fixes the segment grid).
    segments : int, optional
        Most segments averaged.
    overlap : float, optional
        Overlap of consecutive segments when the stream is short enough for the
        budget to allow it (the ordinary Welch average); 0.5 by default.
    center_frequency : float, optional
        Frequency in Hz that baseband 0 Hz stands for.

    Notes
    -----
    With ``hop >= nperseg * (1 - overlap)`` the result equals
    ``scipy.signal.welch(x, fs, 'hann', nperseg, nperseg - hop, detrend=False,
    return_onesided=False, scaling='density')`` restricted to the grid's
    segments; when the segments do not overlap each bin has ``2 K`` degrees of
    freedom for ``K`` segments (Welch 1967 [1]_).
    """

    def __init__(self, *, fs, nperseg, total, segments=DEFAULT_SEGMENTS, overlap=0.5, center_frequency=0.0):
        self.fs = _positive("fs", fs)
        self.center_frequency = _finite("center_frequency", center_frequency)
        if int(nperseg) < 2 or int(segments) < 1 or int(total) < 0:
            raise ChannelizerError(f"nperseg {nperseg!r}, segments {segments!r}, total {total!r}: need >= 2, >= 1, >= 0")
        self.nperseg, self.total, self.budget, self.overlap = int(nperseg), int(total), int(segments), overlap
        self.hop = max(int(round(self.nperseg * (1.0 - overlap))), 1, self.total // int(segments))
        self.count = 0 if self.total < self.nperseg else (self.total - self.nperseg) // self.hop + 1
        self.window = "hann"
        self._win = _make_window("hann", self.nperseg)
        self._sum = np.zeros(self.nperseg, dtype=np.float64)
        self.segments = 0
        self._pos = 0  # absolute index of the next sample fed by update()
        self._carry = np.zeros(0, dtype=np.complex64)  # samples from the start of a pending segment

    def fresh(self):
        """An empty accumulator on the same grid (for a part of the stream)."""
        return SpacedWelch(fs=self.fs, nperseg=self.nperseg, total=self.total, segments=self.budget,
                           overlap=self.overlap, center_frequency=self.center_frequency)

    def starts(self, first, stop):
        """Absolute starts of the grid's segments that begin in ``[first, stop)``."""
        j0 = -(-first // self.hop)
        j1 = min(self.count, -(-stop // self.hop))
        return range(j0 * self.hop, max(j0, j1) * self.hop, self.hop)

    def add_segments(self, segs):
        """Add periodograms of complete segments, shape ``(k, nperseg)``, in any order."""
        segs = np.asarray(segs)
        for i in range(0, segs.shape[0], _BATCH):
            spec = np.fft.fft(segs[i : i + _BATCH] * self._win.astype(np.float32), axis=1)
            self._sum += (spec.real**2 + spec.imag**2).sum(axis=0, dtype=np.float64)
        self.segments += segs.shape[0]

    def update(self, block):
        """Feed the next contiguous block of the stream (starting where the last ended)."""
        x = np.asarray(block)
        n = self.nperseg
        first, end = self._pos, self._pos + x.size
        self._pos = end
        c0 = first - self._carry.size  # absolute index of the held samples' start
        old = list(self.starts(c0, first)) if self._carry.size else []
        new = list(self.starts(first, end))
        ready_old = [s for s in old if s + n <= end]
        if ready_old:  # segments begun in the last block: held samples and this block's head only
            head = np.concatenate((self._carry, x[:n]))
            self.add_segments(head[np.asarray(ready_old)[:, None] - c0 + np.arange(n)])
        inside = [s - first for s in new if s + n <= end]
        if inside:
            self.add_segments(x[np.asarray(inside)[:, None] + np.arange(n)])
        pending = [s for s in old + new if s + n > end]
        if not pending:
            self._carry = self._carry[:0]
        elif pending[0] >= first:
            self._carry = np.array(x[pending[0] - first :], dtype=np.complex64)
        else:  # still short of a whole segment: this block was shorter than one
            self._carry = np.concatenate((self._carry[pending[0] - c0 :], x)).astype(np.complex64)

    def needs(self, n):
        """Whether the next ``n`` samples hold any part of a segment (else :meth:`skip` them)."""
        return bool(self._carry.size) or len(self.starts(self._pos, self._pos + n)) > 0

    def skip(self, n):
        """Pass over ``n`` samples that :meth:`needs` said hold no segment."""
        self._pos += int(n)

    def state(self):
        """``(sum of periodograms, segments)``: what :meth:`merge` adds."""
        return self._sum.copy(), self.segments

    def merge(self, state):
        """Add the state of another accumulator of the same grid (a part of the stream)."""
        total, k = state
        self._sum += total
        self.segments += int(k)

    def result(self):
        """The PSD (:class:`~channelizer.dsp.spectrum.Psd`) of the segments seen."""
        return _psd_from_sum(self, self._sum, self.segments, self.hop, self.total)
