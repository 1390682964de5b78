"""Properties over random inputs (hypothesis).

- Plan files round-trip: any valid plan, written and read back, is the same plan and
  the same text (the plan file is the complete description of a chain; DEVELOPERS.md).
  Floats cover tiny (subnormal) and huge magnitudes: YAML 1.1 as PyYAML reads it needs
  ``1.0e+300``, not ``1e300`` (PyYAML resolver, from memory), so the writer's choice of
  text is what is tested.
- The extract output does not depend on the block size the capture is read in
  (streaming parity, as librosa's stream tests and scipy's ``sosfilt`` zi tests do it):
  bit for bit on the integer (bit-true) path, to float32 rounding on the float path.
- The capture readers never fail other than by ChannelizerError on damaged files.
  test_captures.py already throws random bytes and random JSON at the SigMF reader; here:
  byte-level damage to valid files written by outside writers (the ``sigmf`` library's
  layout via our writer is checked elsewhere; scipy.io.wavfile for WAV), and data files
  of any length against valid metadata (a whole number of samples or a refusal).
"""

import json
import math

import numpy as np
import pytest
import scipy.io.wavfile
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from channelizer.io.captures import open_capture
from channelizer.io.channels import ChannelEntry
from channelizer.errors import ChannelizerError
from channelizer.run.extraction import run_extraction
from channelizer.planning.plan import PLAN_FORMAT, Plan
from channelizer.planning.planner import plan_chain
from channelizer.io.sigmf_writer import write_sigmf
from channelizer.planning.spec import ChainSpec
from channelizer.planning.hogenauer import cic_registers, planned_cic
from channelizer.planning.stages import CicStage, FirStage, ResamplerStage, chain_rates
from channelizer.units import MAX_HZ, MIN_HZ
from channelizer.views.table import format_plan

FIXTURE_OK = settings(deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])

# -- plans ----------------------------------------------------------------------------------------

# finite floats of every size a plan may hold: ordinary, tiny (down to subnormals) and up to
# the +-1e6 a tap may be (plan.MAX_TAP); coefficients up to the 32 bits of a C int32_t
tap_values = st.one_of(
    st.floats(-2.0, 2.0, allow_nan=False),
    st.floats(-1e-300, 1e-300, allow_nan=False, allow_subnormal=True),
    st.floats(-1e6, 1e6, allow_nan=False).filter(lambda x: abs(x) > 1e3),
    st.sampled_from([0.0, -0.0, 5e-324, -5e-324, 1e6, -1e6, 1e-5, 0.1]),
)
taps = st.lists(tap_values, min_size=1, max_size=40).map(tuple)
coefficient_bits = st.one_of(st.just((None, None)), st.tuples(st.integers(2, 32), st.integers(0, 80)))


@st.composite
def halfband_taps(draw):
    """Length 4K-1, centre 0.5, zeros at even offsets from the centre, symmetric."""
    k = draw(st.integers(1, 10))
    odd = draw(st.lists(st.floats(-1.0, 1.0, allow_nan=False), min_size=k, max_size=k))
    half = []
    for x in odd:  # offsets 2K-1, 2K-2, ..., 1 from the centre: odd offsets free, even ones zero
        half += [x, 0.0]
    half = half[:-1]
    return tuple(half + [0.5] + half[::-1])


@st.composite
def cic_stages(draw, bits):
    """A CIC; its widths are set by ``_chain_widths`` once its place in the chain is known."""
    order, dec, m = draw(st.integers(1, 10)), draw(st.integers(2, 64)), draw(st.integers(1, 4))
    pruned = draw(st.sampled_from([(), (0,)]))  # () or a placeholder for the full list
    return CicStage(dec, order, m, 0, pruned)


def _chain_widths(stages, bits):
    """Every CIC with the widths the chain builds where it sits (a plan may state no others)."""
    out = []
    for i, s in enumerate(stages):
        if isinstance(s, CicStage):
            regs = planned_cic(s.order, s.decimation, s.differential_delay, bits=bits,
                               first=i == 0, last=i == len(stages) - 1).nominal
            s = CicStage(s.decimation, s.order, s.differential_delay, regs.full_bits,
                         tuple(regs.discarded) if s.pruned_bits else ())
        out.append(s)
    return out


@st.composite
def fir_stages(draw):
    if draw(st.booleans()):
        b, fb = draw(coefficient_bits)
        return FirStage(2, draw(halfband_taps()), "halfband", "halfband", b, fb)
    b, fb = draw(coefficient_bits)
    return FirStage(draw(st.integers(1, 8)), draw(taps), "fir", draw(st.sampled_from(["compensator", "channel"])), b, fb)


@st.composite
def resampler_stages(draw):
    b, fb = draw(coefficient_bits)
    return ResamplerStage(draw(st.integers(1, 4096)), draw(st.integers(1, 4096)), draw(taps), b, fb)


@st.composite
def plans(draw):
    bits = {"input": draw(st.integers(1, 64)), "output": draw(st.integers(1, 64))}
    stages = draw(st.lists(st.one_of(cic_stages(bits), fir_stages()), min_size=0, max_size=4))
    if not stages or draw(st.booleans()):
        stages.append(draw(resampler_stages()))
    stages = _chain_widths(stages, bits)
    input_rate = draw(st.one_of(st.floats(1e3, 1e11), st.integers(1000, 10**11).map(float)))
    output_rate = chain_rates(stages, fs=input_rate)[-1]
    assume(output_rate > 0)
    bandwidth = output_rate * draw(st.floats(1e-3, 0.999))
    assume(MIN_HZ <= bandwidth < output_rate <= MAX_HZ)  # the rate range of units.MIN_HZ, MAX_HZ
    spec = {
        "ripple_db": draw(st.floats(1e-6, 10.0)),
        "rejection_db": draw(st.floats(1.0, 300.0)),
    }
    if draw(st.booleans()):
        spec["objective"] = draw(st.sampled_from(["cpu", "hardware"]))
    spec["bits"] = bits
    if draw(st.booleans()):
        spec["bits"]["coefficient"] = draw(st.integers(2, 32))
    if draw(st.booleans()):
        spec["clock"] = draw(st.floats(1.0, 1e12))
    predicted = {
        "passband_ripple_db": draw(st.floats(0.0, 10.0)),
        "alias_rejection_db": draw(st.floats(-50.0, 400.0)),
        "multiplies_per_input_sample": draw(st.floats(0.0, 1e6)),
    }
    if draw(st.booleans()):
        spec["stopband_edge"] = draw(st.floats(1.0, 1e9))
        predicted["stopband_rejection_db"] = draw(st.floats(0.0, 300.0))
    predicted.update(draw(st.dictionaries(st.sampled_from(["worst_alias_hz", "coefficients", "multipliers"]), st.integers(-10**6, 10**6) | st.floats(-1e9, 1e9))))
    return Plan(input_rate, output_rate, bandwidth, spec, tuple(stages), predicted)


def test_wide_hogenauer_registers_round_trip():
    # Found by the property below: 60-bit input, N = 9, R = 48, M = 4 needs
    # 60 + ceil(9 log2 192) = 60 + 69 = 129-bit registers (Hogenauer 1981, Bmax; from memory), one
    # more than the plan reader used to accept, so a valid plan could not be read back.
    bits = {"input": 60, "output": 1}
    regs = cic_registers(9, 48, 4, input_bits=60, output_bits=1)
    assert regs.full_bits == 60 + math.ceil(9 * math.log2(48 * 4)) == 129
    # the second CIC takes the chain's intermediate word: output bits + 2 = 3 bits
    plan = Plan(1000.0, 1000.0 / 96, 5.0, {"ripple_db": 1.0, "rejection_db": 1.0, "bits": bits},
                (CicStage(48, 9, 4, regs.full_bits, ()),
                 CicStage(2, 1, 1, cic_registers(1, 2, 1, input_bits=3, output_bits=1).full_bits, ())),
                {"passband_ripple_db": 0.0, "alias_rejection_db": 0.0, "multiplies_per_input_sample": 0.0})
    assert Plan.from_yaml(plan.to_yaml(), source="wide") == plan


@settings(max_examples=120, deadline=None)
@given(plan=plans())
def test_plan_round_trips_through_yaml(plan):
    text = plan.to_yaml()
    back = Plan.from_yaml(text, source="generated")
    assert back == plan
    assert back.to_yaml() == text
    assert text.startswith(f"format: {PLAN_FORMAT}\n")
    format_plan(back)  # and ``show`` can print any valid plan
    # every tap survives bit for bit, -0.0 and subnormals included
    for a, b in zip(plan.stages, back.stages):
        if not isinstance(a, CicStage):
            assert [math.copysign(1, t) for t in a.taps] == [math.copysign(1, t) for t in b.taps]


@settings(max_examples=60, deadline=None)
@given(plan=plans(), data=st.data())
def test_plan_with_one_field_damaged_is_refused_by_name(plan, data):
    """Replace one top-level number by text or a list: refused, naming that field, in one line."""
    doc = plan.to_dict()
    key = data.draw(st.sampled_from(["input_rate", "output_rate", "bandwidth"]))
    doc[key] = data.draw(st.sampled_from(["2.4e6", "fast", [1.0], {"a": 1}, None, True, 10**400, -(10**400)]))
    with pytest.raises(ChannelizerError) as info:
        Plan.from_dict(doc, source="damaged.yaml")
    msg = str(info.value)
    assert msg.startswith(f"damaged.yaml: {key}: ") and "\n" not in msg


# -- block sizes ----------------------------------------------------------------------------------

FS = 2.4e6


@pytest.fixture(scope="module")
def small_job(tmp_path_factory):
    """A 2.4 Msps ci16 capture (so both the float and the bit-true path run) and a plan for it."""
    d = tmp_path_factory.mktemp("blocks")
    plan = plan_chain(ChainSpec(input_rate=FS, bandwidth=12.5e3, output_rate=48e3)).plan
    plan_path = d / "p.yaml"
    plan_path.write_text(plan.to_yaml())
    rng = np.random.default_rng(5)
    n = 30_011
    x = 0.2 * (rng.standard_normal(n) + 1j * rng.standard_normal(n)) + 0.3 * np.exp(2j * np.pi * 101e3 * np.arange(n) / FS)
    write_sigmf(d / "cap", x.astype(np.complex64), datatype="ci16_le", fs=FS, center_frequency=433.0e6)
    entries = [ChannelEntry("near", 100e3, True), ChannelEntry("far", -700e3, True)]
    outs = {}
    for bit_true in (False, True):
        o = d / f"ref-{bit_true}"
        run_extraction(open_capture(d / "cap.sigmf-meta"), entries, str(o), plan_path=str(plan_path), plots=False, audit=False, bit_true=bit_true)
        outs[bit_true] = {e.name: np.fromfile(o / f"{e.name}.sigmf-data", dtype=np.complex64) for e in entries}
    return d, str(plan_path), entries, outs


@settings(max_examples=8, deadline=None)
@given(block=st.one_of(st.integers(1, 64), st.integers(65, 40_000)), bit_true=st.booleans())
def test_any_block_size_gives_the_same_output(small_job, tmp_path_factory, block, bit_true):
    d, plan_path, entries, ref = small_job
    o = tmp_path_factory.mktemp("bs")
    res = run_extraction(open_capture(d / "cap.sigmf-meta"), entries, str(o), plan_path=plan_path, plots=False, audit=False, bit_true=bit_true, block_size=block)
    for e, ch in zip(entries, res.channels):
        y = np.fromfile(o / f"{e.name}.sigmf-data", dtype=np.complex64)
        r = ref[bit_true][e.name]
        # output count floor(N / 50) whatever the blocks (Oppenheim & Schafer 4.6: x_d[n] = x[nM])
        assert len(y) == len(r) == ch.samples == 30_011 // 50
        if bit_true:
            np.testing.assert_array_equal(y, r)  # integer arithmetic: bit for bit
        else:
            # float32 chains: rounding differs with the split, by a few ulps of the signal
            err = np.sqrt(np.mean(np.abs(y - r) ** 2) / np.mean(np.abs(r) ** 2))
            assert err < 1e-6


# -- readers on damaged files ---------------------------------------------------------------------


def _try_read(path, **kw):
    """Open and read everything; only ChannelizerError may come out. Returns the samples or None."""
    try:
        cap = open_capture(path, **kw)
        return np.concatenate(list(cap.blocks(17)) or [np.zeros(0, np.complex64)])
    except ChannelizerError as exc:
        assert "\n" not in str(exc)
        return None


GOOD_META = {
    "global": {"core:datatype": "ci16_le", "core:sample_rate": 1.0e6, "core:version": "1.2.0"},
    "captures": [{"core:sample_start": 0, "core:frequency": 915.0e6}],
    "annotations": [],
}


@FIXTURE_OK
@given(size=st.integers(0, 200), header=st.integers(0, 40), trailing=st.integers(0, 40))
def test_data_file_of_any_length_reads_whole_samples_or_is_refused(tmp_path, size, header, trailing):
    meta = json.loads(json.dumps(GOOD_META))
    meta["captures"][0]["core:header_bytes"] = header
    meta["global"]["core:trailing_bytes"] = trailing
    (tmp_path / "n.sigmf-meta").write_text(json.dumps(meta))
    (tmp_path / "n.sigmf-data").write_bytes(np.arange(size, dtype=np.uint8).tobytes())
    x = _try_read(tmp_path / "n.sigmf-meta")
    payload = size - header - trailing
    # SigMF Non-Conforming Datasets: samples lie between the header and trailing bytes; ci16 = 4 bytes
    if payload > 0 and payload % 4 == 0:
        assert x is not None and len(x) == payload // 4
    else:
        assert x is None


@FIXTURE_OK
@given(data=st.data())
def test_damaged_sigmf_metadata_only_channelizer_errors(tmp_path, data):
    raw = bytearray(json.dumps(GOOD_META, indent=1).encode())
    for _ in range(data.draw(st.integers(1, 4))):
        i = data.draw(st.integers(0, len(raw) - 1))
        op = data.draw(st.sampled_from(["flip", "delete", "insert"]))
        if op == "flip":
            raw[i] ^= 1 << data.draw(st.integers(0, 7))
        elif op == "delete":
            del raw[i]
        else:
            raw[i:i] = data.draw(st.binary(min_size=1, max_size=4))
    (tmp_path / "m.sigmf-meta").write_bytes(bytes(raw))
    (tmp_path / "m.sigmf-data").write_bytes(bytes(64))
    _try_read(tmp_path / "m.sigmf-meta")


@pytest.fixture(scope="module")
def good_wavs(tmp_path_factory):
    """Valid IQ WAV files as scipy.io.wavfile writes them (16-bit PCM, 32-bit float)."""
    d = tmp_path_factory.mktemp("wav")
    out = []
    for dtype in (np.int16, np.float32):
        scipy.io.wavfile.write(d / f"{dtype.__name__}.wav", 96000, np.ones((25, 2), dtype=dtype))
        out.append((d / f"{dtype.__name__}.wav").read_bytes())
    return out


@FIXTURE_OK
@given(data=st.data())
def test_damaged_wav_only_channelizer_errors(tmp_path, good_wavs, data):
    raw = bytearray(data.draw(st.sampled_from(good_wavs)))
    how = data.draw(st.sampled_from(["flip", "cut", "header-bytes"]))
    if how == "flip":  # damage the RIFF header, fmt and data chunk headers (the first 44 bytes)
        for _ in range(data.draw(st.integers(1, 3))):
            raw[data.draw(st.integers(0, 43))] = data.draw(st.integers(0, 255))
    elif how == "cut":
        raw = raw[: data.draw(st.integers(0, len(raw)))]
    else:
        i = data.draw(st.integers(4, 40))
        raw[i : i + 4] = data.draw(st.binary(min_size=4, max_size=4))
    (tmp_path / "d.wav").write_bytes(bytes(raw))
    _try_read(tmp_path / "d.wav")


@FIXTURE_OK
@given(data=st.binary(max_size=300))
def test_random_bytes_as_wav_only_channelizer_errors(tmp_path, data):
    (tmp_path / "r.wav").write_bytes(b"RIFF" + len(data).to_bytes(4, "little") + b"WAVE" + data)
    _try_read(tmp_path / "r.wav")


# -- damaged plan text ----------------------------------------------------------------------------


@pytest.fixture(scope="module")
def plan_texts():
    """Plans as the planner writes them: integer chain, rational resampler, hardware, stopband edge."""
    specs = [
        ChainSpec(input_rate=FS, bandwidth=12.5e3, output_rate=48e3),
        ChainSpec(input_rate=FS, bandwidth=12.5e3, output_rate=36e3),
        ChainSpec(input_rate=FS, bandwidth=12.5e3, output_rate=57.6e3, objective="hardware"),
        ChainSpec(input_rate=FS, bandwidth=12.5e3, output_rate=48e3, stopband_edge=15e3),
    ]
    return [plan_chain(s).plan.to_yaml() for s in specs]


@settings(max_examples=150, deadline=None)
@given(data=st.data())
def test_damaged_plan_text_is_read_or_refused_never_crashes(plan_texts, data):
    """Edit a planner-written plan at random (characters and YAML tokens): loading and the
    ``show`` table either work or refuse with one ChannelizerError line."""
    text = data.draw(st.sampled_from(plan_texts))
    for _ in range(data.draw(st.integers(1, 3))):
        i = data.draw(st.integers(0, len(text)))
        j = min(len(text), i + data.draw(st.integers(0, 8)))
        piece = data.draw(st.one_of(
            st.text(max_size=4),
            st.sampled_from(["1e6", ".nan", "-.inf", "[", "]", "{", "}", ": ", "\n", "- ", "&a ", "*a", "!!str ",
                             "!!python/name:os.system", "~", "true", "0x10", "'", "9" * 30, "-1", "0"]),
        ))
        text = text[:i] + piece + text[j:]
    try:
        plan = Plan.from_yaml(text.encode("utf-8", "surrogatepass") if data.draw(st.booleans()) else text, source="edited.yaml")
    except ChannelizerError as exc:
        assert str(exc).startswith("edited.yaml: ") and "\n" not in str(exc)
        return
    format_plan(plan)
