"""Plain decimation (the "before" of the report): keeping x[nD] folds a tone at f onto
f mod fs/D at its full level (the down-sampler's aliasing, common practice)."""

import math

import numpy as np
import pytest

from channelizer.checks.plain_decimation import plain_decimation_psd
from channelizer.dsp.spectrum import tone_power_dbfs
from channelizer.io.captures import open_capture
from channelizer.io.sigmf_writer import write_sigmf
from channelizer.views.before_after import plot_before_after


def test_a_neighbour_folds_in_at_full_level(tmp_path):
    fs, d, n = 1.0e6, 20, 1 << 18
    offset = 100e3
    f_tone = offset + 3 * fs / d + 1.5e3  # three output bands away: folds onto +1.5 kHz
    t = np.arange(n)
    x = 0.25 * np.exp(2j * np.pi * f_tone * t / fs)
    base = str(tmp_path / "c")
    write_sigmf(base, x.astype(np.complex64), datatype="cf32_le", fs=fs, center_frequency=50e6)
    cap = open_capture(base + ".sigmf-meta")
    psd = plain_decimation_psd(cap, offset=offset, decimation=d, nperseg=1024, block_size=50_001)
    assert psd.fs == pytest.approx(fs / d)
    peak = psd.freqs[np.argmax(psd.psd)] - psd.center_frequency
    assert peak == pytest.approx(1.5e3, abs=psd.bin_hz)
    assert tone_power_dbfs(psd, psd.center_frequency + 1.5e3) == pytest.approx(20 * math.log10(0.25), abs=0.3)
    plot_before_after(psd, psd, name="c", bandwidth=10e3, decimation=d, path=tmp_path / "ba.png")
    assert (tmp_path / "ba.png").stat().st_size > 10_000
