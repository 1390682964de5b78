"""The Ridge 7 demo scene: determinism, levels, impairments and the folding interferer.

Levels are measured with scipy.signal.welch (Welch, IEEE Trans. Audio Electroacoust.
15(2):70-73, 1967): the power in a band is the PSD summed over the band times the
bin width (Parseval), never a value read back from the generator.
"""

import math

import numpy as np
import pytest
from scipy import signal

from channelizer.errors import ChannelizerError
from channelizer.demo.scene import interferer_offset_for, make_scenario
from channelizer.demo.signals import _rrc_pulse, apply_iq_imbalance, image_rejection_db

NPERSEG = 1 << 14  # 146 Hz bins at 2.4 Msps: ~75 bins across an 11 kHz channel


@pytest.fixture(scope="module")
def scene():
    return make_scenario(duration=1.0)


def band_power_dbfs(x, *, fs, centre, width, nperseg=NPERSEG):
    """Power in ``centre +- width / 2`` from a two-sided Welch PSD, in dBFS."""
    # detrend=False: welch's default removes each segment's mean, which would
    # delete a carrier at 0 Hz (the DC leak, or an FM carrier shifted to 0 Hz).
    f, p = signal.welch(x, fs=fs, nperseg=min(nperseg, x.size), return_onesided=False,
                        detrend=False, scaling="density")
    inside = np.abs(f - centre) <= width / 2
    return 10 * np.log10(np.sum(p[inside]) * (f[1] - f[0]))


def offset(sc, ch):
    return ch.frequency - sc.center_frequency


def longest_on_segment(sc, ch):
    start, stop = max(ch.keyed, key=lambda iv: iv[1] - iv[0])
    return sc.samples[int(math.ceil(start * sc.fs)):int(stop * sc.fs)]


def shift_to_zero(sc, f):
    n = np.arange(sc.samples.size)
    return sc.samples * np.exp(-2j * np.pi * f / sc.fs * n)


# --- determinism and format -------------------------------------------------


def test_same_seed_gives_identical_samples_and_another_seed_does_not():
    a = make_scenario(duration=0.1, seed=3)
    b = make_scenario(duration=0.1, seed=3)
    c = make_scenario(duration=0.1, seed=4)
    assert np.array_equal(a.samples, b.samples)
    assert a.channels == b.channels and a.interferer == b.interferer
    assert not np.array_equal(a.samples, c.samples)


def test_samples_are_complex64_of_the_asked_length_with_headroom(scene):
    x = scene.samples
    assert x.dtype == np.complex64
    assert x.size == round(1.0 * 2.4e6)
    assert np.all(np.isfinite(x))
    # Headroom for ci16 storage (the brief asks for |I|, |Q| < 0.9).
    assert max(np.max(np.abs(x.real)), np.max(np.abs(x.imag))) < 0.9
    assert scene.fs == 2.4e6 and scene.center_frequency == 161.0e6 and scene.seed == 7


def test_description_names_the_scene_and_every_emission(scene):
    text = scene.description
    assert "Ridge 7" in text and "invented" in text
    for ch in [*scene.channels, scene.interferer]:
        assert ch.name in text


# --- levels -------------------------------------------------------------------

NAMES = ["ridge-ch1", "ridge-ch2", "ridge-ch3", "ridge-ch4", "ridge-ch5", "ridge-data",
         "ridge-hash"]


@pytest.mark.parametrize("name", NAMES)
def test_band_power_matches_stated_level(scene, name):
    ch = scene.channel(name)
    seg = longest_on_segment(scene, ch)
    measured = band_power_dbfs(seg, fs=scene.fs, centre=offset(scene, ch), width=ch.bandwidth)
    # The noise floor adds at most 0.03 dB (ridge-ch5, 21 dB above the noise in
    # its band); 0.5 dB is well inside the brief's 1 dB.
    assert measured == pytest.approx(ch.level_dbfs, abs=0.5)


@pytest.mark.parametrize("fs", [2.048e6, 3.2e6])
def test_levels_hold_at_other_sample_rates(fs):
    sc = make_scenario(fs=fs, duration=0.25, seed=11)
    assert sc.samples.size == round(0.25 * fs)
    for ch in [*sc.channels, sc.interferer]:
        seg = longest_on_segment(sc, ch)
        measured = band_power_dbfs(seg, fs=fs, centre=offset(sc, ch), width=ch.bandwidth,
                                   nperseg=1 << 13)
        assert measured == pytest.approx(ch.level_dbfs, abs=0.5), ch.name


def test_keyed_channels_are_silent_between_bursts(scene):
    keyed = [ch for ch in scene.channels if len(ch.keyed) and ch.keyed[0][0] > 0]
    assert {ch.name for ch in keyed} == {"ridge-ch2", "ridge-ch5"}
    margin = 0.01  # clear of the key-up / key-down ramps
    for ch in keyed:
        edges = [0.0, *[t for iv in ch.keyed for t in iv], scene.duration]
        gaps = [(edges[i] + margin * (i > 0), edges[i + 1] - margin)
                for i in range(0, len(edges) - 1, 2)]
        gaps = [(a, b) for a, b in gaps if b - a >= 0.05]
        assert gaps, f"{ch.name} has no gap of 50 ms in a 1 s capture"
        for a, b in gaps:
            seg = scene.samples[int(a * scene.fs):int(b * scene.fs)]
            off_power = band_power_dbfs(seg, fs=scene.fs, centre=offset(scene, ch),
                                        width=ch.bandwidth, nperseg=1 << 12)
            assert off_power < ch.level_dbfs - 15


def test_weak_channel_sits_one_step_above_a_strong_one(scene):
    strong, weak = scene.channel("ridge-ch4"), scene.channel("ridge-ch5")
    assert weak.frequency - strong.frequency == pytest.approx(12.5e3)
    assert 40 <= strong.level_dbfs - weak.level_dbfs <= 50


def test_noise_floor_in_an_empty_band(scene):
    # 850 kHz - 1.1 MHz holds no emission, image or DC leak.
    f, p = signal.welch(scene.samples, fs=scene.fs, nperseg=NPERSEG, return_onesided=False,
                        detrend=False)
    empty = (f > 850e3) & (f < 1.1e6)
    assert 10 * np.log10(np.mean(p[empty])) == pytest.approx(scene.noise_dbfs_per_hz, abs=0.3)
    # Every emission stands at least 20 dB above the noise in its own band.
    for ch in [*scene.channels, scene.interferer]:
        assert ch.level_dbfs - (scene.noise_dbfs_per_hz + 10 * math.log10(ch.bandwidth)) > 20


def test_dc_leak_level(scene):
    measured = band_power_dbfs(scene.samples, fs=scene.fs, centre=0.0, width=2e3)
    assert measured == pytest.approx(scene.dc_leak_dbfs, abs=0.5)
    assert -55 < scene.dc_leak_dbfs < -45


# --- FM channels ----------------------------------------------------------------


@pytest.mark.parametrize("name", ["ridge-ch1", "ridge-ch4"])
def test_fm_peak_deviation_and_carson_bandwidth(scene, name):
    ch = scene.channel(name)
    z = signal.resample_poly(shift_to_zero(scene, offset(scene, ch)), 1, 50)  # 48 ksps
    deviation = np.abs(np.angle(z[1:] * np.conj(z[:-1]))) * 48e3 / (2 * np.pi)
    # Peak deviation 2.5 kHz, the usual figure for 12.5 kHz channels (common practice).
    assert 0.85 * 2.5e3 < np.percentile(deviation, 99.99) < 1.05 * 2.5e3
    # Carson's rule, 2 (peak deviation + top audio frequency) = 11 kHz, holds
    # about 98 % of an FM signal's power (from memory).
    f, p = signal.welch(z, fs=48e3, nperseg=1 << 12, return_onesided=False, detrend=False)
    assert np.sum(p[np.abs(f) <= 5.5e3]) >= 0.98 * np.sum(p[np.abs(f) <= 20e3])


def test_rrc_pulse_convolved_with_itself_has_no_intersymbol_interference():
    # RRC * RRC is a raised cosine: zero at every non-zero multiple of the symbol
    # period (Nyquist's criterion; Proakis & Salehi, Digital Communications, 5th
    # ed., sec. 9.2, from memory).  Truncation at +-16 symbols leaves ~1e-3.
    sps, span, rolloff = 8, 16, 0.35
    t = np.arange(-span * sps, span * sps + 1) / sps
    h = _rrc_pulse(t, 1.0, rolloff)
    rc = np.convolve(h, h)
    centre = rc.size // 2
    at_symbols = rc[centre % sps::sps] / rc[centre]
    at_symbols = np.delete(at_symbols, centre // sps)
    assert np.max(np.abs(at_symbols)) < 5e-3
    # The corner t = T / (4 alpha) is finite and continuous with its neighbours.
    corner = 1 / (4 * rolloff)
    near = _rrc_pulse(np.array([corner - 1e-6, corner, corner + 1e-6]), 1.0, rolloff)
    assert np.ptp(near) < 1e-4


# --- IQ imbalance -------------------------------------------------------------------


def test_image_rejection_formula_matches_the_worked_value():
    # methods.md, "Measures used in the trade" (derived): g = 1.01, phi = 1 deg -> 39.96 dB.
    assert image_rejection_db(1.01, 1.0) == pytest.approx(39.96, abs=0.005)
    assert image_rejection_db(1.0, 0.0) == math.inf


@pytest.mark.parametrize("gain, phase_deg", [(1.01, 1.0), (1.05, 0.0), (1.0, 3.0), (0.97, -2.0)])
def test_tone_image_through_iq_imbalance_matches_the_formula(gain, phase_deg):
    n, k = 4096, 300  # whole cycles, so the tone and its image sit on single bins
    tone = np.exp(2j * np.pi * k * np.arange(n) / n)
    spectrum = np.fft.fft(apply_iq_imbalance(tone, gain=gain, phase_deg=phase_deg))
    measured = 10 * np.log10(abs(spectrum[k]) ** 2 / abs(spectrum[n - k]) ** 2)
    assert measured == pytest.approx(image_rejection_db(gain, phase_deg), abs=0.1)
    if (gain, phase_deg) == (1.01, 1.0):
        assert measured == pytest.approx(39.96, abs=0.1)  # methods.md value


def test_iq_imbalance_keeps_i_dtype_and_input():
    rng = np.random.default_rng(5)
    x = (rng.standard_normal(256) + 1j * rng.standard_normal(256)).astype(np.complex64)
    before = x.copy()
    y = apply_iq_imbalance(x, gain=1.01, phase_deg=1.0)
    assert y.dtype == np.complex64
    assert np.array_equal(y.real, x.real)  # I is the reference branch
    assert np.array_equal(x, before)
    wide = apply_iq_imbalance(x.astype(np.complex128), gain=1.0, phase_deg=0.0)
    assert wide.dtype == np.complex128
    with pytest.raises(ChannelizerError, match="complex"):
        apply_iq_imbalance(x.real, gain=1.0, phase_deg=0.0)


def test_scene_shows_the_strong_channels_image(scene):
    strong = scene.channel("ridge-ch4")
    image = band_power_dbfs(scene.samples, fs=scene.fs, centre=-offset(scene, strong),
                            width=strong.bandwidth)
    expected = strong.level_dbfs - image_rejection_db(scene.iq_gain, scene.iq_phase_deg)
    assert image == pytest.approx(expected, abs=0.5)


# --- the folding interferer -----------------------------------------------------------


@pytest.mark.parametrize(
    "fs_out, order", [(48e3, None), (48e3, -4), (40e3, None), (96e3, None), (25e3, 7)]
)
def test_interferer_offset_for_lands_on_the_target_after_down_sampling(scene, fs_out, order):
    # Down-sampling by M without a filter maps f onto f mod fs/M (Oppenheim &
    # Schafer, DTSP 3rd ed., sec. 4.6, from memory): a tone at the returned
    # offset, shifted by the target's offset, is at 0 Hz after taking every M-th sample.
    target = offset(scene, scene.channel("ridge-ch3"))
    f = interferer_offset_for(fs_out, order=order)
    m = round(scene.fs / fs_out)
    n = np.arange(4096 * m)
    tone = np.exp(2j * np.pi * (f - target) / scene.fs * n)[::m]
    assert np.allclose(tone, 1.0, atol=1e-6)
    if order is None:
        # The interferer's band clears ridge-ch3's by two 12.5 kHz steps.
        assert abs(f - target) - 100e3 - 5.5e3 >= 25e3
        assert f > target


def test_default_interferer_folds_onto_ridge_ch3_without_a_decimation_filter(scene):
    ch3, hash_ = scene.channel("ridge-ch3"), scene.interferer
    assert offset(scene, hash_) == pytest.approx(interferer_offset_for(48e3))
    y = shift_to_zero(scene, offset(scene, ch3))
    naive = y[::50]  # 48 ksps, no anti-alias filter
    filtered = signal.resample_poly(y, 1, 50)  # scipy's Kaiser anti-alias filter
    measure = dict(fs=48e3, centre=0.0, width=ch3.bandwidth, nperseg=1 << 10)

    # Prediction from the down-sampler's spectrum: the interferer's flat 200 kHz
    # band wraps onto the 48 kHz output band; the fraction of it that lands in
    # ridge-ch3's 11 kHz; white noise folds M = 50 times.  The other channels and
    # the DC leak land clear of ridge-ch3 by the channel plan.
    rel = offset(scene, hash_) - offset(scene, ch3)
    grid = np.linspace(rel - hash_.bandwidth / 2, rel + hash_.bandwidth / 2, 400001)
    folded = (grid + 24e3) % 48e3 - 24e3
    fraction = np.mean(np.abs(folded) <= ch3.bandwidth / 2)
    interferer_in_band = 10 ** (hash_.level_dbfs / 10) * fraction
    noise_in_band = 10 ** (scene.noise_dbfs_per_hz / 10) * scene.fs * ch3.bandwidth / 48e3
    predicted = 10 * np.log10(10 ** (ch3.level_dbfs / 10) + interferer_in_band + noise_in_band)

    assert band_power_dbfs(naive, **measure) == pytest.approx(predicted, abs=1.0)
    assert 10 * np.log10(interferer_in_band) > ch3.level_dbfs + 3  # it would bury the channel
    assert band_power_dbfs(filtered, **measure) == pytest.approx(ch3.level_dbfs, abs=0.5)


def test_interferer_clears_every_channel(scene):
    hash_ = scene.interferer
    for ch in scene.channels:
        gap = abs(ch.frequency - hash_.frequency) - (ch.bandwidth + hash_.bandwidth) / 2
        assert gap > 0, ch.name


# --- bad input ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    "kwargs, field",
    [
        (dict(fs=1.5e6), "fs"),
        (dict(fs=-1.0), "fs"),
        (dict(duration=0.0), "duration"),
        (dict(duration=0.01), "duration"),
        (dict(duration=float("nan")), "duration"),
        (dict(seed=-1), "seed"),
        (dict(seed=1.5), "seed"),
        (dict(interferer_offset=600e3), "interferer_offset"),
        (dict(interferer_offset=1.1e6), "interferer_offset"),
        (dict(center_frequency="161M"), "center_frequency"),
    ],
)
def test_bad_arguments_name_the_field(kwargs, field):
    with pytest.raises(ChannelizerError, match=f"^{field}:"):
        make_scenario(duration=kwargs.pop("duration", 0.1), **kwargs)


def test_bad_helper_arguments_name_the_field():
    with pytest.raises(ChannelizerError, match="^gain:"):
        image_rejection_db(0.0, 1.0)
    with pytest.raises(ChannelizerError, match="^phase_deg:"):
        apply_iq_imbalance(np.ones(4, complex), gain=1.0, phase_deg=float("inf"))
    with pytest.raises(ChannelizerError, match="^order:"):
        interferer_offset_for(48e3, order=0)
    with pytest.raises(ChannelizerError, match="^target:"):
        interferer_offset_for(48e3, target="ridge-ch9")
    with pytest.raises(ChannelizerError, match="^fs_out:"):
        interferer_offset_for(0.0)
