"""Bank planning: the raster, the plan file, predicted figures against scipy.signal.freqz."""

import numpy as np
import pytest
import scipy.signal
import yaml

from channelizer.errors import ChannelizerError
from channelizer.planning.bank import BankPlan
from channelizer.planning.bank_planner import BankSpec, plan_bank, raster_offsets
from channelizer.planning.plan import Plan

FS = 2.4e6


@pytest.fixture(scope="module")
def small():
    """Five 10 kHz channels every 12.5 kHz from +100 kHz (quick to plan)."""
    return plan_bank(BankSpec(input_rate=FS, bandwidth=10e3, spacing=12.5e3, first=100e3, last=150e3))


def test_default_raster_is_every_channel_that_fits():
    # centres i * 12.5k with |i * 12.5k| + 5k <= 1.2M: |i| <= 95, so 191 channels (common practice)
    off = raster_offsets(BankSpec(input_rate=FS, bandwidth=10e3, spacing=12.5e3))
    assert len(off) == 191 and off[0] == -95 * 12.5e3 and off[-1] == 95 * 12.5e3
    assert raster_offsets(BankSpec(input_rate=FS, bandwidth=10e3, spacing=12.5e3, first=-50e3, last=0.0)) == [
        -50e3, -37.5e3, -25e3, -12.5e3, 0.0]


@pytest.mark.parametrize(
    "kw,msg",
    [
        (dict(bandwidth=15e3, spacing=12.5e3), "overlap"),
        (dict(bandwidth=10e3, spacing=12.5e3, first=1.197e6), "leaves the captured band"),
        (dict(bandwidth=10e3, spacing=12.5e3, first=100e3, last=50e3), "below first"),
    ],
)
def test_impossible_rasters_are_refused(kw, msg):
    with pytest.raises(ChannelizerError, match=msg):
        BankSpec(input_rate=FS, **kw)


def test_plan_holds_the_raster_on_bin_centres(small):
    plan = small.plan
    assert isinstance(plan, BankPlan) and plan.count == 5
    assert len(plan.prototype) % plan.bins == 0 and plan.bins % plan.oversampling == 0
    # each channel on the bin nearest its offset: bin k centred on k fs / M (common practice)
    for off, k in zip(plan.offsets(), plan.channel_bins):
        assert k == round(off * plan.bins / FS) % plan.bins
    assert max(abs(r) for r in plan.residuals()) < 1e-6
    assert plan.output_rate >= 1.25 * plan.bandwidth


def test_plan_round_trips_through_yaml(small):
    text = small.plan.to_yaml()
    again = BankPlan.from_yaml(text, source="b.yaml")
    assert again == small.plan
    assert again.to_yaml() == text


def _mutated(plan, change):
    data = yaml.safe_load(plan.to_yaml())
    change(data)
    return yaml.safe_dump(data)


@pytest.mark.parametrize(
    "change,msg",
    [
        (lambda d: d["channel_bins"].pop(), "channel_bins"),
        (lambda d: d["bank"]["prototype"].pop(), "not a multiple of bank.bins"),
        (lambda d: d["bank"].update(oversampling=7), "does not divide"),
        (lambda d: d["raster"].update(first="1e5"), "raster.first"),
        (lambda d: d.update(output_rate=12345.0), "output_rate"),
        (lambda d: d["channel_bins"].__setitem__(0, 3), "from its bin centre"),
    ],
)
def test_bad_bank_files_name_the_field(small, change, msg):
    with pytest.raises(ChannelizerError, match=msg) as err:
        BankPlan.from_yaml(_mutated(small.plan, change), source="b.yaml")
    assert str(err.value).startswith("b.yaml: ")


def test_chain_commands_name_a_bank_plan(small):
    with pytest.raises(ChannelizerError, match="filter-bank plan"):
        Plan.from_yaml(small.plan.to_yaml(), source="b.yaml")


def test_predicted_rejection_matches_freqz_of_the_prototype():
    # the whole raster, bank chosen with no fine stage: the channel's path is the
    # prototype alone; its alias bands are j fs_out +- bw/2 (j != 0) and its
    # neighbours' passbands +-12.5k +- 5k; attenuation from scipy.signal.freqz
    result = plan_bank(BankSpec(input_rate=FS, bandwidth=10e3, spacing=12.5e3))
    plan = result.plan
    assert isinstance(plan, BankPlan)
    fs_out = plan.output_rate
    f = []
    for j in range(1, int(FS / 2 / fs_out) + 1):
        f += list(np.linspace(j * fs_out - 5e3, min(j * fs_out + 5e3, FS / 2), 200))
    f = np.array(f)
    _, h = scipy.signal.freqz(plan.prototype, worN=f, fs=FS)
    _, dc = scipy.signal.freqz(plan.prototype, worN=[0.0], fs=FS)
    att = -20 * np.log10(np.abs(h) / abs(dc[0]))
    if plan.stages:
        pytest.skip("fine stages planned; this check covers the prototype-only path")
    assert att.min() >= 80.0
    assert abs(att.min() - plan.predicted["alias_rejection_db"]) < 1.0
    assert plan.predicted["adjacent_rejection_db"] >= 80.0


def test_one_channel_is_cheaper_as_a_chain():
    result = plan_bank(BankSpec(input_rate=FS, bandwidth=10e3, spacing=12.5e3, first=0.0, last=0.0))
    assert isinstance(result.plan, Plan)
    assert "chosen" in result.chosen.reason
    assert any("chosen against" in c.reason for c in result.alternatives)


def test_bank_cost_counts_the_engine_s_fft_path():
    # written from the description of bank_multiplies and fft_frame: frames of N = 256
    # rows (the power of two nearest 8 K O = 216), S = 230 new rows; per input sample (N / S) (log2 N + 2 O
    # + O log2 D + kept log2 N / D), an n-point FFT counted as n log2 n multiplies (Crochiere &
    # Rabiner 1983, ch. 7, for the DFT count; from memory); with O = 1 the shift is a roll, no
    # phase product; with O > 1 a complex product per kept output, 2 kept / D
    from channelizer.planning.bank import bank_multiplies

    M, O, K, kept = 192, 1, 27, 5
    D = M // O
    expect = 256 / 230 * (8 + 2 * O + O * np.log2(D) + kept * 8 / D)
    assert bank_multiplies(K, M, O, kept) == pytest.approx(expect, rel=1e-12)
    # O = 2: 8 K O = 432, whose nearest power of two on a log scale is 512; S the multiple of O
    # up to N - K O + 1 = 459, so 458; D = 96
    N2, S2 = 512, 458
    expect2 = N2 / S2 * (np.log2(N2) + 4 + 2 * np.log2(96) + kept * np.log2(N2) / 96) + 2 * kept / 96
    assert bank_multiplies(K, M, 2, kept) == pytest.approx(expect2, rel=1e-12)
    # short prototypes on few bins run by element-wise passes: K O + M log2 M / D + phase
    assert bank_multiplies(3, 16, 2, 16) == pytest.approx(6 + 16 * 4 / 8 + 2 * 16 / 8, rel=1e-12)
    # the FFT path's count hardly grows with the prototype: twice K adds under a fifth
    assert bank_multiplies(2 * K, M, O, M) < 1.2 * bank_multiplies(K, M, O, M)
    # the planner costs the bank so: five channels of the raster, bins 0..4 of 192 kept
    result = plan_bank(BankSpec(input_rate=FS, bandwidth=10e3, spacing=12.5e3, first=0.0, last=50e3))
    plan = result.plan
    assert isinstance(plan, BankPlan) and (plan.bins, plan.oversampling) == (M, O)
    K = len(plan.prototype) // M
    N = max(64, 2 ** int(np.round(np.log2(8 * K * O))))
    S = N - K * O + 1
    want = N / S * (np.log2(N) + 2 * O + O * np.log2(D) + 5 * np.log2(N) / D)
    assert plan.predicted["bank_multiplies_per_input_sample"] == pytest.approx(want, abs=1e-5)
