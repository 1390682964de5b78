"""A survey a person can trust: one entry per emission, sub-bin carrier centres, a local
noise floor, numbers printed to the resolution, and a note on unscaled float captures.

References: the generated signals' own parameters (frequencies, filter shapes through
scipy.signal.freqz), and the Gaussian peak interpolation's accuracy for a Hann window
(Gasior & Gonzalez, CERN AB-Note-2004-021: a few hundredths of a bin).
"""

import math
import re

import numpy as np
import pytest
import scipy.signal
import yaml

from channelizer.cli import main
from channelizer.dsp.detection import detect_signals, noise_floor_profile
from channelizer.dsp.spectrum import Psd, WelchAccumulator
from channelizer.io.sigmf_writer import write_sigmf
from channelizer.units import format_hz, resolution_step


def _noise(rng, n, power):
    return (rng.standard_normal(n) + 1j * rng.standard_normal(n)) * math.sqrt(power / 2)


def _welch(x, fs, nperseg):
    acc = WelchAccumulator(fs=fs, nperseg=nperseg)
    acc.update(x)
    return acc.result()


@pytest.mark.parametrize("frac", [0.0, 0.17, 0.31, 0.45])
def test_carrier_centre_to_a_fraction_of_a_bin(frac):
    rng = np.random.default_rng(5)
    fs, nperseg, n = 48e3, 2048, 1 << 17
    bin_hz = fs / nperseg
    f0 = 300 * bin_hz + frac * bin_hz
    x = 0.1 * np.exp(2j * np.pi * f0 * np.arange(n) / fs) + _noise(rng, n, 1e-6)
    (sig,) = detect_signals(_welch(x, fs, nperseg))
    assert sig.carrier
    # the strongest bin alone is off by up to half a bin; the interpolated peak by a few hundredths
    assert abs(sig.center_hz - f0) < 0.06 * bin_hz


def test_wide_signal_centre_is_the_middle_of_its_occupied_band():
    rng = np.random.default_rng(6)
    fs, n = 1e6, 1 << 18
    h = scipy.signal.firwin(1023, 50e3, fs=fs)  # 100 kHz wide, flat, centred at +200 kHz
    s = scipy.signal.lfilter(h, 1, _noise(rng, n, 1.0)) * np.exp(2j * np.pi * 200e3 * np.arange(n) / fs)
    s += 0.5 * np.sqrt(np.mean(np.abs(s) ** 2)) * np.exp(2j * np.pi * 170e3 * np.arange(n) / fs)  # a tone off-centre
    x = s + _noise(rng, n, 1e-6)
    (sig,) = detect_signals(_welch(x, fs, 1024))
    assert not sig.carrier
    assert sig.center_hz == pytest.approx(0.5 * (sig.lower_hz + sig.upper_hz))
    assert sig.center_hz == pytest.approx(200e3, abs=3e3)


def test_local_floor_follows_a_shaped_passband():
    # white noise through a filter whose |H|^2 rises 10 dB across the band: the true
    # density per bin is |H(f)|^2 N0, from scipy.signal.freqz
    rng = np.random.default_rng(7)
    fs, n, nperseg = 1e6, 1 << 19, 2048
    h = scipy.signal.firls(63, [0, 1], [1.0, math.sqrt(10.0)], fs=2)
    x = scipy.signal.lfilter(h, 1, _noise(rng, n, 1e-4))
    psd = _welch(x, fs, nperseg)
    _, resp = scipy.signal.freqz(h, worN=2 * math.pi * psd.freqs / fs)
    true = np.abs(resp) ** 2 * 1e-4 / fs
    prof = noise_floor_profile(psd)
    err = 10 * np.log10(prof / true)
    inner = slice(nperseg // 16, -nperseg // 16)  # region centres hold the band edges flat
    assert np.max(np.abs(err[inner])) < 0.6
    # the shaped noise is no signal: nothing is detected against the local floor
    assert detect_signals(psd, noise_floor=prof) == []


def _flat(levels, dof=190.0):
    p = np.asarray(levels, float)
    n = p.size
    return Psd(freqs=np.arange(n) - n // 2 + 0.0, psd=p, fs=float(n), center_frequency=0.0,
               nperseg=n, noverlap=n // 2, window="hann", enbw_hz=1.5, segments=100, dof=dof)


def test_fragments_join_their_emission_and_weak_runs_drop():
    p = np.ones(2048)
    p[1000:1100] = 1001.0   # a strong 100-bin emission, 30 dB over the floor
    p[1150:1160] = 16.0     # a 10-bin lobe 50 bins away, about 12 dB in-band: part of it
    p[300:304] = 10.5       # an isolated 4-bin run, crossing 10 dB in its bins but not in its band
    p[1700:1710] = 101.0    # an isolated 20 dB signal far away stays on its own
    found = detect_signals(_flat(p), noise_floor=1.0, threshold_db=10.0)
    assert len(found) == 2
    body, other = found
    assert body.center_hz == pytest.approx(1050 - 1024 - 0.5, abs=1)
    # the lobe on its own clears the threshold: it was joined to the body, not dropped
    alone = p.copy()
    alone[1000:1100] = 1.0
    assert len(detect_signals(_flat(alone), noise_floor=1.0, threshold_db=10.0)) == 2
    assert other.center_hz == pytest.approx(1705 - 1024 - 0.5, abs=1)
    # every listed signal is at least the threshold over the noise in its own band
    assert all(s.snr_db >= 10.0 for s in found)


def test_numbers_to_the_resolution():
    # the digit a 293 Hz resolution gives is the 100 Hz one (common practice)
    assert resolution_step(293.0) == 100.0 and resolution_step(2.93) == 1.0
    assert format_hz(161.1625e6, resolution=293.0) == "161.1625 MHz"
    assert format_hz(77.5e3, resolution=2.93) == "77.500 kHz"


def test_survey_rounds_the_list_and_notes_unscaled_floats(tmp_path, capsys):
    rng = np.random.default_rng(8)
    fs, n = 2.4e6, 1 << 18
    t = np.arange(n)
    x = 300.0 * (np.exp(2j * np.pi * 123_456.7 * t / fs) + _noise(rng, n, 1e-6))  # values in the hundreds
    base = str(tmp_path / "hot")
    write_sigmf(base, x.astype(np.complex64), datatype="cf32_le", fs=fs, center_frequency=433.92e6)
    lst = tmp_path / "l.yaml"
    assert main(["survey", base + ".sigmf-meta", "--channels-out", str(lst), "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "not scaled to full scale" in out
    (row,) = yaml.safe_load(lst.read_text())
    step = resolution_step(fs / 4096)  # the default resolution: 586 Hz bins -> 100 Hz
    assert row["frequency"] / step == pytest.approx(round(row["frequency"] / step), abs=1e-9)
    assert row["frequency"] == pytest.approx(433.92e6 + 123_456.7, abs=step)
    # 433.92 MHz + 123.4567 kHz, printed to the 100 Hz digit (within a few hundredths of a bin)
    assert re.search(r" 434\.043[45] MHz ", out)
