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

import numpy as np

from ..errors import ChannelizerError
from ..units import format_hz

__all__ = [
    "Psd",
    "WelchAccumulator",
    "tone_power_dbfs",
    "power_db",
]

#: Default segment length when neither ``resolution`` nor ``nperseg`` is given.
_DEFAULT_NPERSEG = 1024
#: Longest segment (bins of one spectrum), bounding the memory a resolution may ask for.
MAX_NPERSEG = 1 << 20
#: Most samples (segments x nperseg) transformed in one batch, to bound memory.
_CHUNK_ELEMENTS = 1 << 21


# --------------------------------------------------------------------------- helpers


def _db(power):
    """``10 log10(power)``; zero gives ``-inf`` without a warning."""
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(power)


def power_db(power):
    """``10 log10(power)`` of one power; a silent input (zero) gives ``-inf``, not an error."""
    return float(_db(float(power)))


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
                f"resolution {format_hz(resolution)} is coarser than half the sample rate {format_hz(fs, 'sps')}"
            )
        target = fs / resolution
        if target > MAX_NPERSEG:
            raise ChannelizerError(
                f"resolution {resolution:g} Hz needs {target:.3g}-point segments at {fs:g} Hz; at most "
                f"{MAX_NPERSEG} points are allowed (a resolution of at least {fs / MAX_NPERSEG:.4g} Hz)"
            )
        n = 1
        while n < target * (1.0 - 1e-12):
            n *= 2
        return n
    if nperseg is None:
        return _DEFAULT_NPERSEG
    if isinstance(nperseg, bool) or not isinstance(nperseg, (int, np.integer)) or not 2 <= nperseg <= MAX_NPERSEG:
        raise ChannelizerError(f"nperseg must be an integer from 2 to {MAX_NPERSEG}, got {nperseg!r}")
    return int(nperseg)


def _make_window(window, nperseg):
    if isinstance(window, str) and window in ("hann", "hanning"):
        # periodic Hann, as scipy.signal.get_window('hann', n, fftbins=True) gives it (Harris 1978 [2]_),
        # without importing scipy.signal (about a second of a command's start-up)
        return 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(nperseg) / nperseg)
    import scipy.signal

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
                spec = np.fft.fft(seg, axis=1)  # numpy >= 2 keeps complex64 in single precision
                consume(self.segments + i, spec.real**2 + spec.imag**2)
            self.segments += count
        # copy: never hold on to (a view of) the caller's block
        self._tail = np.array(buf[count * self.step :], copy=True)

    def restart(self):
        """Drop the samples of an unfinished segment: the next block does not follow on."""
        self._tail = np.zeros(0, dtype=np.complex64)


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

    def restart(self):
        """The next block does not follow the previous one: no segment spans the gap."""
        self._seg.restart()

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
        return _psd_from_sum(self, self._sum, self._seg.segments, self.nperseg - self.noverlap, self._seg.samples)


def _psd_from_sum(acc, total, k, step, samples):
    """The :class:`Psd` of ``k`` periodograms summing to ``total``, segments ``step`` apart.

    ``acc`` supplies ``fs``, ``center_frequency``, ``nperseg``, ``window`` and the
    window's samples ``_win``; ``samples`` is only named in the error for ``k == 0``.
    """
    if k == 0:
        raise ChannelizerError(f"spectrum needs at least nperseg = {acc.nperseg} samples, got {samples}")
    w = acc._win
    s2 = float(np.dot(w, w))
    psd = np.fft.fftshift(total / (k * acc.fs * s2))
    freqs = acc.center_frequency + np.fft.fftshift(np.fft.fftfreq(acc.nperseg, 1.0 / acc.fs))
    psd.setflags(write=False)
    freqs.setflags(write=False)
    return Psd(
        freqs=freqs,
        psd=psd,
        fs=acc.fs,
        center_frequency=acc.center_frequency,
        nperseg=acc.nperseg,
        noverlap=max(0, acc.nperseg - step),
        window=acc.window,
        enbw_hz=acc.fs * s2 / float(np.sum(w)) ** 2,
        segments=k,
        dof=_welch_dof(w, step, k),
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
        raise ChannelizerError(f"tone frequency {format_hz(frequency)} is outside the spectrum [{format_hz(lo)}, {format_hz(hi)})")
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


# --------------------------------------------------------------------------- noise floor


# --------------------------------------------------------------------------- detection


# --------------------------------------------------------------------------- channel list


