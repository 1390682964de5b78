"""Streaming spectrogram: Welch-averaged rows over time, at most a given number of rows.
"""

from dataclasses import dataclass

import numpy as np

from ..errors import ChannelizerError
from .spectrum import _Segmenter, _as_block, _db, _finite, _make_window, _overlap_samples, _positive, _segment_length

__all__ = ["Spectrogram", "SpectrogramAccumulator"]


@dataclass(frozen=True)
class Spectrogram:
    """Averaged periodograms of consecutive shares of a capture.

    Attributes
    ----------
    times : ndarray
        Centre of each row's span of samples, in seconds from the first sample.
    freqs : ndarray
        Bin centres in Hz (fftshifted, offset by ``center_frequency``), as :class:`Psd`.
    power_db : ndarray
        Shape ``(rows, nperseg)``: PSD in dBFS/Hz, the same units as
        :meth:`Psd.dbfs_per_hz`; NaN for a row no segment reached yet.
    segments : ndarray
        Periodograms averaged in each row.
    fs, center_frequency : float
    nperseg, noverlap : int
    window : str or tuple
    """

    times: np.ndarray
    freqs: np.ndarray
    power_db: np.ndarray
    segments: np.ndarray
    fs: float
    center_frequency: float
    nperseg: int
    noverlap: int
    window: object

    @property
    def bin_hz(self):
        """Bin spacing ``fs / nperseg`` in Hz."""
        return self.fs / self.nperseg


class SpectrogramAccumulator:
    """Streaming spectrogram with a fixed number of time rows for a capture of known length.

    The ``K`` segments of the whole capture (as in :class:`WelchAccumulator`)
    are dealt out in order into ``min(rows, K)`` rows of as equal counts as can
    be (segment ``s`` goes to row ``floor(s rows / K)``); each row is the Welch
    average [1]_ of its segments.  The caller states the capture's length up
    front and feeds it in blocks of any size.

    Parameters
    ----------
    fs : float
        Complex sample rate in Hz.
    total_samples : int
        Length of the whole capture in samples (at least ``nperseg``).
    rows : int
        Most time rows wanted.
    resolution, nperseg, window, overlap, center_frequency
        As for :class:`WelchAccumulator`.

    References
    ----------
    .. [1] P. D. Welch, IEEE Trans. Audio Electroacoust. 15(2):70-73, 1967.
    """

    def __init__(
        self,
        *,
        fs,
        total_samples,
        rows=400,
        resolution=None,
        nperseg=None,
        window="hann",
        overlap=0.5,
        center_frequency=0.0,
    ):
        self.fs = _positive("fs", fs)
        self.center_frequency = _finite("center_frequency", center_frequency)
        self.nperseg = _segment_length(self.fs, resolution, nperseg)
        self.noverlap = _overlap_samples(overlap, self.nperseg)
        self.window = window
        if isinstance(rows, bool) or not isinstance(rows, (int, np.integer)) or rows < 1:
            raise ChannelizerError(f"rows must be a positive integer, got {rows!r}")
        if isinstance(total_samples, bool) or not isinstance(total_samples, (int, np.integer)):
            raise ChannelizerError(f"total_samples must be an integer, got {total_samples!r}")
        total_samples = int(total_samples)
        if total_samples < self.nperseg:
            raise ChannelizerError(
                f"total_samples {total_samples} is shorter than one segment of nperseg = {self.nperseg}"
            )
        self.total_samples = total_samples
        step = self.nperseg - self.noverlap
        self._win = _make_window(window, self.nperseg)
        self._seg = _Segmenter(self.nperseg, step, self._win)
        self._total_segments = (total_samples - self.nperseg) // step + 1
        self.rows = min(int(rows), self._total_segments)
        self._sum = np.zeros((self.rows, self.nperseg), dtype=np.float64)
        self._count = np.zeros(self.rows, dtype=np.int64)

    def _row_of(self, s):
        return (s * self.rows) // self._total_segments

    def update(self, block):
        """Add a block of samples that follows the previous one.

        Raises
        ------
        ChannelizerError
            When the blocks add up to more than ``total_samples``.
        """
        x = _as_block(block)
        if self._seg.samples + x.size > self.total_samples:
            raise ChannelizerError(
                f"spectrogram was told {self.total_samples} samples but got "
                f"{self._seg.samples + x.size}"
            )
        self._seg.feed(x, self._add)

    def _add(self, first, periodograms):
        s = np.arange(first, first + periodograms.shape[0], dtype=np.int64)
        r = self._row_of(s)
        starts = np.concatenate([[0], np.flatnonzero(np.diff(r)) + 1])
        stops = np.concatenate([starts[1:], [s.size]])
        # every row holds at least one segment, so the rows met here are r[0] ... r[-1]
        r0, r1 = int(r[0]), int(r[-1]) + 1
        if starts.size == s.size:
            self._sum[r0:r1] += periodograms
        else:
            for a, b in zip(starts.tolist(), stops.tolist()):
                self._sum[r[a]] += periodograms[a:b].sum(axis=0, dtype=np.float64)
        self._count[r0:r1] += stops - starts

    def result(self):
        """The spectrogram of what has been fed so far (rows not reached yet are NaN).

        Returns
        -------
        Spectrogram
        """
        step = self.nperseg - self.noverlap
        r = np.arange(self.rows, dtype=np.int64)
        k = self._total_segments
        first = (r * k + self.rows - 1) // self.rows
        last = ((r + 1) * k + self.rows - 1) // self.rows - 1
        times = ((first + last) * step + self.nperseg) / 2.0 / self.fs
        s2 = float(np.dot(self._win, self._win))
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = self._sum / (self._count[:, None] * self.fs * s2)
        mean[self._count == 0] = np.nan
        power_db = np.fft.fftshift(_db(mean), axes=1)
        freqs = self.center_frequency + np.fft.fftshift(np.fft.fftfreq(self.nperseg, 1.0 / self.fs))
        counts = self._count.copy()
        for a in (times, freqs, power_db, counts):
            a.setflags(write=False)
        return Spectrogram(
            times=times,
            freqs=freqs,
            power_db=power_db,
            segments=counts,
            fs=self.fs,
            center_frequency=self.center_frequency,
            nperseg=self.nperseg,
            noverlap=self.noverlap,
            window=self.window,
        )
