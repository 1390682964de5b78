"""Spectrum survey of complex baseband: Welch PSD, spectrogram, noise floor, occupied signals.

Everything here is analysis of sample blocks handed in by the caller: no file
I/O and no plotting.  Captures of any length are fed block by block; each
accumulator keeps the samples after its last complete segment, so the segments
(and hence the results) are the same however the capture is split.  The work
per block is one batch of FFTs over its segments.

Level convention (common practice): a sample value of modulus 1 is full scale,
so a complex tone ``a exp(j w n)`` has power ``a**2`` and reads
``20 log10(a)`` dBFS; 0 dBFS is the power of a full-scale complex tone.  Power
spectral densities are linear power per Hz in these units (integrating the PSD
over frequency gives the mean of ``|x|**2``), with the density scaling of
``scipy.signal.welch(..., scaling='density', return_onesided=False)``.

References
----------
.. [1] P. D. Welch, "The use of fast Fourier transform for the estimation of
   power spectra: a method based on time averaging over short, modified
   periodograms", IEEE Trans. Audio Electroacoust. 15(2):70-73, 1967.
.. [2] F. J. Harris, "On the use of windows for harmonic analysis with the
   discrete Fourier transform", Proc. IEEE 66(1):51-83, 1978.
.. [3] ITU-R Recommendation SM.328, "Spectra and bandwidth of emissions"
   (occupied bandwidth: the band with 0.5 % of the mean power below its lower
   edge and 0.5 % above its upper edge).
"""

from dataclasses import dataclass
import math
import re

import numpy as np
import scipy.fft
import scipy.signal
import scipy.stats

from ..errors import ChannelizerError

__all__ = [
    "Psd",
    "WelchAccumulator",
    "Spectrogram",
    "SpectrogramAccumulator",
    "DetectedSignal",
    "tone_power_dbfs",
    "estimate_noise_floor",
    "detect_signals",
    "channel_list_from_signals",
]

#: Default segment length when neither ``resolution`` nor ``nperseg`` is given.
_DEFAULT_NPERSEG = 1024
#: Most samples (segments x nperseg) transformed in one batch, to bound memory.
_CHUNK_ELEMENTS = 1 << 21
#: Noise-only false-alarm probability of the clip level used by the noise-floor trimming.
_CLIP_FALSE_ALARM = 1e-3
#: Occupied bandwidth: fraction of power left out on each side (ITU-R SM.328).
_OBW_TAIL = 0.005


# --------------------------------------------------------------------------- helpers


def _db(power):
    """``10 log10(power)``; zero gives ``-inf`` without a warning."""
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(power)


def _positive(name, value):
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise ChannelizerError(f"{name} must be a positive number, got {value!r}")
    value = float(value)
    if not math.isfinite(value) or value <= 0:
        raise ChannelizerError(f"{name} must be a positive finite number, got {value!r}")
    return value


def _finite(name, value):
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise ChannelizerError(f"{name} must be a number, got {value!r}")
    value = float(value)
    if not math.isfinite(value):
        raise ChannelizerError(f"{name} must be finite, got {value!r}")
    return value


def _segment_length(fs, resolution, nperseg):
    """``nperseg`` from a bin spacing: the next power of two >= fs / resolution."""
    if resolution is not None and nperseg is not None:
        raise ChannelizerError(
            f"give either resolution ({resolution!r}) or nperseg ({nperseg!r}), not both"
        )
    if resolution is not None:
        resolution = _positive("resolution", resolution)
        if resolution > fs / 2:
            raise ChannelizerError(
                f"resolution {resolution:g} Hz is coarser than half the sample rate {fs:g} Hz"
            )
        target = fs / resolution
        n = 1
        while n < target * (1.0 - 1e-12):
            n *= 2
        return n
    if nperseg is None:
        return _DEFAULT_NPERSEG
    if isinstance(nperseg, bool) or not isinstance(nperseg, (int, np.integer)) or nperseg < 2:
        raise ChannelizerError(f"nperseg must be an integer of at least 2, got {nperseg!r}")
    return int(nperseg)


def _make_window(window, nperseg):
    try:
        w = scipy.signal.get_window(window, nperseg, fftbins=True)
    except (ValueError, TypeError) as exc:
        raise ChannelizerError(f"window {window!r} is not a window scipy.signal.get_window knows: {exc}") from None
    w = np.asarray(w, dtype=float)
    if not np.all(np.isfinite(w)) or np.sum(w) <= 0:
        raise ChannelizerError(f"window {window!r} of length {nperseg} has no positive sum")
    return w


def _overlap_samples(overlap, nperseg):
    if isinstance(overlap, bool) or not isinstance(overlap, (int, float, np.integer, np.floating)):
        raise ChannelizerError(f"overlap must be a fraction in [0, 1), got {overlap!r}")
    if not 0.0 <= float(overlap) < 1.0:
        raise ChannelizerError(f"overlap must be a fraction in [0, 1), got {overlap!r}")
    noverlap = int(round(float(overlap) * nperseg))
    if noverlap >= nperseg:
        raise ChannelizerError(
            f"overlap {overlap!r} leaves no new samples per segment of {nperseg}; use a smaller overlap"
        )
    return noverlap


def _as_block(block):
    x = np.asarray(block)
    if x.ndim != 1:
        raise ChannelizerError(f"sample block must be one-dimensional, got shape {x.shape}")
    if x.dtype.kind not in "iufc":
        raise ChannelizerError(f"sample block must be numeric (complex IQ), got dtype {x.dtype}")
    return x


def _welch_dof(window, step, segments):
    """Equivalent degrees of freedom of a Welch average of ``segments`` periodograms.

    Welch 1967 [1]_ (variance of the averaged estimate with overlapping segments):
    ``var / mean**2 = (1/K) [1 + 2 sum_{j=1}^{K-1} (1 - j/K) rho(j)]`` with
    ``rho(j) = (sum_n w[n] w[n + j S])**2 / (sum_n w[n]**2)**2`` for hop ``S``; a
    chi-square variable with ``nu`` degrees of freedom has ``var / mean**2 = 2 / nu``.
    A single periodogram bin of complex Gaussian noise is exponential (``nu = 2``).
    """
    n = window.size
    s2 = float(np.dot(window, window))
    total = 0.0
    j = 1
    while j < segments and j * step < n:
        c = float(np.dot(window[: n - j * step], window[j * step :]))
        total += (1.0 - j / segments) * (c / s2) ** 2
        j += 1
    ratio = (1.0 + 2.0 * total) / segments
    return 2.0 / ratio


class _Segmenter:
    """Cuts a stream into windowed segments and hands their raw periodograms on.

    The samples after the last complete segment are kept between blocks, so the
    segments are those of the whole stream: segment ``s`` starts at sample ``s * step``.
    """

    def __init__(self, nperseg, step, window):
        self.nperseg = nperseg
        self.step = step
        self.window = window
        self.segments = 0
        self.samples = 0
        self._tail = np.zeros(0, dtype=np.complex64)

    def feed(self, block, consume):
        """Call ``consume(first_segment_index, periodograms)`` for each batch of new segments.

        ``periodograms`` has shape ``(n, nperseg)``: ``|FFT(window * segment)|**2`` in
        FFT order, in the block's precision (complex64 blocks stay single precision).
        """
        x = _as_block(block)
        self.samples += x.size
        buf = np.concatenate([self._tail, x]) if self._tail.size else x
        n = self.nperseg
        count = (buf.size - n) // self.step + 1 if buf.size >= n else 0
        if count > 0:
            work = np.result_type(buf.dtype, np.complex64)
            win = self.window.astype(np.finfo(work).dtype)
            view = np.lib.stride_tricks.sliding_window_view(buf, n)[:: self.step]
            batch = max(1, _CHUNK_ELEMENTS // n)
            for i in range(0, count, batch):
                seg = view[i : min(i + batch, count)] * win
                spec = scipy.fft.fft(seg, axis=1, overwrite_x=True)
                consume(self.segments + i, spec.real**2 + spec.imag**2)
            self.segments += count
        # copy: never hold on to (a view of) the caller's block
        self._tail = np.array(buf[count * self.step :], copy=True)


# --------------------------------------------------------------------------- Welch PSD


@dataclass(frozen=True)
class Psd:
    """A two-sided power spectral density estimate on an fftshifted axis.

    Attributes
    ----------
    freqs : ndarray
        Bin centres in Hz, ascending: ``center_frequency`` plus the baseband
        offset ``k fs / nperseg``, ``k = -nperseg/2 ... nperseg/2 - 1``.
    psd : ndarray
        Linear power per Hz, full-scale units (see the module notes): a
        complex tone of amplitude ``a`` integrates to ``a**2``.
    fs : float
        Sample rate in Hz.
    center_frequency : float
        Frequency of baseband 0 Hz, in Hz.
    nperseg : int
        Segment (FFT) length.
    noverlap : int
        Samples shared by consecutive segments.
    window : str or tuple
        The window, as passed to ``scipy.signal.get_window``.
    enbw_hz : float
        Equivalent noise bandwidth of the window in Hz,
        ``fs sum(w**2) / sum(w)**2`` (Harris 1978 [2]_; 1.5 bins for Hann).
    segments : int
        Number of periodograms averaged.
    dof : float
        Equivalent chi-square degrees of freedom of each bin (Welch 1967 [1]_);
        ``2 * segments`` without overlap.
    """

    freqs: np.ndarray
    psd: np.ndarray
    fs: float
    center_frequency: float
    nperseg: int
    noverlap: int
    window: object
    enbw_hz: float
    segments: int
    dof: float

    @property
    def bin_hz(self):
        """Bin spacing ``fs / nperseg`` in Hz."""
        return self.fs / self.nperseg

    @property
    def enbw_bins(self):
        """Equivalent noise bandwidth of the window in bins."""
        return self.enbw_hz / self.bin_hz

    def dbfs_per_hz(self):
        """PSD in dBFS/Hz: ``10 log10(psd)``."""
        return _db(self.psd)

    def dbfs_per_bin(self):
        """Power falling in each bin in dBFS: ``10 log10(psd * bin_hz)``.

        The bins of a spread (noise-like) signal sum to its power.  A tone reads
        ``10 log10(enbw_bins)`` dB (1.76 dB for Hann) below its power at its peak
        bin when on a bin centre, less between bins (scalloping, Harris 1978 [2]_);
        use :func:`tone_power_dbfs` for tones.
        """
        return _db(self.psd * self.bin_hz)


class WelchAccumulator:
    """Streaming Welch estimate of the power spectral density of complex baseband.

    Feed the capture in blocks of any size with :meth:`update`; :meth:`result`
    gives the average of the modified periodograms of all complete segments so
    far (Welch 1967 [1]_), equal to
    ``scipy.signal.welch(x, fs, window, nperseg, noverlap, detrend=False,
    return_onesided=False, scaling='density')`` on the whole capture, with the
    axis fftshifted and offset by ``center_frequency``.

    Parameters
    ----------
    fs : float
        Complex sample rate in Hz.
    resolution : float, optional
        Wanted bin spacing in Hz: ``nperseg`` is the next power of two at or
        above ``fs / resolution``, so the spacing ``fs / nperseg`` is at most
        ``resolution``.  Not with ``nperseg``.
    nperseg : int, optional
        Segment length given directly.  Without either, 1024.
    window : str or tuple
        Any window ``scipy.signal.get_window`` knows (periodic form).
    overlap : float
        Fraction of a segment shared with the next, in [0, 1);
        ``noverlap = round(overlap * nperseg)``.
    center_frequency : float
        Frequency in Hz that baseband 0 Hz stands for; added to ``freqs``.

    Notes
    -----
    Cost: one length-``nperseg`` FFT per ``nperseg - noverlap`` input samples;
    memory: the window, one spectrum sum and fewer than ``nperseg`` held samples,
    plus a batch of at most about two million samples while a block is processed.
    Real blocks are taken as complex with zero imaginary part.

    References
    ----------
    .. [1] P. D. Welch, IEEE Trans. Audio Electroacoust. 15(2):70-73, 1967.
    .. [2] F. J. Harris, Proc. IEEE 66(1):51-83, 1978.

    Examples
    --------
    >>> acc = WelchAccumulator(fs=2.0e6, resolution=1.0e3, center_frequency=433.9e6)
    >>> acc.nperseg
    2048
    """

    def __init__(self, *, fs, resolution=None, nperseg=None, window="hann", overlap=0.5, center_frequency=0.0):
        self.fs = _positive("fs", fs)
        self.center_frequency = _finite("center_frequency", center_frequency)
        self.nperseg = _segment_length(self.fs, resolution, nperseg)
        self.noverlap = _overlap_samples(overlap, self.nperseg)
        self.window = window
        self._win = _make_window(window, self.nperseg)
        self._seg = _Segmenter(self.nperseg, self.nperseg - self.noverlap, self._win)
        self._sum = np.zeros(self.nperseg, dtype=np.float64)

    @property
    def segments(self):
        """Complete segments seen so far."""
        return self._seg.segments

    @property
    def samples(self):
        """Samples fed so far."""
        return self._seg.samples

    def update(self, block):
        """Add a block of samples (1-D, complex or real) that follows the previous one."""
        self._seg.feed(block, self._add)

    def _add(self, first, periodograms):
        self._sum += periodograms.sum(axis=0, dtype=np.float64)

    def result(self):
        """The PSD estimate from the segments seen so far.

        Returns
        -------
        Psd

        Raises
        ------
        ChannelizerError
            When fewer than ``nperseg`` samples have been fed.
        """
        k = self._seg.segments
        if k == 0:
            raise ChannelizerError(
                f"spectrum needs at least nperseg = {self.nperseg} samples, got {self._seg.samples}"
            )
        w = self._win
        s2 = float(np.dot(w, w))
        psd = np.fft.fftshift(self._sum / (k * self.fs * s2))
        freqs = self.center_frequency + np.fft.fftshift(np.fft.fftfreq(self.nperseg, 1.0 / self.fs))
        psd.setflags(write=False)
        freqs.setflags(write=False)
        return Psd(
            freqs=freqs,
            psd=psd,
            fs=self.fs,
            center_frequency=self.center_frequency,
            nperseg=self.nperseg,
            noverlap=self.noverlap,
            window=self.window,
            enbw_hz=self.fs * s2 / float(np.sum(w)) ** 2,
            segments=k,
            dof=_welch_dof(w, self.nperseg - self.noverlap, k),
        )


def tone_power_dbfs(psd, frequency, *, span_bins=None, noise_floor=None):
    """Power of a tone in dBFS, summed over the bins around it.

    Integrating the PSD over the bins the window spreads the tone into gives
    its power whatever its position between bins (Parseval; no scalloping loss).

    Parameters
    ----------
    psd : Psd
    frequency : float
        Tone frequency in Hz (on the ``psd.freqs`` axis, i.e. absolute).
    span_bins : int, optional
        Half-width of the summed span in bins around the nearest bin; default
        ``ceil(3 * enbw_bins)`` (5 for Hann), enough for the main lobe and the
        strongest side lobes of the usual windows (Harris 1978, table 1).
    noise_floor : float, optional
        Noise PSD (linear, per Hz) to subtract from each summed bin.

    Returns
    -------
    float
        ``10 log10`` of the summed power; ``20 log10(a)`` for a tone of amplitude ``a``.
    """
    frequency = _finite("frequency", frequency)
    lo, hi = psd.freqs[0] - psd.bin_hz / 2, psd.freqs[-1] + psd.bin_hz / 2
    if not lo <= frequency < hi:
        raise ChannelizerError(f"tone frequency {frequency:g} Hz is outside the spectrum [{lo:g}, {hi:g}) Hz")
    if span_bins is None:
        span_bins = int(math.ceil(3.0 * psd.enbw_bins))
    elif isinstance(span_bins, bool) or not isinstance(span_bins, (int, np.integer)) or span_bins < 0:
        raise ChannelizerError(f"span_bins must be a non-negative integer, got {span_bins!r}")
    k = int(np.argmin(np.abs(psd.freqs - frequency)))
    part = psd.psd[max(0, k - span_bins) : k + span_bins + 1]
    if noise_floor is not None:
        part = part - _finite("noise_floor", noise_floor)
    return float(_db(np.sum(part) * psd.bin_hz))


# --------------------------------------------------------------------------- spectrogram


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


# --------------------------------------------------------------------------- noise floor


def _median_to_mean(dof, quantile=0.5):
    """``q``-quantile over mean of a chi-square variable with ``dof`` degrees of freedom."""
    return float(scipy.stats.chi2.ppf(quantile, dof)) / dof


def _dilate(mask, half):
    if half <= 0 or not mask.any():
        return mask
    return np.convolve(mask.astype(np.int64), np.ones(2 * half + 1, dtype=np.int64), mode="same") > 0


def estimate_noise_floor(psd):
    """Noise PSD (linear, per Hz) under the signals of a Welch estimate.

    Parameters
    ----------
    psd : Psd

    Returns
    -------
    float
        Noise power per Hz in full-scale units.

    Notes
    -----
    Each bin of a Welch average of Gaussian noise of density ``N0`` is close to
    ``N0 chi2(nu) / nu`` with ``nu = psd.dof`` equivalent degrees of freedom
    (Welch 1967 [1]_; ``nu = 2K`` for ``K`` segments without overlap), whose
    median is ``N0 m(nu)``, ``m(nu) = chi2.ppf(0.5, nu) / nu`` (``ln 2`` for
    ``nu = 2``, tending to 1).  The estimate starts from the median over all
    bins divided by ``m(nu)``, a median-based noise estimator robust to
    signals in a minority of the bins, then trims them: bins above the level
    noise alone exceeds with probability 1e-3, and their neighbours within
    ``2 * enbw`` bins (window leakage), are left out, and the floor becomes the
    median of the bins kept divided by the median-to-mean ratio of the chi-square
    law truncated at that level, ``chi2.ppf(0.5 (1 - 1e-3), nu) / nu``; this is
    repeated until the set of kept bins settles.  The noise floor is assumed
    flat across the band.

    References
    ----------
    .. [1] P. D. Welch, IEEE Trans. Audio Electroacoust. 15(2):70-73, 1967.
    """
    p = np.asarray(psd.psd, dtype=float)
    if p.size == 0:
        raise ChannelizerError("noise floor of an empty spectrum")
    nu = float(psd.dof)
    floor = float(np.median(p)) / _median_to_mean(nu)
    if floor <= 0:
        return 0.0
    clip = float(scipy.stats.chi2.isf(_CLIP_FALSE_ALARM, nu)) / nu
    kept_ratio = _median_to_mean(nu, 0.5 * (1.0 - _CLIP_FALSE_ALARM))
    guard = int(math.ceil(2.0 * psd.enbw_bins))
    keep = None
    for _ in range(50):
        new_keep = ~_dilate(p > floor * clip, guard)
        if not new_keep.any():
            break
        if keep is not None and np.array_equal(new_keep, keep):
            break
        keep = new_keep
        floor = float(np.median(p[keep])) / kept_ratio
    return floor


# --------------------------------------------------------------------------- detection


@dataclass(frozen=True)
class DetectedSignal:
    """One occupied band found in a spectrum.

    Attributes
    ----------
    center_hz : float
        Centre of the occupied band, ``(lower_hz + upper_hz) / 2``.
    occupied_bandwidth_hz : float
        99 % power bandwidth (ITU-R SM.328): ``upper_hz - lower_hz``.
    lower_hz, upper_hz : float
        Frequencies with 0.5 % of the signal's power below and above them.
    power_dbfs : float
        Noise-subtracted power integrated over the detected region and its guard.
    snr_db : float
        That power over the noise power in the occupied bandwidth,
        ``power / (noise_floor * occupied_bandwidth_hz)``.
    peak_hz : float
        Centre of the strongest bin.
    """

    center_hz: float
    occupied_bandwidth_hz: float
    lower_hz: float
    upper_hz: float
    power_dbfs: float
    snr_db: float
    peak_hz: float


def _runs(mask):
    """Start and end (inclusive) indices of the runs of True in ``mask``."""
    d = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    return np.flatnonzero(d == 1), np.flatnonzero(d == -1) - 1


def _crossing(cum, edges, target):
    """First frequency where the piecewise-linear ``cum`` (at ``edges``) reaches ``target``."""
    i = int(np.argmax(cum >= target))
    if i == 0:
        return float(edges[0])
    c0, c1 = cum[i - 1], cum[i]
    return float(edges[i - 1] + (edges[i] - edges[i - 1]) * (target - c0) / (c1 - c0))


def detect_signals(psd, *, threshold_db=10.0, min_bandwidth_hz=None, noise_floor=None):
    """Find the occupied bands of a spectrum and measure each.

    Parameters
    ----------
    psd : Psd
    threshold_db : float
        A bin is occupied when it is this far above the noise floor.
    min_bandwidth_hz : float, optional
        Leave out signals whose occupied bandwidth is narrower.
    noise_floor : float, optional
        Noise PSD (linear, per Hz); by default :func:`estimate_noise_floor`.

    Returns
    -------
    list of DetectedSignal
        In order of frequency.

    Notes
    -----
    Runs of occupied bins separated by fewer than ``g = max(3, ceil(2 enbw_bins))``
    free bins are merged (a window's main lobe is about ``2 enbw`` bins wide,
    Harris 1978 [2]_); each region is then widened by ``g`` bins on both sides,
    never past the midpoint to a neighbouring region, to take in the skirts
    below the threshold.  On the noise-subtracted PSD over the widened region,
    read as constant across each bin, the occupied band runs from the frequency
    with 0.5 % of the power below to the one with 0.5 % above (ITU-R SM.328
    [3]_); a flat band of width ``B`` has 99 % bandwidth ``0.99 B``.  Widths are
    limited by the resolution: a pure tone reads about the window's own 99 %
    width (about 2-3 bins for Hann).

    References
    ----------
    .. [1] P. D. Welch, IEEE Trans. Audio Electroacoust. 15(2):70-73, 1967.
    .. [2] F. J. Harris, Proc. IEEE 66(1):51-83, 1978.
    .. [3] ITU-R Recommendation SM.328, Spectra and bandwidth of emissions.
    """
    threshold_db = _finite("threshold_db", threshold_db)
    if min_bandwidth_hz is not None:
        min_bandwidth_hz = _finite("min_bandwidth_hz", min_bandwidth_hz)
    floor = estimate_noise_floor(psd) if noise_floor is None else _finite("noise_floor", noise_floor)
    if floor < 0:
        raise ChannelizerError(f"noise_floor must be a non-negative PSD, got {noise_floor!r}")
    p = np.asarray(psd.psd, dtype=float)
    f = np.asarray(psd.freqs, dtype=float)
    df = psd.bin_hz
    gap = max(3, int(math.ceil(2.0 * psd.enbw_bins)))

    starts, ends = _runs(p > floor * 10.0 ** (threshold_db / 10.0))
    if starts.size == 0:
        return []
    # merge runs separated by fewer than `gap` free bins
    split = (starts[1:] - ends[:-1] - 1) >= gap
    starts = starts[np.concatenate([[True], split])]
    ends = ends[np.concatenate([split, [True]])]

    # widen by the guard, not past the midpoint to the neighbours
    lo = np.maximum(starts - gap, 0)
    hi = np.minimum(ends + gap, p.size - 1)
    mid = (ends[:-1] + starts[1:]) // 2
    lo[1:] = np.maximum(lo[1:], mid + 1)
    hi[:-1] = np.minimum(hi[:-1], mid)

    found = []
    for a, b, s0, s1 in zip(lo, hi, starts, ends):
        part = (p[a : b + 1] - floor) * df
        cum = np.concatenate([[0.0], np.cumsum(part)])
        total = cum[-1]
        if total <= 0:
            continue
        edges = f[a] - df / 2 + df * np.arange(part.size + 1)
        lower = _crossing(cum, edges, _OBW_TAIL * total)
        # upper edge: the same crossing read from the top end
        rcum = np.concatenate([[0.0], np.cumsum(part[::-1])])
        upper = -_crossing(rcum, -edges[::-1], _OBW_TAIL * total)
        obw = upper - lower
        if min_bandwidth_hz is not None and obw < min_bandwidth_hz:
            continue
        peak = s0 + int(np.argmax(p[s0 : s1 + 1]))
        snr = total / (floor * obw) if floor > 0 else math.inf
        found.append(
            DetectedSignal(
                center_hz=0.5 * (lower + upper),
                occupied_bandwidth_hz=obw,
                lower_hz=lower,
                upper_hz=upper,
                power_dbfs=float(_db(total)),
                snr_db=float(_db(snr)),
                peak_hz=float(f[peak]),
            )
        )
    return found


# --------------------------------------------------------------------------- channel list

_PREFIX = re.compile(r"^[A-Za-z][A-Za-z0-9_-]*$")


def channel_list_from_signals(signals, *, prefix="sig"):
    """Channel entries for detected signals, named ``sig01``, ``sig02``, ...

    Parameters
    ----------
    signals : sequence of DetectedSignal
    prefix : str
        Start of each name: a letter, then letters, digits, ``_`` or ``-``.

    Returns
    -------
    list of dict
        ``{'name': str, 'frequency': float, 'bandwidth': float}`` per signal, in
        the given order: the centre (absolute Hz, as on the spectrum's axis) and
        the 99 % occupied bandwidth in Hz.  Numbers have at least two digits,
        more when there are 100 signals or more.
    """
    if not isinstance(prefix, str) or not _PREFIX.match(prefix):
        raise ChannelizerError(
            f"channel name prefix must be a letter followed by letters, digits, '_' or '-', got {prefix!r}"
        )
    signals = list(signals)
    width = max(2, len(str(len(signals))))
    out = []
    for i, s in enumerate(signals, start=1):
        if not isinstance(s, DetectedSignal):
            raise ChannelizerError(f"signal {i} is not a DetectedSignal, got {type(s).__name__}")
        out.append(
            {
                "name": f"{prefix}{i:0{width}d}",
                "frequency": float(s.center_hz),
                "bandwidth": float(s.occupied_bandwidth_hz),
            }
        )
    return out
