"""The bit-true chain against scipy.signal.upfirdn, Hogenauer's widths and its own noise prediction."""

import math

import numpy as np
import pytest
import scipy.signal

from channelizer.planning.design import design_decimator, design_halfband
from channelizer.errors import ChannelizerError
from channelizer.dsp.fixedpoint import IntegerCic
from channelizer.planning.quantize import quantize_taps
from channelizer.planning.hogenauer import cic_registers
from channelizer.engines.integer_chain import IntegerChain
from channelizer.engines.bit_widths import BitWidthTable
from channelizer.planning.plan import PLAN_FORMAT, Plan
from channelizer.planning.planner import plan_layout
from channelizer.planning.spec import ChainSpec
from channelizer.planning.stages import CicStage

OFFSET = 123_456.7  # Hz: an NCO word that is not a round fraction of the rate


@pytest.fixture
def rng():
    return np.random.default_rng(20240612)


@pytest.fixture(scope="module")
def hardware_plan():
    """CIC/25 -> compensator -> resampler x3/5, coefficients already quantised to 18 bits."""
    spec = ChainSpec(input_rate=2.4e6, bandwidth=12.5e3, output_rate=57.6e3, objective="hardware")
    return plan_layout(spec, (25, 1, 0, 1), (3, 5)).plan


@pytest.fixture(scope="module")
def cpu_plan():
    """CIC/25 -> compensator/2 with floating-point taps."""
    return plan_layout(ChainSpec(input_rate=2.4e6, bandwidth=12.5e3, output_rate=48e3, ripple_db=0.05), (25, 2, 0, 1)).plan


def _plan(stages, *, input_rate, output_rate, bandwidth=12.5e3, bits=16):
    data = {
        "format": PLAN_FORMAT,
        "input_rate": input_rate,
        "output_rate": output_rate,
        "bandwidth": bandwidth,
        "spec": {"ripple_db": 0.1, "rejection_db": 80.0, "bits": {"input": bits, "output": bits, "coefficient": 18}},
        "stages": stages,
        "predicted": {"passband_ripple_db": 0.0, "alias_rejection_db": 0.0, "multiplies_per_input_sample": 0.0},
    }
    return Plan.from_dict(data)


def _cic_dict(order, decimation, bits=16, last=True):
    # Hogenauer's widths for the word leaving the CIC: the chain's output when it is the
    # last stage, one fraction bit more when FIRs follow (the chain's convention)
    regs = cic_registers(order, decimation, input_bits=bits, output_bits=bits if last else bits + 1)
    return {"kind": "cic", "decimation": decimation, "order": order, "differential_delay": 1,
            "register_bits": regs.full_bits, "pruned_bits": list(regs.discarded)}


@pytest.fixture(scope="module")
def halfband_plan():
    """CIC N=5, R=16 ((R M)^N = 2^20, the pruning edge case) -> half-band -> channel FIR/2."""
    hb = design_halfband(6250.0, fs=96e3, delta=1e-4)
    ch = design_decimator(6250.0, 2, fs=48e3, dp=0.005, ds=1e-4)
    taps = np.asarray(ch.taps) / np.sum(ch.taps)
    return _plan(
        [_cic_dict(5, 16, last=False),
         {"kind": "halfband", "role": "halfband", "decimation": 2, "taps": [float(t) for t in hb.taps]},
         {"kind": "fir", "role": "channel", "decimation": 2, "taps": [float(t) for t in taps]}],
        input_rate=1.536e6, output_rate=24e3,
    )


# --------------------------------------------------------------- float reference


def _boxcar_power(order, rm):
    """Hogenauer (1981) H(z) = [(1 - z^-RM) / (1 - z^-1)]^N as taps, scaled to unit DC gain."""
    h = np.ones(1)
    for _ in range(order):
        h = np.convolve(h, np.ones(rm))
    return h / rm**order


def _float_chain(stages, taps, x, *, fs, offset=0.0):
    """float64 reference: mix by exp(-2j pi f n / fs), then scipy.signal.upfirdn stage by stage.

    Each stage keeps the first floor(N L / M) outputs, the chain's stated convention.
    """
    v = np.asarray(x, dtype=np.complex128)
    if offset:
        v = v * np.exp(-2j * np.pi * offset * np.arange(v.size) / fs)
    for st, h in zip(stages, taps):
        if isinstance(st, CicStage):
            h = _boxcar_power(st.order, st.decimation * st.differential_delay)
        up = st.interpolation
        v = scipy.signal.upfirdn(h, v, up, st.decimation)[: v.size * up // st.decimation]
    return v


def _taps(chain, *, quantised):
    """Per plan stage: the chain's quantised coefficient values, or the plan's own taps."""
    names = [n for n in chain.names if n != "nco"]
    return [
        None if isinstance(st, CicStage)
        else chain.coefficients[name].values if quantised else np.asarray(st.taps)
        for name, st in zip(names, chain.plan.stages)
    ]


def _error(chain, x, *, quantised=True):
    """(output, reference, error) in full-scale units; the chain is fed x from its reset state."""
    chain.reset()
    y = chain.process(x)
    xf = (x[:, 0] + 1j * x[:, 1]) / 2.0 ** (chain.input_bits - 1)
    ref = _float_chain(chain.plan.stages, _taps(chain, quantised=quantised), xf, fs=chain.fs, offset=chain.offset)
    out = (y[:, 0] + 1j * y[:, 1]) * chain.output_scale
    assert out.shape == ref.shape
    return out, ref, out - ref


def _rail_rms(err):
    return float(np.sqrt(np.mean(np.abs(err) ** 2) / 2.0))


def _tone(n, f, *, fs, bits=16, amplitude=0.9):
    z = amplitude * (2 ** (bits - 1) - 1) * np.exp(2j * np.pi * f * np.arange(n) / fs + 0.3j)
    return np.stack([np.rint(z.real), np.rint(z.imag)], axis=1).astype(np.int64)


def _full_scale(n, rng, bits=16):
    return rng.integers(-(2 ** (bits - 1)), 2 ** (bits - 1), size=(n, 2))


# --------------------------------------------------------------- streaming


def _stream(chain, x, rng, *, max_block=5000):
    parts, i = [], 0
    while i < x.shape[0]:
        k = int(rng.integers(0, max_block + 1))
        parts.append(chain.process(x[i : i + k]))
        i += k
    return np.concatenate(parts)


@pytest.mark.parametrize("offset", [0.0, OFFSET])
def test_streaming_with_random_blocks_is_bit_exact(hardware_plan, halfband_plan, rng, offset):
    # Streaming parity (common practice): any split of the stream gives the same samples.
    for plan in (hardware_plan, halfband_plan):
        x = _full_scale(30_000, rng)
        whole = IntegerChain.from_plan(plan, offset=offset)
        once = whole.process(x)
        assert once.dtype == np.int64 and once.shape[1] == 2
        for _ in range(3):
            split = IntegerChain.from_plan(plan, offset=offset)
            np.testing.assert_array_equal(_stream(split, x, rng), once)
        whole.reset()
        np.testing.assert_array_equal(whole.process(x), once)


def test_stage_outputs_chain_into_each_other(halfband_plan, rng):
    chain = IntegerChain.from_plan(halfband_plan, offset=OFFSET)
    x = _full_scale(8192, rng)
    outs = chain.stage_outputs(x)
    assert tuple(outs) == chain.names == ("nco", "stage1_cic", "stage2_halfband", "stage3_fir")
    chain.reset()
    np.testing.assert_array_equal(chain.process(x), outs["stage3_fir"])
    # Output counts: floor(N / D) at every decimating stage (common practice).
    assert [v.shape[0] for v in outs.values()] == [8192, 512, 256, 128]
    for row in chain.widths.rows[1:]:
        v = outs[row.name]
        assert v.min() >= -(2 ** (row.output_bits - 1)) and v.max() <= 2 ** (row.output_bits - 1) - 1


# --------------------------------------------------------------- widths


def test_cic_widths_follow_hogenauer_plus_one_guard_bit():
    # Hogenauer (1981), the paper's example as in methods.md: N=4, R=25, Bin=Bout=16 ->
    # 35-bit registers, LSBs dropped 1,6,9,13,14,15,16,17,19.  A CIC-only plan puts the CIC
    # last, so its output is the spec's 16 bits.
    plan = _plan([_cic_dict(4, 25)], input_rate=2.4e6, output_rate=96e3)
    row = IntegerChain.from_plan(plan).widths["stage1_cic"]
    assert row.pruned_bits == (1, 6, 9, 13, 14, 15, 16, 17, 19)
    expected = tuple(35 + 1 - b for b in (1, 6, 9, 13, 14, 15, 16, 17))
    assert row.integrator_bits + row.comb_bits == expected
    assert (row.input_bits, row.output_bits, row.output_shift) == (16, 16, 19 - 17)


def test_widths_at_every_point(hardware_plan):
    chain = IntegerChain.from_plan(hardware_plan, offset=OFFSET, internal_guard_bits=3)
    table = chain.widths
    assert isinstance(table, BitWidthTable)
    assert [r.name for r in table] == ["input", "nco", "stage1_cic", "stage2_fir", "stage3_resampler"]
    assert (table["input"].output_bits, table["nco"].output_bits) == (16, 16 + 3)
    assert table["stage1_cic"].output_bits == table["stage2_fir"].output_bits == 16 + 3
    assert table["stage3_resampler"].output_bits == 16
    for a, b in zip(table.rows, table.rows[1:]):
        assert b.input_bits == a.output_bits
    # The CIC's registers come from cic_registers at the widths around it, plus one bit.
    cic = table["stage1_cic"]
    regs = cic_registers(hardware_plan.stages[0].order, 25, input_bits=19, output_bits=19)
    assert cic.pruned_bits == regs.discarded
    assert cic.integrator_bits + cic.comb_bits == tuple(w + 1 for w in regs.widths)
    csv = table.to_csv().splitlines()
    assert len(csv) == 1 + len(table) and csv[0].startswith("point,kind,")
    assert "integrator widths" in table.format()


def test_coefficients_are_the_plans_integers(hardware_plan, cpu_plan):
    # A stage that carries coefficient_frac_bits keeps its integers exactly.
    chain = IntegerChain.from_plan(hardware_plan)
    for i, st in enumerate(hardware_plan.stages, start=1):
        if isinstance(st, CicStage):
            continue
        q = chain.coefficients[f"stage{i}_{st.kind}"]
        assert (q.bits, q.frac_bits) == (st.coefficient_bits, st.coefficient_frac_bits)
        np.testing.assert_array_equal(q.integers, np.rint(np.asarray(st.taps) * 2.0**q.frac_bits))
    # Float taps are rounded by quantize_taps at the spec's width, or at the one asked for.
    for bits in (None, 12):
        chain = IntegerChain.from_plan(cpu_plan, coefficient_bits=bits)
        q = chain.coefficients["stage2_fir"]
        ref = quantize_taps(cpu_plan.stages[1].taps, bits or cpu_plan.spec["bits"]["coefficient"])
        np.testing.assert_array_equal(q.integers, ref.integers)
        assert q.frac_bits == ref.frac_bits


# --------------------------------------------------------------- overflow


@pytest.mark.parametrize("level", ["max", "min", "near_min", "opposite"])
def test_worst_case_constant_inputs_never_wrap(halfband_plan, rng, level):
    # Full-scale constants: the intermediate stages hold the filters' step overshoot in
    # their headroom bit; only the 16-bit output may clip, and then to the rail the float
    # reference exceeds, never wrapping to the other one.
    n = 40_000
    lo, hi = -(2**15), 2**15 - 1
    x = {
        "max": np.full((n, 2), hi),
        "min": np.full((n, 2), lo),
        "near_min": lo + rng.integers(0, 2, size=(n, 2)),
        "opposite": np.stack([np.full(n, hi), np.full(n, lo)], axis=1),
    }[level]
    chain = IntegerChain.from_plan(halfband_plan)
    out, ref, _ = _error(chain, x)
    sat = chain.saturated
    assert sat["stage1_cic"] == 0 and sat["stage2_halfband"] == 0
    s = chain.output_scale
    clipped = np.clip(ref.real, lo * s, hi * s) + 1j * np.clip(ref.imag, lo * s, hi * s)
    assert np.max(np.abs(out - clipped)) < 6 * chain.predicted_noise_rms
    # Settled (after the filters' transients) the output is the input level, unclipped.
    tail = slice(out.size // 2, None)
    assert np.max(np.abs(out[tail] - ref[tail])) < 6 * chain.predicted_noise_rms


def test_cic_pruning_edge_case_saturates_instead_of_wrapping(rng):
    # (R M)^N = 16^5 = 2^20 with Hogenauer's pruning and an input sitting at its most
    # negative values: the plain register widths wrap to the top of the range (the
    # edge case IntegerCic documents); the chain's guard bit holds it.
    x = -(2**15) + rng.integers(0, 2, size=(40_000, 2))
    plain = IntegerCic(5, 16, input_bits=16, output_bits=16)(x)
    assert plain.max() > 0  # the wrap this test is about does happen without the guard bit
    plan = _plan([_cic_dict(5, 16)], input_rate=1.536e6, output_rate=96e3)
    chain = IntegerChain.from_plan(plan)
    y = chain.process(x)
    assert y[10:].max() < -(2**15) + 4
    out, ref, err = _error(chain, x)
    assert np.max(np.abs(err)) < 6 * chain.predicted_noise_rms


def test_cic_mean_error_is_the_first_truncation_and_the_rounding(rng):
    # Hogenauer's error model (1981): the floor at integrator 1 drops B1 bits with mean
    # -(2^B1 - 1)/2 input units and reaches the output with the DC gain (R M)^N; the
    # floors at later registers see the combs' zeros at DC.  The output is then rounded
    # half up by s bits, mean +2^-(s+1) LSB.  Truncating there instead would add about
    # -1/2 LSB, which this test would see.
    plan = _plan([_cic_dict(4, 25)], input_rate=2.4e6, output_rate=96e3)
    chain = IntegerChain.from_plan(plan)
    out, ref, err = _error(chain, _full_scale(200_000, rng))
    regs = cic_registers(4, 25, input_bits=16, output_bits=16)
    b1, b_last, s = regs.discarded[0], regs.discarded[-1], regs.discarded[-1] - regs.discarded[-2]
    expected = -(2**b1 - 1) / 2 * 25**4 / 2**b_last + 2.0 ** -(s + 1)
    lsb_errors = np.concatenate([err.real, err.imag]) / chain.output_scale
    assert np.mean(lsb_errors) == pytest.approx(expected, abs=0.03)


# --------------------------------------------------------------- against the float chain


def test_random_input_matches_float_reference(hardware_plan, halfband_plan, rng):
    # Random full-scale input, no NCO: the error is the arithmetic's alone (quantised taps
    # in the reference), predicted by q^2/12 per rounding point and Hogenauer's pruning
    # variance.
    for plan in (hardware_plan, halfband_plan):
        chain = IntegerChain.from_plan(plan)
        _, _, err = _error(chain, _full_scale(48_000, rng))
        measured, predicted = _rail_rms(err), chain.predicted_noise_rms
        assert 0.1 * predicted <= measured <= 2.0 * predicted
        assert all(v == 0 for v in chain.saturated.values())


def test_tone_through_nco_matches_float_reference(hardware_plan, halfband_plan):
    # A 0.9-full-scale tone 2 kHz above the NCO frequency lands inside the channel; the
    # error is then dominated by the 12-bit phase truncation (Nicholas & Samueli 1987, from
    # memory), which the prediction takes for a full-scale tone.
    for plan in (hardware_plan, halfband_plan):
        chain = IntegerChain.from_plan(plan, offset=OFFSET)
        x = _tone(48_000, OFFSET + 2000.3, fs=plan.input_rate)
        out, ref, err = _error(chain, x)
        measured, predicted = _rail_rms(err), chain.predicted_noise_rms
        assert 0.1 * predicted <= measured <= 2.0 * predicted
        # The tone is in the output at 0.9 of full scale: its complex inner product with the
        # expected 2000.3 Hz tone, within the 0.1 dB ripple target (plan spec; the resampler's
        # images fall outside the channel, so they cancel in the product).
        n = np.arange(out.size // 2, out.size)
        probe = np.exp(2j * np.pi * 2000.3 * n / plan.output_rate)
        assert abs(np.mean(out[n] * np.conj(probe))) == pytest.approx(0.9, rel=0.012)


def test_more_table_bits_less_nco_error(hardware_plan):
    # -6.02 dB per phase bit (Nicholas & Samueli 1987, from memory): 4 more bits, ~16x less.
    x = _tone(48_000, OFFSET + 2000.3, fs=hardware_plan.input_rate)
    rms = []
    for bits in (10, 14):
        chain = IntegerChain.from_plan(hardware_plan, offset=OFFSET, nco_table_bits=bits)
        rms.append(_rail_rms(_error(chain, x)[2]))
    assert 8 < rms[0] / rms[1] < 32


@pytest.mark.parametrize("bits", [12, 18])
def test_coefficient_error_against_the_plans_float_taps(cpu_plan, bits):
    # The ideal chain has the plan's float taps: the prediction adds the bound on the
    # quantised taps' response error, which a tone in the channel comes close to.
    chain = IntegerChain.from_plan(cpu_plan, coefficient_bits=bits)
    x = _tone(48_000, 2000.3, fs=cpu_plan.input_rate)
    _, _, err = _error(chain, x, quantised=False)
    measured, predicted = _rail_rms(err), chain.predicted_noise_rms
    assert 0.1 * predicted <= measured <= 2.0 * predicted
    terms = {t.point: t.variance for t in chain.noise_budget}
    assert terms["coefficients"] > 0


def test_output_scale_gives_unit_dc_gain():
    # The chain has unit gain at DC (DEVELOPERS.md); output_scale carries the CIC's
    # (R M)^N / 2^ceil(N log2 RM) = 25^4 / 2^19 (Hogenauer 1981).  CIC/25 -> compensator/2
    # whose quantised taps sum to exactly 2^frac (a resampler's phases need not).
    spec = ChainSpec(input_rate=2.4e6, bandwidth=12.5e3, output_rate=48e3, objective="hardware")
    plan = plan_layout(spec, (25, 2, 0, 1)).plan
    chain = IntegerChain.from_plan(plan)
    order = plan.stages[0].order
    level = 12_345
    y = chain.process(np.full((60_000, 2), level))
    settled = y[-100:] * chain.output_scale
    assert np.all(np.abs(settled - level / 2**15) < 4 * chain.predicted_noise_rms)
    assert chain.output_scale == pytest.approx(2.0**-15 * 2 ** math.ceil(order * math.log2(25)) / 25**order, rel=1e-12)


# --------------------------------------------------------------- refusals


def test_bad_blocks_and_options_are_refused(hardware_plan):
    chain = IntegerChain.from_plan(hardware_plan)
    with pytest.raises(ChannelizerError, match="32768"):
        chain.process(np.full((4, 2), 2**15))
    with pytest.raises(ChannelizerError, match="integers"):
        chain.process(np.zeros((4, 2)))
    with pytest.raises(ChannelizerError, match="shape"):
        chain.process(np.zeros((4, 3), dtype=np.int64))
    assert chain.process(np.zeros((0, 2), dtype=np.int16)).shape == (0, 2)
    with pytest.raises(ChannelizerError, match="input rate"):
        IntegerChain.from_plan(hardware_plan, fs=2e6)
    with pytest.raises(ChannelizerError, match="offset"):
        IntegerChain.from_plan(hardware_plan, offset=1.3e6)
    with pytest.raises(ChannelizerError, match="internal_guard_bits"):
        IntegerChain.from_plan(hardware_plan, internal_guard_bits=0)
    with pytest.raises(TypeError):
        IntegerChain()
