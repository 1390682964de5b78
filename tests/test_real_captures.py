"""The tool on three real recordings nobody here made (../shared/real-captures, see its
SOURCES.md); skipped where that folder is missing.  The recordings are never copied here.

For each: the extracted channel equals an independent model (mix + scipy.signal.upfirdn,
tests/chain_reference.py), and one fact of the trade, checked by code written here from
the published standard, survives the extraction:

- LF time code at 77.5 kHz (PTB's DCF77 time-code format): the carrier is keyed down at
  the start of every second, for 0.1 s or 0.2 s;
- GNSS L1 (IS-GPS-200, section 3.2.1.3 and Table 3-Ia): a C/A code of 1023 chips at
  1.023 Mchip/s repeating every 1 ms is found in the channel, on the satellite found in
  the source, at a code phase moved by the chain's delay;
- analog video (ITU-R BT.470, system M): after FM demodulation the line rate, 15 734.264 Hz,
  is the strongest line near 15.7 kHz.

A whole raster of channels through the filter bank equals the same kind of model, channel
by channel (tests/chain_reference.py, from the bank's description).  Cut into chunks on two
dask workers, a recording's channel is the one-process channel bit for bit.
"""

from pathlib import Path

import numpy as np
import pytest

from chain_reference import reference_bank_channel, reference_chain
from channelizer.checks.survey import survey_capture
from channelizer.io.captures import open_capture
from channelizer.io.channels import ChannelEntry
from channelizer.planning.bank import BankPlan
from channelizer.planning.bank_planner import BankSpec, plan_bank
from channelizer.planning.planner import plan_chain
from channelizer.planning.spec import ChainSpec
from channelizer.run.bank_extraction import run_bank_extraction
from channelizer.run.extraction import run_extraction
from channelizer.run.timing import channel_timing

_ROOT = Path(__file__).resolve().parents[1]
_CANDIDATES = [_ROOT.parent / "shared" / "real-captures", _ROOT.parent.parent / "shared" / "real-captures"]
REAL = next((p for p in _CANDIDATES if (p / "SOURCES.md").is_file()), None)

pytestmark = pytest.mark.skipif(REAL is None, reason="../shared/real-captures is not here")


def _extract(name, tmp_path, *, bandwidth, output_rate=None, freq=0.0):
    """Plan, extract one channel at ``freq`` (offset, Hz), check it against the model, return it."""
    cap = open_capture(str(REAL / f"{name}.sigmf-meta"))
    plan = plan_chain(ChainSpec(input_rate=cap.sample_rate, bandwidth=bandwidth, output_rate=output_rate)).plan
    path = tmp_path / "plan.yaml"
    path.write_text(plan.to_yaml())
    run_extraction(cap, [ChannelEntry("ch", freq, True)], str(tmp_path / "out"), plan_path=str(path), plots=False)
    y = np.fromfile(tmp_path / "out" / "ch.sigmf-data", dtype="<c8")
    x = cap.read(0, cap.num_samples)
    ref = reference_chain(plan, x, freq, fs=cap.sample_rate)
    assert len(y) == len(ref)
    err = np.sqrt(np.mean(np.abs(y - ref) ** 2) / np.mean(np.abs(ref) ** 2))
    assert err < 1e-5  # float32 storage of a float64 model
    return cap, plan, x, y.astype(np.complex128)


def test_lf_time_code_second_marks(tmp_path):
    cap, plan, _, y = _extract("lf-timecode-77k5", tmp_path, bandwidth=400.0)
    fs = plan.output_rate
    skip = channel_timing(plan.stages, fs=cap.sample_rate).settling
    env = np.convolve(np.abs(y[skip:]), np.ones(5) / 5, mode="same")
    low = env < 0.5 * np.median(env)  # DCF77 keys the carrier down to about 15 %
    starts = (np.flatnonzero(low[1:] & ~low[:-1]) + 1) / fs
    ends = (np.flatnonzero(~low[1:] & low[:-1]) + 1) / fs
    # marks one second apart: the start times, taken modulo 1 s, agree to 5 ms for almost all
    wrapped = lambda t: (t + 0.5) % 1.0 - 0.5  # noqa: E731  (offset from the nearest whole second)
    ref = starts[0] + np.median(wrapped(starts - starts[0]))
    dev = np.abs(wrapped(starts - ref))
    on_grid = starts[dev < 0.005]
    assert len(on_grid) >= 0.9 * (len(y) - skip) / fs - 2  # 30 s: a mark each second, less the 59th
    # each such mark lasts 0.1 s (bit 0) or 0.2 s (bit 1), to 30 ms
    lengths = np.array([ends[ends > s][0] - s for s in on_grid if np.any(ends > s)])
    near = np.minimum(np.abs(lengths - 0.1), np.abs(lengths - 0.2))
    assert np.mean(near < 0.03) >= 0.9
    assert np.any(np.abs(lengths - 0.1) < 0.03) and np.any(np.abs(lengths - 0.2) < 0.03)


def test_lf_carrier_reads_77_5_khz_to_a_fraction_of_a_bin():
    # the station's published carrier, 77.5 kHz (PTB)
    result = survey_capture(open_capture(str(REAL / "lf-timecode-77k5.sigmf-meta")))
    assert len(result.signals) == 1
    (sig,) = result.signals
    assert sig.carrier and abs(sig.center_hz - 77.5e3) < 0.25 * result.psd.bin_hz


# IS-GPS-200 Table 3-Ia: the two G2 taps of each PRN's code phase selection
_G2_TAPS = {
    1: (2, 6), 2: (3, 7), 3: (4, 8), 4: (5, 9), 5: (1, 9), 6: (2, 10), 7: (1, 8), 8: (2, 9),
    9: (3, 10), 10: (2, 3), 11: (3, 4), 12: (5, 6), 13: (6, 7), 14: (7, 8), 15: (8, 9), 16: (9, 10),
    17: (1, 4), 18: (2, 5), 19: (3, 6), 20: (4, 7), 21: (5, 8), 22: (6, 9), 23: (1, 3), 24: (4, 6),
    25: (5, 7), 26: (6, 8), 27: (7, 9), 28: (8, 10), 29: (1, 6), 30: (2, 7), 31: (3, 8), 32: (4, 9),
}


def ca_code(prn):
    """The 1023 chips (0/1) of a C/A code: G1 = 1 + x^3 + x^10, G2 = 1 + x^2 + x^3 + x^6 + x^8 + x^9 + x^10,
    both registers all ones at the start (IS-GPS-200, 3.3.2.3)."""
    g1, g2 = [1] * 10, [1] * 10
    a, b = _G2_TAPS[prn]
    out = []
    for _ in range(1023):
        out.append(g1[9] ^ g2[a - 1] ^ g2[b - 1])
        g1 = [g1[2] ^ g1[9]] + g1[:9]
        g2 = [g2[1] ^ g2[2] ^ g2[5] ^ g2[7] ^ g2[8] ^ g2[9]] + g2[:9]
    return np.array(out)


def test_ca_code_generator_matches_the_standard_table():
    # IS-GPS-200 Table 3-Ia, "first 10 chips" in octal for PRN 1-4 (from memory)
    first = {p: int("".join(map(str, ca_code(p)[:10])), 2) for p in (1, 2, 3, 4)}
    assert first == {1: 0o1440, 2: 0o1620, 3: 0o1710, 4: 0o1744}


def _acquire(x, fs, prns=range(1, 33)):
    """Best (peak / mean, prn, Doppler Hz, code phase in samples) over PRNs, Doppler +-6 kHz
    in 250 Hz steps: 1 ms coherent FFT correlation, summed without phase over the record."""
    n = int(round(fs * 1e-3))
    k = len(x) // n
    blocks = x[: k * n].reshape(k, n)
    t = np.arange(n)
    dopplers = np.arange(-6000, 6001, 250)
    mixed = [np.fft.fft(blocks * np.exp(-2j * np.pi * fd * t / fs), axis=1) for fd in dopplers]
    best = []
    for prn in prns:
        chips = (t * 1.023e6 / fs).astype(int) % 1023  # 1.023 Mchip/s, 1 ms period
        replica = np.conj(np.fft.fft(1.0 - 2.0 * ca_code(prn)[chips]))
        grid = np.array([np.sum(np.abs(np.fft.ifft(m * replica, axis=1)) ** 2, axis=0) for m in mixed])
        i, j = np.unravel_index(np.argmax(grid), grid.shape)
        best.append((grid[i, j] / grid.mean(), prn, int(dopplers[i]), int(j)))
    return max(best)


def test_gnss_ca_code_survives_extraction(tmp_path):
    cap, plan, x, y = _extract("gnss-l1-4m", tmp_path, bandwidth=1.6e6, output_rate=2e6)
    ratio_src, prn, doppler, phase_src = _acquire(x.astype(np.complex128), cap.sample_rate)
    # noise alone: the largest of ~10^5 cells, each a mean of 9 chi-square(2) terms, is a few times the mean
    assert ratio_src > 15
    ratio, prn_out, doppler_out, phase = _acquire(y, plan.output_rate, prns=[prn])
    assert (prn_out, doppler_out) == (prn, doppler) and ratio > 15
    # the code phase moves by the chain's group delay (source samples / step)
    t = channel_timing(plan.stages, fs=cap.sample_rate)
    want = ((phase_src + t.group_delay_source) / float(t.step)) % (plan.output_rate * 1e-3)
    assert abs((phase - want + 1000) % 2000 - 1000) <= 1


def test_analog_video_line_rate_survives_extraction(tmp_path):
    cap, plan, _, y = _extract("analog-video-10m", tmp_path, bandwidth=3.6e6)
    fs = plan.output_rate
    f_dev = np.angle(y[1:] * np.conj(y[:-1]))  # FM discriminator
    f_dev -= f_dev.mean()
    spec = np.abs(np.fft.rfft(f_dev * np.hanning(f_dev.size))) ** 2
    f = np.fft.rfftfreq(f_dev.size, 1 / fs)
    band = (f > 14e3) & (f < 17e3)
    peak = f[band][np.argmax(spec[band])]
    bin_hz = fs / f_dev.size
    # system M line rate 4.5 MHz / 286 = 15 734.264 Hz (ITU-R BT.470)
    assert abs(peak - 4.5e6 / 286) <= 1.5 * bin_hz
    assert spec[band].max() > 100 * np.median(spec[band])


def test_video_link_is_one_signal_in_the_survey():
    # one FM video carrier (ITU-R BT.470 signal on an FM link): one emission, not its fragments
    result = survey_capture(open_capture(str(REAL / "analog-video-10m.sigmf-meta")))
    assert len(result.signals) == 1
    assert result.unscaled  # floats in the hundreds (SOURCES.md: unscaled ADC counts)


@pytest.mark.parametrize("name,bandwidth,spacing,output_rate", [
    ("analog-video-10m", 160e3, 200e3, 250e3),  # 200 bins, oversampled by 5
    ("analog-video-10m", 100e3, 200e3, 125e3),  # a rational stage after each bin
    ("gnss-l1-4m", 150e3, 250e3, 200e3),
])
def test_bank_raster_equals_the_model(tmp_path, name, bandwidth, spacing, output_rate):
    # every raster channel of a real recording through the bank (the compiled branch sums
    # where numba is installed, the numpy paths otherwise) against mixing plus upfirdn
    cap = open_capture(str(REAL / f"{name}.sigmf-meta"))
    plan = plan_bank(BankSpec(input_rate=cap.sample_rate, bandwidth=bandwidth, spacing=spacing, output_rate=output_rate)).plan
    assert isinstance(plan, BankPlan)
    path = tmp_path / "bank.yaml"
    path.write_text(plan.to_yaml())
    result = run_bank_extraction(cap, plan, str(tmp_path / "out"), plan_source=str(path), plots=False)
    assert len(result.channels) == plan.count
    x = cap.read(0, cap.num_samples)
    scale = np.sqrt(np.mean(np.abs(x) ** 2))
    for i, ch in enumerate(result.channels):
        y = np.fromfile(tmp_path / "out" / f"{ch.name}.sigmf-data", dtype="<c8")
        ref = reference_bank_channel(plan, x, i)
        assert len(y) == len(ref) > 0
        # float32 arithmetic on the whole band: errors scale with the input, not the channel
        # (a quiet channel shares the bank's rounding with the loud ones; common practice)
        assert np.max(np.abs(y - ref)) < 3e-6 * scale, ch.name  # seen: 2e-7 to 3e-7


@pytest.mark.parametrize("name,bandwidth,freq,bit_true", [
    ("lf-timecode-77k5", 400.0, 0.0, False),
    ("lf-timecode-77k5", 400.0, 0.0, True),  # ci16: the integer chain, CIC registers handed on
    ("analog-video-10m", 1.6e6, -1.25e6, False),
])
def test_two_dask_workers_give_the_one_process_recording(tmp_path, name, bandwidth, freq, bit_true):
    # the chunked-filtering rule of methods.md: chunks on the chain's period, each after a
    # pre-roll that fills every stage's memory, give the single pass's samples; the
    # recording is cut into chunks of whole blocks, a block being an eighth of it or so (two
    # chunks of four blocks each on two workers: one chunk boundary, one pre-roll)
    pytest.importorskip("distributed")
    from channelizer.run.chunks import aligned_block_size

    cap = open_capture(str(REAL / f"{name}.sigmf-meta"))
    plan = plan_chain(ChainSpec(input_rate=cap.sample_rate, bandwidth=bandwidth)).plan
    path = tmp_path / "plan.yaml"
    path.write_text(plan.to_yaml())
    block = aligned_block_size([plan.stages], cap.num_samples // 8)
    assert cap.num_samples >= 4 * block
    out = {}
    for where, extra in (("one", {}), ("two", {"workers": 2})):
        run_extraction(open_capture(str(REAL / f"{name}.sigmf-meta")), [ChannelEntry("ch", freq, True)],
                       str(tmp_path / where), plan_path=str(path), plots=False, block_size=block, bit_true=bit_true,
                       **extra)
        out[where] = np.fromfile(tmp_path / where / "ch.sigmf-data", dtype="<c8")
    assert out["one"].size == out["two"].size > 0
    np.testing.assert_array_equal(out["two"], out["one"])  # bit for bit, float and integer chains
