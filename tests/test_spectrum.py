"""Tests of the spectrum survey: Welch PSD, spectrogram, noise floor, signal detection."""

import math

import numpy as np
import pytest
import scipy.signal

from channelizer.dsp import spectrum
from channelizer.errors import ChannelizerError
from channelizer.dsp.spectrum import Psd, WelchAccumulator, tone_power_dbfs
from channelizer.dsp.spectrogram import SpectrogramAccumulator
from channelizer.dsp.detection import DetectedSignal, channel_list_from_signals, detect_signals, estimate_noise_floor


@pytest.fixture
def rng():
    return np.random.default_rng(20260517)


def complex_noise(rng, n, power):
    """Circular complex Gaussian noise of mean power ``power``."""
    return (rng.standard_normal(n) + 1j * rng.standard_normal(n)) * math.sqrt(power / 2.0)


def welch_of(x, **kw):
    acc = WelchAccumulator(**kw)
    acc.update(x)
    return acc.result()


def scipy_psd(x, *, fs, nperseg, noverlap, window):
    """Reference: scipy.signal.welch, two-sided density, fftshifted."""
    f, p = scipy.signal.welch(
        x, fs=fs, window=window, nperseg=nperseg, noverlap=noverlap,
        detrend=False, return_onesided=False, scaling="density",
    )
    return np.fft.fftshift(f), np.fft.fftshift(p)


def test_public_api_is_the_listed_names():
    defined = {
        name for name, value in vars(spectrum).items()
        if not name.startswith("_") and getattr(value, "__module__", None) == spectrum.__name__
    }
    assert defined == set(spectrum.__all__)
    assert len(spectrum.__all__) == len(set(spectrum.__all__))


# --------------------------------------------------------------------------- segment length


@pytest.mark.parametrize(
    "fs, resolution, nperseg",
    [
        (1.024e6, 1000.0, 1024),  # fs / resolution exactly a power of two
        (1.0e6, 1000.0, 1024),    # 1000 -> 1024
        (1.0e6, 977.0, 1024),     # 1023.5 -> 1024
        (1.0e6, 976.0, 2048),     # 1024.6 -> 2048
        (2.0e6, 1.0e3, 2048),
    ],
)
def test_resolution_gives_next_power_of_two(fs, resolution, nperseg):
    # nperseg = next power of two >= fs / resolution (our stated rule; arithmetic by hand)
    acc = WelchAccumulator(fs=fs, resolution=resolution)
    assert acc.nperseg == nperseg
    assert fs / acc.nperseg <= resolution


def test_segment_length_options():
    assert WelchAccumulator(fs=1e6).nperseg == 1024
    assert WelchAccumulator(fs=1e6, nperseg=300).nperseg == 300
    with pytest.raises(ChannelizerError, match="resolution"):
        WelchAccumulator(fs=1e6, resolution=1e3, nperseg=1024)


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(fs=-1.0), "fs"),
        (dict(fs=1e6, overlap=1.0), "overlap"),
        (dict(fs=1e6, overlap=-0.1), "overlap"),
        (dict(fs=1e6, window="no-such-window"), "window"),
        (dict(fs=1e6, nperseg=1), "nperseg"),
        (dict(fs=1e6, resolution=0.0), "resolution"),
        (dict(fs=1e6, center_frequency=float("nan")), "center_frequency"),
    ],
)
def test_bad_options_raise(kwargs, match):
    with pytest.raises(ChannelizerError, match=match):
        WelchAccumulator(**kwargs)


def test_bad_blocks_and_short_capture_raise():
    acc = WelchAccumulator(fs=1e6, nperseg=64)
    with pytest.raises(ChannelizerError, match="one-dimensional"):
        acc.update(np.zeros((2, 64), complex))
    with pytest.raises(ChannelizerError, match="numeric"):
        acc.update(np.array(["a", "b"]))
    acc.update(np.zeros(63, complex))
    with pytest.raises(ChannelizerError, match="at least nperseg = 64"):
        acc.result()


# --------------------------------------------------------------------------- Welch levels


@pytest.mark.parametrize(
    "window, overlap, nperseg, n",
    [
        ("hann", 0.5, 256, 10007),
        (("kaiser", 8.0), 0.75, 128, 5000),
        ("blackmanharris", 0.0, 512, 4096),
        ("boxcar", 0.5, 100, 3333),
    ],
)
def test_levels_match_scipy_welch(rng, window, overlap, nperseg, n):
    # outside source: scipy.signal.welch(return_onesided=False, detrend=False, scaling='density')
    fs, fc = 2.5e6, 915.0e6
    x = complex_noise(rng, n, 1.0) + 0.3 * np.exp(2j * np.pi * 0.1234 * np.arange(n))
    psd = welch_of(x, fs=fs, nperseg=nperseg, window=window, overlap=overlap, center_frequency=fc)
    noverlap = int(round(overlap * nperseg))
    f_ref, p_ref = scipy_psd(x, fs=fs, nperseg=nperseg, noverlap=noverlap, window=window)
    np.testing.assert_allclose(psd.psd, p_ref, rtol=1e-6)
    np.testing.assert_allclose(psd.freqs, fc + f_ref, rtol=0, atol=1e-6)
    assert np.all(np.diff(psd.freqs) > 0)
    assert psd.segments == (n - noverlap) // (nperseg - noverlap)
    assert psd.psd.dtype == np.float64


def test_real_and_single_precision_blocks_match_scipy(rng):
    # outside source: scipy.signal.welch on the same samples
    x = rng.standard_normal(8192)
    psd = welch_of(x, fs=1.0, nperseg=256)
    _, p_ref = scipy_psd(x, fs=1.0, nperseg=256, noverlap=128, window="hann")
    np.testing.assert_allclose(psd.psd, p_ref, rtol=1e-6)
    z = complex_noise(rng, 8192, 1.0).astype(np.complex64)
    psd = welch_of(z, fs=1.0, nperseg=256)
    _, p_ref = scipy_psd(z.astype(np.complex128), fs=1.0, nperseg=256, noverlap=128, window="hann")
    np.testing.assert_allclose(psd.psd, p_ref, rtol=2e-5)


@pytest.mark.parametrize("chunk", [None, 300])
def test_streaming_equals_one_shot(rng, monkeypatch, chunk):
    # streaming parity with random block boundaries (including empty and one-sample blocks)
    if chunk is not None:
        monkeypatch.setattr(spectrum, "_CHUNK_ELEMENTS", chunk)
    x = complex_noise(rng, 20000, 1.0).astype(np.complex64)
    one = welch_of(x, fs=1e6, nperseg=256, overlap=0.75)
    for _ in range(3):
        cuts = np.sort(rng.integers(0, x.size, size=int(rng.integers(1, 60))))
        cuts = np.concatenate([cuts, rng.integers(0, x.size, size=3)])  # repeated cuts: empty blocks
        acc = WelchAccumulator(fs=1e6, nperseg=256, overlap=0.75)
        for block in np.split(x, np.sort(cuts)):
            acc.update(block)
        acc.update(x[:0])
        got = acc.result()
        assert got.segments == one.segments
        np.testing.assert_allclose(got.psd, one.psd, rtol=1e-12)
    tiny = WelchAccumulator(fs=1e6, nperseg=256, overlap=0.75)
    for i in range(0, 3000, 7):
        tiny.update(x[i : i + 7])
    np.testing.assert_allclose(tiny.result().psd, welch_of(x[:3003], fs=1e6, nperseg=256, overlap=0.75).psd, rtol=1e-12)


def test_update_does_not_modify_or_keep_the_block(rng):
    x = complex_noise(rng, 1000, 1.0)
    more = complex_noise(rng, 700, 1.0)
    orig = x.copy()
    acc = WelchAccumulator(fs=1.0, nperseg=256)
    acc.update(x)
    np.testing.assert_array_equal(x, orig)
    x[:] = 0  # the held tail must be a copy, not a view of the caller's block
    acc.update(more)
    ref = welch_of(np.concatenate([orig, more]), fs=1.0, nperseg=256)
    np.testing.assert_allclose(acc.result().psd, ref.psd, rtol=1e-12)


# --------------------------------------------------------------------------- window figures


@pytest.mark.parametrize(
    "window, enbw_bins, tol",
    [
        # Harris 1978, Proc. IEEE 66(1), table 1 (values from memory); rectangle and Hann
        # (cos^2) are also closed forms: 1 and 3/2 bins
        ("boxcar", 1.00, 1e-9),
        ("hann", 1.50, 1e-9),
        ("hamming", 1.36, 0.005),
        ("blackman", 1.73, 0.005),
        ("blackmanharris", 2.00, 0.006),           # 4-term, -92 dB side lobes
        (("kaiser", 3.0 * math.pi), 1.80, 0.006),  # Kaiser-Bessel alpha = 3 (beta = pi alpha)
    ],
)
def test_enbw_matches_harris_table(window, enbw_bins, tol):
    psd = welch_of(np.zeros(4096, complex), fs=3.0e6, nperseg=4096, window=window)
    assert psd.enbw_bins == pytest.approx(enbw_bins, abs=tol)
    assert psd.enbw_hz == pytest.approx(enbw_bins * 3.0e6 / 4096, abs=tol * 3.0e6 / 4096)


def test_dof_follows_welch_with_harris_overlap_correlation():
    # Welch 1967: var/mean^2 = (1/K)[1 + 2 sum_j (1 - j/K) c(j)^2]; chi-square: var/mean^2 = 2/nu.
    # Hann at 50 % overlap: c(1) = 0.167 (Harris 1978, table 1, overlap correlation; from memory), c(j>1) = 0.
    k = 40
    psd = welch_of(np.zeros(1024 * (k + 1) // 2, complex), fs=1.0, nperseg=1024)
    assert psd.segments == k
    expected = 2 * k / (1 + 2 * (1 - 1 / k) * 0.167**2)
    assert psd.dof == pytest.approx(expected, rel=2e-3)
    # no overlap: independent segments, 2 dof each (complex Gaussian bin is exponential)
    psd = welch_of(np.zeros(1024 * 7, complex), fs=1.0, nperseg=1024, overlap=0.0)
    assert psd.dof == pytest.approx(14.0)


def test_dof_predicts_the_scatter_of_white_noise(rng):
    # physical check of the Welch variance formula: var/mean^2 over bins of white noise = 2/nu
    for overlap in (0.5, 0.75):
        ratios, dof = [], None
        for _ in range(6):
            psd = welch_of(complex_noise(rng, 1024 * 30, 1.0), fs=1.0, nperseg=1024, overlap=overlap)
            ratios.append(np.var(psd.psd) / np.mean(psd.psd) ** 2)
            dof = psd.dof
        assert np.mean(ratios) == pytest.approx(2.0 / dof, rel=0.08)


# --------------------------------------------------------------------------- dBFS


@pytest.mark.parametrize("amplitude", [1.0, 0.1, 0.003])
@pytest.mark.parametrize("offset_bins", [0.0, 0.27, 0.5])
def test_tone_reads_its_amplitude_in_dbfs(rng, amplitude, offset_bins):
    # convention (common practice): |x| = 1 is full scale; a*exp(j w n) has power a^2 -> 20 log10(a) dBFS
    fs, nperseg, n = 1.0e6, 1024, 1 << 16
    f0 = -fs / nperseg * (137 + offset_bins)
    x = amplitude * np.exp(2j * np.pi * f0 / fs * np.arange(n)) + complex_noise(rng, n, 1e-9)
    psd = welch_of(x, fs=fs, nperseg=nperseg, center_frequency=100e6)
    assert tone_power_dbfs(psd, 100e6 + f0) == pytest.approx(20 * math.log10(amplitude), abs=0.1)
    # Parseval: the bins sum to the windowed segments' mean power (naive loop as the reference)
    w = scipy.signal.get_window("hann", nperseg)
    segs = [x[i : i + nperseg] for i in range(0, n - nperseg + 1, nperseg // 2)]
    ref = np.mean([np.sum(np.abs(w * s) ** 2) for s in segs]) / np.sum(w**2)
    assert np.sum(10 ** (psd.dbfs_per_bin() / 10)) == pytest.approx(ref, rel=1e-9)
    if offset_bins == 0.0:
        # on a bin centre the peak density times the ENBW is the tone power (Harris 1978, ENBW definition; from memory)
        assert np.max(psd.psd) * psd.enbw_hz == pytest.approx(amplitude**2, rel=1e-4)
        assert np.max(psd.dbfs_per_bin()) == pytest.approx(20 * math.log10(amplitude) - 10 * math.log10(1.5), abs=1e-3)


def test_tone_power_outside_band_raises():
    psd = welch_of(np.zeros(256, complex), fs=1e3, nperseg=256)
    with pytest.raises(ChannelizerError, match="outside"):
        tone_power_dbfs(psd, 600.0)


# --------------------------------------------------------------------------- spectrogram


def test_spectrogram_rows_are_welch_over_their_share(rng):
    # outside source: scipy.signal.welch on each row's span of samples
    fs, nperseg, noverlap, n = 1.0e5, 128, 64, 30011
    x = complex_noise(rng, n, 1.0)
    acc = SpectrogramAccumulator(fs=fs, total_samples=n, rows=17, nperseg=nperseg, center_frequency=5e3)
    for block in np.split(x, np.sort(rng.integers(0, n, size=25))):
        acc.update(block)
    sg = acc.result()
    step = nperseg - noverlap
    k = (n - noverlap) // step
    assert sg.power_db.shape == (17, nperseg)
    assert int(np.sum(sg.segments)) == k
    assert sg.segments.max() - sg.segments.min() <= 1
    first = 0
    for r in range(17):
        last = first + int(sg.segments[r]) - 1
        span = x[first * step : last * step + nperseg]
        _, p_ref = scipy_psd(span, fs=fs, nperseg=nperseg, noverlap=noverlap, window="hann")
        np.testing.assert_allclose(10 ** (sg.power_db[r] / 10), p_ref, rtol=1e-6)
        assert sg.times[r] == pytest.approx((first * step + last * step + nperseg) / 2 / fs)
        first = last + 1
    np.testing.assert_allclose(sg.freqs, welch_of(x, fs=fs, nperseg=nperseg, center_frequency=5e3).freqs)


def test_spectrogram_follows_a_frequency_hop(rng):
    # physical check: a tone that hops halfway through shows at its frequency in each row
    fs, n = 1.0e6, 1 << 17
    t = np.arange(n)
    f = np.where(t < n // 2, -200e3, 150e3)
    x = np.exp(2j * np.pi * np.cumsum(f) / fs) + complex_noise(rng, n, 1e-6)
    acc = SpectrogramAccumulator(fs=fs, total_samples=n, rows=8, resolution=2e3)
    acc.update(x)
    sg = acc.result()
    peaks = sg.freqs[np.argmax(sg.power_db, axis=1)]
    expected = np.where(sg.times < n / 2 / fs, -200e3, 150e3)
    assert np.all(np.abs(peaks - expected) <= sg.bin_hz)


def test_spectrogram_row_count_and_limits():
    acc = SpectrogramAccumulator(fs=1.0, total_samples=1024, rows=400, nperseg=256)
    assert acc.rows == 7  # (1024 - 128) // 128 segments, fewer than 400
    acc.update(np.zeros(300, complex))
    sg = acc.result()
    assert np.isnan(sg.power_db[-1]).all() and sg.segments[0] == 1
    with pytest.raises(ChannelizerError, match="told 1024 samples"):
        acc.update(np.zeros(800, complex))
    with pytest.raises(ChannelizerError, match="shorter than one segment"):
        SpectrogramAccumulator(fs=1.0, total_samples=100, nperseg=256)
    with pytest.raises(ChannelizerError, match="rows"):
        SpectrogramAccumulator(fs=1.0, total_samples=1000, rows=0, nperseg=256)


# --------------------------------------------------------------------------- noise floor


def with_strong_signals(rng, n, fs, occupied_fraction):
    """Three band-limited noise signals 30 dB above a -40 dBFS floor, covering ``occupied_fraction``."""
    widths = np.array([0.5, 0.3, 0.2]) * occupied_fraction * fs
    centres = np.array([-0.3, 0.05, 0.35]) * fs
    x = np.zeros(n, complex)
    t = np.arange(n)
    for b, c in zip(widths, centres):
        h = scipy.signal.firwin(511, b / 2, fs=fs, window=("kaiser", 9.0))
        y = scipy.signal.oaconvolve(complex_noise(rng, n + h.size - 1, 1.0), h, mode="valid")
        density = 1e-4 / fs * 1e3  # 30 dB above the floor density
        x += y * math.sqrt(density * b / np.mean(np.abs(y) ** 2)) * np.exp(2j * np.pi * c / fs * t)
    return x


@pytest.mark.parametrize("segments", [1, 3, 200])
@pytest.mark.parametrize("occupied", [0.0, 0.25])
def test_noise_floor_of_known_white_noise(rng, segments, occupied):
    # truth: complex white noise of power 1e-4 (-40 dBFS) at fs has density 1e-4 / fs
    fs, nperseg = 2.0e6, 4096
    n = nperseg * (segments + 1) // 2 if segments > 1 else nperseg
    x = complex_noise(rng, n, 1e-4)
    if occupied:
        x = x + with_strong_signals(rng, n, fs, occupied)
    psd = welch_of(x, fs=fs, nperseg=nperseg)
    assert psd.segments == segments
    floor = estimate_noise_floor(psd)
    assert 10 * math.log10(floor / (1e-4 / fs)) == pytest.approx(0.0, abs=0.5)


def test_plain_median_would_be_biased_for_one_segment(rng):
    # chi-square with 2 dof is exponential: median/mean = ln 2 (-1.59 dB), so the correction matters
    psd = welch_of(complex_noise(rng, 8192, 1.0), fs=1.0, nperseg=8192)
    assert psd.dof == pytest.approx(2.0)
    assert 10 * math.log10(np.median(psd.psd) / 1.0) == pytest.approx(10 * math.log10(math.log(2)), abs=0.25)
    assert estimate_noise_floor(psd) == pytest.approx(1.0, rel=0.1)


# --------------------------------------------------------------------------- detection


def occupied_band_of_filter(h, fs):
    """Reference 99 % band of white noise through ``h``: from |H|^2 by scipy.signal.freqz (ITU-R SM.328)."""
    f, resp = scipy.signal.freqz(h, worN=1 << 18, whole=True, fs=fs)
    f = np.fft.fftshift(np.where(f >= fs / 2, f - fs, f))
    p = np.fft.fftshift(np.abs(resp) ** 2)
    c = np.cumsum(p) / np.sum(p)
    return np.interp(0.005, c, f), np.interp(0.995, c, f)


def test_detects_band_limited_noise_and_a_tone(rng):
    fs, nperseg, n = 1.0e6, 1024, 1 << 19
    bin_hz = fs / nperseg
    noise_power = 1e-4  # -40 dBFS: density 1e-10 / Hz
    t = np.arange(n)
    x = complex_noise(rng, n, noise_power)
    truth = []
    for width, centre, power in [(100e3, -250e3, 1e-2), (30e3, 120e3, 1e-3)]:
        # band-limited noise of known occupied band: white noise through a sharp FIR
        h = scipy.signal.firwin(4095, width / 2, fs=fs, window=("kaiser", 10.0))
        y = scipy.signal.oaconvolve(complex_noise(rng, n + h.size - 1, 1.0), h, mode="valid")
        y *= math.sqrt(power / np.mean(np.abs(y) ** 2))
        x += y * np.exp(2j * np.pi * centre / fs * t)
        lo, hi = occupied_band_of_filter(h, fs)
        # a flat band of width B has 99 % bandwidth 0.99 B (ITU-R SM.328 definition); this one is near flat
        assert hi - lo == pytest.approx(0.99 * width, abs=2 * bin_hz)
        truth.append((centre + (lo + hi) / 2, hi - lo, power))
    tone_f, tone_a = 350e3 + 0.3 * bin_hz, 0.05
    x += tone_a * np.exp(2j * np.pi * tone_f / fs * t)
    center_frequency = 2.4e9
    psd = welch_of(x, fs=fs, nperseg=nperseg, center_frequency=center_frequency)

    found = detect_signals(psd)
    assert len(found) == 3
    floor = noise_power / fs
    for sig, (centre, obw, power) in zip(found[:2], truth):
        assert sig.center_hz - center_frequency == pytest.approx(centre, abs=bin_hz)
        assert sig.occupied_bandwidth_hz == pytest.approx(obw, abs=bin_hz)
        assert sig.power_dbfs == pytest.approx(10 * math.log10(power), abs=0.5)
        assert sig.snr_db == pytest.approx(10 * math.log10(power / (floor * obw)), abs=0.5)
        assert sig.lower_hz < sig.peak_hz < sig.upper_hz
    cw = found[2]
    assert cw.center_hz - center_frequency == pytest.approx(tone_f, abs=bin_hz)
    assert abs(cw.peak_hz - center_frequency - tone_f) <= bin_hz
    # a tone reads the window's own 99 % width: a few bins for Hann
    assert cw.occupied_bandwidth_hz <= 4 * bin_hz
    assert cw.power_dbfs == pytest.approx(20 * math.log10(tone_a), abs=0.5)
    # min_bandwidth_hz leaves out the tone only
    wide = detect_signals(psd, min_bandwidth_hz=10 * bin_hz)
    assert [s.center_hz for s in wide] == [s.center_hz for s in found[:2]]
    assert detect_signals(psd, threshold_db=60.0) == []


def flat_psd(levels):
    """A hand-built spectrum: 1 Hz bins, floor 1 per Hz, Hann figures."""
    p = np.asarray(levels, float)
    n = p.size
    return Psd(
        freqs=np.arange(n) - n // 2 + 0.0, psd=p, fs=float(n), center_frequency=0.0,
        nperseg=n, noverlap=n // 2, window="hann", enbw_hz=1.5, segments=100, dof=190.0,
    )


def test_flat_band_has_99_percent_width_and_runs_merge():
    # ITU-R SM.328: a flat band of width B leaves 0.5 % at each end -> 0.99 B, centred
    p = np.ones(512)
    p[100:140] = 101.0   # 40 bins, 100 per Hz above the floor
    p[300:310] = 51.0    # a two-part signal: 10 bins, a 2-bin gap, 8 bins ...
    p[312:320] = 51.0    # ... merged (gap below max(3, 2 * 1.5) bins)
    p[400:410] = 11.5    # 10.6 dB above the floor: just over the 10 dB threshold
    psd = flat_psd(p)
    found = detect_signals(psd, noise_floor=1.0)
    assert len(found) == 3
    a, b, c = found
    f0 = psd.freqs[100] - 0.5  # lower edge of bin 100
    assert a.lower_hz == pytest.approx(f0 + 0.2)
    assert a.occupied_bandwidth_hz == pytest.approx(0.99 * 40)
    assert a.center_hz == pytest.approx(f0 + 20)
    assert a.power_dbfs == pytest.approx(10 * math.log10(40 * 100))
    assert a.snr_db == pytest.approx(10 * math.log10(40 * 100 / (0.99 * 40)))
    # merged signal: 18 occupied bins spread over 20
    g0 = psd.freqs[300] - 0.5
    assert b.lower_hz == pytest.approx(g0 + 0.005 * 18 * 50 / 50)  # 0.5 % of 18 x 50 inside the first bin
    assert b.upper_hz == pytest.approx(g0 + 20 - 0.09)
    assert b.power_dbfs == pytest.approx(10 * math.log10(18 * 50))
    assert c.occupied_bandwidth_hz == pytest.approx(0.99 * 10)
    assert detect_signals(psd, noise_floor=1.0, threshold_db=10.7)[2:] == []


def test_no_signals_in_plain_noise(rng):
    psd = welch_of(complex_noise(rng, 1 << 16, 1.0), fs=1e6, nperseg=512)
    assert detect_signals(psd) == []


# --------------------------------------------------------------------------- channel list


def make_signal(centre, width):
    return DetectedSignal(
        center_hz=centre, occupied_bandwidth_hz=width, lower_hz=centre - width / 2,
        upper_hz=centre + width / 2, power_dbfs=-30.0, snr_db=20.0, peak_hz=centre,
    )


def test_channel_list_names_and_values():
    sigs = [make_signal(433.05e6, 25e3), make_signal(433.92e6, 200e3)]
    assert channel_list_from_signals(sigs) == [
        {"name": "sig01", "frequency": 433.05e6, "bandwidth": 25e3},
        {"name": "sig02", "frequency": 433.92e6, "bandwidth": 200e3},
    ]
    many = channel_list_from_signals([make_signal(1e6 + i, 1.0) for i in range(120)], prefix="cap_")
    assert many[0]["name"] == "cap_001" and many[-1]["name"] == "cap_120"
    assert len({c["name"] for c in many}) == 120
    assert channel_list_from_signals([]) == []
    assert all(type(c["frequency"]) is float for c in many)


@pytest.mark.parametrize("prefix", ["", "1sig", "a b", "x/y", None])
def test_channel_list_rejects_bad_prefix(prefix):
    with pytest.raises(ChannelizerError, match="prefix"):
        channel_list_from_signals([make_signal(1e6, 1e3)], prefix=prefix)


def test_median_equals_numpys():
    # numpy.median (the reference): the middle value, or the mean of the two middle
    # ones for an even count; NaN propagates
    from channelizer.dsp.detection import median

    rng = np.random.default_rng(3)
    for n in (1, 2, 3, 4, 17, 64, 1001, 4096):
        for x in (rng.standard_normal(n), rng.integers(0, 3, n).astype(float), rng.exponential(size=n) * 1e-12):
            assert median(x) == np.median(x), n
    assert median([1.0, np.inf, 2.0]) == np.median([1.0, np.inf, 2.0])
    assert np.isnan(median([1.0, np.nan, 2.0]))
    with pytest.raises(ValueError):
        median([])
