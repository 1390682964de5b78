"""Tone-sweep verification: measured gains of the real processor against the predicted response,
closed forms (Hogenauer's CIC response), scipy.signal.freqz and a float64 scipy.signal.upfirdn cascade."""

import json
import math
import pathlib

import numpy as np
import pytest
import scipy.signal
import yaml

from channelizer.errors import ChannelizerError
from channelizer.planning.plan import PLAN_FORMAT, Plan
from channelizer.planning.response import alias_intervals, composite_response, fold
from channelizer.planning.stages import CicStage, ResamplerStage
from channelizer.checks.verify import ToneMeasurement, Verification, verify_plan
from channelizer.views.verify_plot import plot_verification

PLANS = pathlib.Path(__file__).resolve().parent.parent / "plans"
RELAY = "relay-voice-2m4-to-48k.yaml"
WIDEBAND = "wideband-61m44-200k.yaml"
RATIONAL = "narrow-61m44-to-25k-rational.yaml"

PASSBAND_TOL_DB = 0.02  # the brief's agreement in the passband
ALIAS_TOL_DB = 1.0  # ... and in the alias bands
ALIAS_DEPTH_DB = 100.0  # tones predicted deeper than this below 0 Hz are not compared


def _load(name):
    return Plan.from_yaml((PLANS / name).read_text(), source=name)


@pytest.fixture(scope="module")
def relay():
    return _load(RELAY)


@pytest.fixture(scope="module")
def relay_result(relay):
    return verify_plan(relay)


@pytest.fixture(scope="module")
def wideband_result():
    return verify_plan(_load(WIDEBAND))


def _plan(stages, *, input_rate, output_rate, bandwidth, ripple=0.1, rejection=80.0):
    return Plan.from_dict(
        {
            "format": PLAN_FORMAT,
            "input_rate": input_rate,
            "output_rate": output_rate,
            "bandwidth": bandwidth,
            "spec": {"ripple_db": ripple, "rejection_db": rejection, "bits": {"input": 16, "output": 16}},
            "stages": stages,
            "predicted": {"passband_ripple_db": 0.0, "alias_rejection_db": 0.0, "multiplies_per_input_sample": 0.0},
        }
    )


def _compared(v):
    """Alias tones within ALIAS_DEPTH_DB of the predicted gain at 0 Hz."""
    dc = next(t.predicted_db for t in v.passband if t.input_hz == 0.0)
    return [t for t in v.aliases if t.predicted_db >= dc - ALIAS_DEPTH_DB]


# ----------------------------------------------------------------------------- example plans
@pytest.mark.parametrize("name", [RELAY, WIDEBAND])
def test_example_plan_measured_agrees_with_predicted(name, relay_result, wideband_result):
    # Outside reference: the processor's own output, measured, against the response the
    # plan predicts from the noble identities (Oppenheim & Schafer 2010, sec. 4.7).
    v = relay_result if name == RELAY else wideband_result
    plan = _load(name)
    assert isinstance(v, Verification) and all(isinstance(t, ToneMeasurement) for t in v.tones)
    assert len(v.passband) >= 17 and len(v.aliases) == 200
    for t in v.passband:
        assert abs(t.measured_db - t.predicted_db) <= PASSBAND_TOL_DB, t
    compared = _compared(v)
    assert len(compared) >= 5  # the sweep reaches the bands that matter
    for t in compared:
        assert abs(t.measured_db - t.predicted_db) <= ALIAS_TOL_DB, t
    # the figures agree with the plan file's predictions, and the plan meets its spec
    assert v.measured_ripple_db == pytest.approx(plan.predicted["passband_ripple_db"], abs=PASSBAND_TOL_DB)
    assert v.measured_rejection_db == pytest.approx(plan.predicted["alias_rejection_db"], abs=ALIAS_TOL_DB)
    assert v.measured_rejection_db == pytest.approx(v.predicted_rejection_at_tones_db, abs=ALIAS_TOL_DB)
    assert v.meets_spec and not v.floor_limited
    assert v.max_passband_error_db <= PASSBAND_TOL_DB


def test_worst_alias_of_every_band_is_swept(relay, relay_result):
    # Naive reference: a brute-force scan of every folding band on a fine grid.
    fs = relay.input_rate
    intervals = alias_intervals(relay.stages, fs=fs, bandwidth=relay.bandwidth)
    assert relay_result.alias_bands == relay_result.alias_bands_tested == len(intervals)
    brute = max(
        np.abs(composite_response(relay.stages, np.linspace(lo, hi, 20001), fs=fs, image=k)).max()
        for lo, hi, k in intervals
    )
    swept = max(t.predicted_db for t in relay_result.aliases)
    assert swept >= 20 * math.log10(brute) - 1e-3
    # one band-worst tone per band, landing inside the passband (fold: O&S sec. 4.6)
    worst = [t for t in relay_result.aliases if t.band_worst]
    assert len(worst) == len(intervals)
    fp = relay.bandwidth / 2
    for t in relay_result.aliases:
        assert abs(t.landing_hz) <= fp * (1 + 1e-9)
        assert t.landing_hz == pytest.approx(float(fold(t.input_hz, relay.output_rate)), abs=1e-6)


def test_rational_plan_image_paths():
    # Behind a rational stage every image path k lands at fold(f + k fs_r, fs_out) with gain
    # H_k / L (Oppenheim & Schafer 2010, sec. 4.6.2 for the up-sampler's images).
    plan = _load(RATIONAL)
    v = verify_plan(plan, tones=24)
    assert {t.image for t in v.aliases} >= {1, 2, 3, 4}
    for t in v.passband:
        assert abs(t.measured_db - t.predicted_db) <= PASSBAND_TOL_DB, t
    compared = _compared(v)
    assert len(compared) >= 5
    for t in compared:
        assert abs(t.measured_db - t.predicted_db) <= ALIAS_TOL_DB, t
    assert v.meets_spec == (v.measured_rejection_db >= 90.0 and v.measured_ripple_db <= 0.1)

    # Outside reference: the same tones through a float64 scipy.signal.upfirdn cascade,
    # each path's amplitude by projection on its landing exponential.  The paths land
    # fs_out / 5 apart, so over 250 samples the projections are orthogonal (exact DFT bins).
    fs, fs_out = plan.input_rate, plan.output_rate
    fs_r = fs_out * 6 / 5
    picks = [max(v.passband, key=lambda t: t.predicted_db)] + sorted(compared, key=lambda t: -t.predicted_db)[:2]
    for t in picks:
        n_in = int(400 * fs / fs_out)
        x = np.exp(2j * np.pi * np.mod(t.input_hz / fs * np.arange(n_in), 1.0))
        for st in plan.stages:
            if isinstance(st, CicStage):
                x = scipy.signal.upfirdn(st.taps(), x, 1, st.decimation)
            elif isinstance(st, ResamplerStage):
                x = scipy.signal.upfirdn(np.asarray(st.taps), x, st.interpolation, st.decimation)
            else:
                x = scipy.signal.upfirdn(np.asarray(st.taps), x, 1, st.decimation)
        m = 100 + np.arange(250)
        land = float(fold(t.input_hz + t.image * fs_r, fs_out))
        a = np.mean(x[m] * np.exp(-2j * np.pi * land * m / fs_out))
        assert t.measured_db == pytest.approx(20 * np.log10(abs(a)), abs=0.05), t


# ----------------------------------------------------------------------------- closed forms
def test_fir_alone_against_freqz():
    # Outside reference: scipy.signal.freqz of the stage's taps, evaluated here.
    fs, dec = 1.0e6, 4
    taps = scipy.signal.remez(63, [0, 50e3, 100e3, fs / 2], [1, 0], weight=[1, 10], fs=fs)
    plan = _plan([{"kind": "fir", "role": "channel", "decimation": dec, "taps": [float(h) for h in taps]}],
                 input_rate=fs, output_rate=fs / dec, bandwidth=100e3, ripple=1.0, rejection=40.0)
    # spot check of the composite response of one FIR stage
    f0 = np.array([12_345.0, 170_000.0, -333_333.0])
    _, h0 = scipy.signal.freqz(taps, worN=f0, fs=fs)
    np.testing.assert_allclose(composite_response(plan.stages, f0, fs=fs), h0, rtol=1e-12, atol=1e-15)
    v = verify_plan(plan, tones=40)
    _, h = scipy.signal.freqz(taps, worN=np.array([t.input_hz for t in v.tones]), fs=fs)
    ref = 20 * np.log10(np.abs(h))
    assert len(v.aliases) == 40
    for t, r in zip(v.tones, ref):
        if t.band == "passband":
            assert t.measured_db == pytest.approx(r, abs=1e-3), t
        elif r > -100:
            assert t.measured_db == pytest.approx(r, abs=ALIAS_TOL_DB), t


def test_cic_alone_matches_hogenauer():
    # Hogenauer 1981: |H(f)| = |sin(pi M f) / (R M sin(pi f / R))|^N, f in cycles per output
    # sample.  Derived values (methods sheet): N=5, R=16, passband edge f = 1/8 droops
    # -1.1177 dB; the first alias band's near edge (f = 1 - 1/8) is 85.42 dB down.
    fs_out = 100e3
    plan = _plan([{"kind": "cic", "decimation": 16, "order": 5, "differential_delay": 1, "register_bits": 36}],
                 input_rate=16 * fs_out, output_rate=fs_out, bandwidth=fs_out / 4, ripple=2.0, rejection=85.0)
    v = verify_plan(plan)
    edge = [t for t in v.passband if abs(t.input_hz) == fs_out / 8]
    assert len(edge) == 2
    for t in edge:
        assert t.measured_db == pytest.approx(-1.1177, abs=1e-3)
    assert v.measured_ripple_db == pytest.approx(1.1177, abs=1e-3)
    assert v.measured_rejection_db == pytest.approx(85.42, abs=0.01)
    assert abs(v.worst_alias_hz) == pytest.approx(0.875 * fs_out, rel=1e-6)
    assert v.meets_spec


# ----------------------------------------------------------------------------- catching a bad plan
def _weakened(name):
    """The plan with its FIR stage's taps cut to the middle third; predictions left as they were."""
    data = yaml.safe_load((PLANS / name).read_text())
    fir = next(s for s in data["stages"] if s["kind"] == "fir")
    n = len(fir["taps"])
    fir["taps"] = fir["taps"][n // 3 : n - n // 3]
    return Plan.from_yaml(yaml.safe_dump(data, sort_keys=False), source=f"weakened {name}")


@pytest.mark.parametrize("name", [RELAY, WIDEBAND])
def test_weakened_plan_is_caught(name):
    plan = _weakened(name)
    v = verify_plan(plan, tones=60)
    assert not v.meets_spec
    assert v.measured_rejection_db < plan.spec["rejection_db"] or v.measured_ripple_db > plan.spec["ripple_db"]
    # the plan file still claims the old figures; the measurement does not
    assert v.plan_predicted["alias_rejection_db"] - v.measured_rejection_db > 3.0


# ----------------------------------------------------------------------------- bit-true
def test_bit_true_agrees_within_its_floor(relay):
    pytest.importorskip("channelizer.engines.integer_chain")
    v = verify_plan(relay, bit_true=True, tones=60)
    assert v.bit_true and v.amplitude == pytest.approx(0.5, abs=1e-4)
    for t in v.passband:
        assert abs(t.measured_db - t.predicted_db) <= PASSBAND_TOL_DB, t
    # The fit's standard error is the floor (1 sigma); allow 5 sigma of amplitude error.
    resolved = [t for t in v.aliases if t.predicted_db > t.floor_db + 10.0]
    assert resolved
    for t in resolved:
        tol = 20 * math.log10(1 + 5 * 10 ** ((t.floor_db - t.predicted_db) / 20)) + 0.05
        assert abs(t.measured_db - t.predicted_db) <= tol, t
    # a 16-bit output ends the resolution: one LSB is about 90 dB below a half-scale tone
    assert all(-115.0 < t.floor_db < -95.0 for t in v.aliases if abs(t.landing_hz) > 1e3)


def test_bit_true_holds_registers_wider_than_64_bits():
    # the rational example's CIC/1024 needs registers beyond int64 (Hogenauer 1981:
    # B_in + N log2(R M)); the integer model now holds them (multi-word arithmetic)
    integer_chain = pytest.importorskip("channelizer.engines.integer_chain")
    chain = integer_chain.IntegerChain.from_plan(_load(RATIONAL))
    cic = chain.widths["stage1_cic"]
    assert max(cic.integrator_bits) > 64
    x = np.zeros((1024 * 300, 2), np.int64)
    x[:, 0] = 2**14
    y = chain.process(x) * chain.output_scale
    assert abs(y[-1, 0] - 0.5) < 1e-3  # unit DC gain (DEVELOPERS.md)


# ----------------------------------------------------------------------------- results and figure
def test_json_is_strict_and_complete(relay_result):
    d = json.loads(relay_result.to_json())
    assert d["format"] == "channelizer-verification/1"
    assert len(d["tones"]) == len(relay_result.tones)
    assert set(d["tones"][0]) == {"input_hz", "image", "landing_hz", "band", "predicted_db", "measured_db",
                                  "floor_db", "band_worst"}
    for key in ("measured_ripple_db", "measured_rejection_db", "worst_alias_hz", "predicted_ripple_db",
                "predicted_rejection_db", "meets_spec", "spec_ripple_db", "spec_rejection_db"):
        assert key in d
    assert d["meets_spec"] is True and len(d["plan_sha256"]) == 64


def test_no_folding_band_gives_infinite_rejection_as_null():
    taps = scipy.signal.firwin(31, 0.2, fs=1.0)
    plan = _plan([{"kind": "fir", "role": "channel", "decimation": 1, "taps": [float(h) for h in taps]}],
                 input_rate=1e6, output_rate=1e6, bandwidth=100e3, ripple=1.0)
    v = verify_plan(plan)
    assert v.aliases == () and math.isinf(v.measured_rejection_db)
    d = json.loads(v.to_json())  # allow_nan=False would raise on inf
    assert d["measured_rejection_db"] is None and d["worst_alias_hz"] is None


def test_same_seed_same_result(relay, relay_result):
    assert verify_plan(relay, seed=0).to_json() == relay_result.to_json()


def test_plot_writes_png(tmp_path, relay, relay_result):
    for i, p in enumerate((relay, None)):
        out = tmp_path / f"v{i}.png"
        plot_verification(relay_result, out, plan=p)
        assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert [q.name for q in tmp_path.iterdir()] and not list(tmp_path.glob(".*part"))


@pytest.mark.parametrize(
    "kwargs, word",
    [({"tones": 0}, "tones"), ({"tones": True}, "tones"), ({"tones": "10"}, "tones"),
     ({"bit_true": "yes"}, "bit_true"), ({"seed": -1}, "seed"), ({"fit_samples": 4}, "fit_samples"),
     ({"amplitude": 1.5}, "amplitude")],
)
def test_bad_arguments_name_the_parameter(relay, kwargs, word):
    with pytest.raises(ChannelizerError, match=word):
        verify_plan(relay, **kwargs)


def test_not_a_plan_is_refused():
    with pytest.raises(ChannelizerError, match="plan"):
        verify_plan(str(PLANS / RELAY))
