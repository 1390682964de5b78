"""Bit-true integer stages against naive references, scipy.signal and published bounds."""

import math

import numpy as np
import pytest
import scipy.signal

from channelizer.errors import ChannelizerError
from channelizer.dsp.fixedpoint import (
    IntegerCic,
    IntegerFir,
    IntegerResampler,
    PhaseAccumulatorNco,
)
from channelizer.planning.quantize import QuantizedTaps, quantize_taps
from channelizer.planning.hogenauer import cic_registers


@pytest.fixture
def rng():
    return np.random.default_rng(20240611)


def _stream(stage, x, rng, *, max_block=97):
    """Feed ``x`` in blocks of random length (0 included); join the outputs."""
    parts, i = [], 0
    while i < x.shape[0]:
        k = int(rng.integers(0, max_block + 1))
        parts.append(stage(x[i : i + k]))
        i += k
    return np.concatenate(parts)


def _full_scale(bits, n, rng, shape=()):
    return rng.integers(-(2 ** (bits - 1)), 2 ** (bits - 1), size=(n,) + shape)


# ----------------------------------------------------------------- naive references


def _cic_impulse_response(order, rm):
    """(R M)^N-gain boxcar power: N-fold convolution of RM ones (Hogenauer 1981 H(z))."""
    h = np.ones(1, dtype=np.int64)
    for _ in range(order):
        h = np.convolve(h, np.ones(rm, dtype=np.int64))
    return h


def _cic_reference(x, order, decimation, delay):
    """Exact integer CIC output: convolve with the impulse response, keep 0, R, 2R, ..."""
    h = _cic_impulse_response(order, decimation * delay)
    x = np.asarray(x, dtype=np.int64)
    count = x.shape[0] // decimation
    y = np.stack([np.convolve(x[:, c], h)[: x.shape[0]] for c in range(x.shape[1])], axis=1)
    return y[::decimation][:count]


def _fir_naive(h, x, up, down, shift, out_bits):
    """Python-int polyphase-free reference: zero-stuff, direct sum, round half up, saturate.

    Returns the first floor(len(x) up / down) outputs and the saturation count.
    """
    h = [int(v) for v in h]
    xs = [int(v) for v in x]
    v = [0] * (len(xs) * up)
    for i, s in enumerate(xs):
        v[i * up] = s
    count = len(xs) * up // down
    hi, lo = 2 ** (out_bits - 1) - 1, -(2 ** (out_bits - 1))
    out, sat = [], 0
    for n in range(count):
        acc = sum(h[k] * v[n * down - k] for k in range(len(h)) if 0 <= n * down - k < len(v))
        if shift:
            acc = (acc + (1 << (shift - 1))) >> shift
        if acc > hi or acc < lo:
            sat += 1
            acc = min(max(acc, lo), hi)
        out.append(acc)
    return np.array(out, dtype=np.int64), sat


# ----------------------------------------------------------------- quantize_taps


def test_quantize_taps_uses_the_most_fraction_bits_that_fit():
    # Two's complement fact: 8 bits hold -128..127.  0.5 * 2**8 = 128 does not fit, so 7;
    # -0.5 * 2**8 = -128 does, so 8.
    assert quantize_taps([0.5, 0.25], 8).frac_bits == 7
    q = quantize_taps([-0.5, 0.25], 8)
    assert q.frac_bits == 8
    assert q.integers.tolist() == [-128, 64]


def test_quantize_taps_of_a_designed_filter(rng):
    taps = scipy.signal.remez(63, [0, 0.1, 0.15, 0.5], [1, 0], fs=1.0)
    for bits in (10, 16, 18, 24):
        q = quantize_taps(taps, bits)
        assert isinstance(q, QuantizedTaps)
        assert q.integers.dtype == np.int64
        lim = 2 ** (bits - 1)
        assert q.integers.max() <= lim - 1 and q.integers.min() >= -lim
        # One more fraction bit would not fit.
        assert np.rint(np.max(np.abs(taps)) * 2.0 ** (q.frac_bits + 1)) > lim - 1
        # Round to nearest: error at most half an LSB.
        assert np.max(np.abs(q.values - taps)) <= 2.0 ** -(q.frac_bits + 1)
        assert not q.integers.flags.writeable


def test_quantize_taps_keeps_symmetry_exact(rng):
    base = scipy.signal.firwin(41, 0.2)
    sym = (base + base[::-1]) / 2
    # Perturb by an ulp on one side only, as a design routine may leave it.
    nudged = sym.copy()
    nudged[:20] = np.nextafter(nudged[:20], np.inf)
    # And place a tap right at a rounding boundary so the ulp matters.
    q0 = quantize_taps(sym, 12)
    nudged[5] = nudged[-6] = (np.floor(sym[5] * 2.0**q0.frac_bits) + 0.5) / 2.0**q0.frac_bits
    nudged[5] = np.nextafter(nudged[5], np.inf)
    q = quantize_taps(nudged, 12)
    assert np.array_equal(q.integers, q.integers[::-1])
    anti = np.concatenate([-nudged[:20], [0.0], nudged[:20][::-1]])
    qa = quantize_taps(anti, 12)
    assert np.array_equal(qa.integers, -qa.integers[::-1])


def test_quantized_taps_are_frozen():
    q = quantize_taps([0.25, 0.5, 0.25], 12)
    with pytest.raises(AttributeError):
        q.frac_bits = 3
    with pytest.raises(ValueError):
        q.integers[0] = 1


@pytest.mark.parametrize("taps,bits", [([0.0, 0.0], 12), ([], 12), ([1.0, np.nan], 12), ([[1.0]], 12), ([0.5], 1), ([1e9], 8)])
def test_quantize_taps_rejects(taps, bits):
    with pytest.raises(ChannelizerError):
        quantize_taps(taps, bits)


# ----------------------------------------------------------------- IntegerCic


@pytest.mark.parametrize("order,decimation,delay,in_bits", [(3, 8, 1, 12), (4, 5, 2, 10), (1, 3, 1, 16), (5, 16, 1, 14)])
def test_cic_without_pruning_is_the_exact_convolution(rng, order, decimation, delay, in_bits):
    # Hogenauer 1981: the integrator/comb structure realises [(1 - z^-RM)/(1 - z^-1)]^N.
    full = cic_registers(order, decimation, delay, input_bits=in_bits, output_bits=1).full_bits
    cic = IntegerCic(order, decimation, delay, input_bits=in_bits, output_bits=full)
    assert cic.registers.discarded == (0,) * (2 * order + 1)
    x = _full_scale(in_bits, 3001, rng, (2,))
    y = cic(x)
    assert y.dtype == np.int64 and y.shape == (3001 // decimation, 2)
    assert np.array_equal(y, _cic_reference(x, order, decimation, delay))


def test_cic_output_shift_only_is_the_floored_convolution(rng):
    regs = cic_registers(3, 8, input_bits=12, output_bits=12, prune=False)
    cic = IntegerCic(3, 8, input_bits=12, output_bits=12, registers=regs)
    x = _full_scale(12, 4000, rng, (2,))
    assert np.array_equal(cic(x), _cic_reference(x, 3, 8, 1) >> 9)


def _worst_case_inputs(bits, n):
    top, bottom = 2 ** (bits - 1) - 1, -(2 ** (bits - 1))
    t = np.arange(n)
    return {
        "max": np.full(n, top),
        "min": np.full(n, bottom),
        "alternate": np.where(t % 2, bottom, top),
        "square": np.where((t // 8) % 2, bottom, top),
        "min_then_max": np.where(t < n // 2, bottom, top),
    }


@pytest.mark.parametrize("order,decimation", [(3, 8), (4, 16), (2, 5)])
def test_cic_full_scale_inputs_never_overflow(order, decimation):
    # Hogenauer 1981: Bin + ceil(N log2 RM) bits hold every output, however long the
    # integrators have been wrapping.  Long enough that the integrators wrap int64 too.
    bits = 16
    n = 20000
    regs = cic_registers(order, decimation, input_bits=bits, output_bits=bits, prune=False)
    # A constant c drives the last integrator to c C(t + N - 1, N) at time t: far past
    # its register's range, and past int64's too for N = 4.
    reach = (2 ** (bits - 1) - 1) * math.comb(n + order - 1, order)
    assert reach > 2 ** (regs.full_bits + 8)
    assert reach > 2**64 or order < 4
    for name, x in _worst_case_inputs(bits, n).items():
        x2 = np.stack([x, -1 - x], axis=1)
        cic = IntegerCic(order, decimation, input_bits=bits, output_bits=bits, registers=regs)
        assert np.array_equal(cic(x2), _cic_reference(x2, order, decimation, 1) >> regs.output_shift), name


def test_cic_dc_gain():
    # Hogenauer 1981: DC gain (RM)^N; the output is shifted by output_shift bits.
    regs = cic_registers(4, 10, 1, input_bits=14, output_bits=20, prune=False)
    c = 2**13 - 1
    cic = IntegerCic(4, 10, 1, input_bits=14, output_bits=20, registers=regs)
    y = cic(np.full(4000, c))
    assert np.all(y[10:] == (c * 10**4) >> regs.output_shift)


def _pruning_error_bound(regs):
    """Worst-case output error of the pruned CIC in output LSBs.

    Each truncation drops at most 2^B_j in absolute units and reaches the output
    through h_j: for integrator j the boxcar^(N-j+1) times (1 - z^-RM)^(j-1) at the input
    rate, for comb j the (1 - z^-M)^(2N+1-j) at the output rate (Hogenauer 1981);
    the bound is sum_j ||h_j||_1 2^(B_j - B_2N+1), plus one LSB for the output floor.
    """
    n, rm = regs.order, regs.decimation * regs.differential_delay
    d = regs.discarded
    bound = 1.0
    for j in range(1, n + 1):
        h = _cic_impulse_response(n - j + 1, rm)
        diff = np.zeros(rm + 1, dtype=np.int64)
        diff[0], diff[rm] = 1, -1
        for _ in range(j - 1):
            h = np.convolve(h, diff)
        new = d[j - 1] > (d[j - 2] if j > 1 else 0)
        bound += new * np.abs(h).sum() * 2.0 ** (d[j - 1] - d[-1])
    for j in range(n + 1, 2 * n + 1):
        new = d[j - 1] > d[j - 2]
        bound += new * 2 ** (2 * n + 1 - j) * 2.0 ** (d[j - 1] - d[-1])
    return bound


@pytest.mark.parametrize("order,decimation,delay,in_bits,out_bits", [(4, 25, 1, 16, 16), (3, 10, 1, 12, 12), (5, 6, 2, 12, 14)])
def test_pruned_cic_full_scale_inputs_stay_within_the_error_bound(order, decimation, delay, in_bits, out_bits):
    # (R M)^N not a power of two here, so the full range has headroom above the exact
    # extremes and no truncation error can reach a wrap (see IntegerCic notes).
    regs = cic_registers(order, decimation, delay, input_bits=in_bits, output_bits=out_bits)
    assert regs.gain & (regs.gain - 1)
    bound = _pruning_error_bound(regs)
    assert bound < 2 ** (out_bits - 2)
    for name, x in _worst_case_inputs(in_bits, 20000).items():
        cic = IntegerCic(order, decimation, delay, input_bits=in_bits, output_bits=out_bits)
        x2 = x[:, None]
        err = cic(x2) - _cic_reference(x2, order, decimation, delay) / 2.0**regs.output_shift
        assert np.max(np.abs(err)) <= bound, name


@pytest.mark.parametrize(
    "order,decimation,delay,in_bits,out_bits", [(3, 8, 1, 12, 12), (4, 25, 1, 16, 16), (2, 32, 2, 16, 12), (5, 16, 1, 14, 14)]
)
def test_pruned_cic_noise_matches_hogenauer_prediction(order, decimation, delay, in_bits, out_bits):
    # Hogenauer 1981 total error variance sum_j F_j^2 2^(2 B_j) / 12.  That model treats
    # each truncation as uniform over 2^B_j; a stage that drops k bits beyond the previous
    # one really has variance (1 - 4^-k) of that, so the measurement lies between 3/4 of
    # the prediction and the prediction, give or take sampling: rel. s.d. sqrt(2/count).
    rng = np.random.default_rng(7)
    regs = cic_registers(order, decimation, delay, input_bits=in_bits, output_bits=out_bits)
    x = _full_scale(in_bits, 300000, rng, (1,))
    y = IntegerCic(order, decimation, delay, input_bits=in_bits, output_bits=out_bits)(x)
    err = (y - _cic_reference(x, order, decimation, delay) / 2.0**regs.output_shift)[order * delay + 1 :]
    measured = err.var()
    slack = 5 * np.sqrt(2 / err.size)
    predicted = regs.output_noise_variance
    assert 0.75 * predicted * (1 - slack) <= measured <= predicted * (1 + slack)


@pytest.mark.parametrize("order,decimation,delay,out_bits", [(3, 8, 1, 12), (4, 7, 2, 30), (2, 1, 1, 16)])
def test_cic_streaming_equals_one_shot(rng, order, decimation, delay, out_bits):
    x = _full_scale(16, 5000, rng, (2,))
    one = IntegerCic(order, decimation, delay, input_bits=16, output_bits=out_bits)(x)
    streamed = _stream(IntegerCic(order, decimation, delay, input_bits=16, output_bits=out_bits), x, rng)
    assert streamed.dtype == np.int64
    assert np.array_equal(one, streamed)


def test_cic_emits_floor_n_over_r(rng):
    cic = IntegerCic(3, 8, input_bits=12, output_bits=12)
    total = emitted = 0
    for k in (3, 4, 1, 0, 17, 7, 64):
        emitted += cic(_full_scale(12, k, rng)).shape[0]
        total += k
        assert emitted == total // 8


def test_cic_one_dimensional_rail(rng):
    x = _full_scale(12, 800, rng)
    full = IntegerCic(3, 8, input_bits=12, output_bits=21)
    assert np.array_equal(full(x), _cic_reference(x[:, None], 3, 8, 1)[:, 0])


def test_cic_reset_restarts_the_stream(rng):
    x = _full_scale(12, 800, rng, (2,))
    cic = IntegerCic(3, 8, input_bits=12, output_bits=12)
    first = cic(x)
    cic.reset()
    assert np.array_equal(cic(x), first)


def test_cic_rejects_bad_input():
    cic = IntegerCic(3, 8, input_bits=12, output_bits=12)
    with pytest.raises(ChannelizerError, match="2048"):
        cic(np.array([0, 2048]))
    with pytest.raises(ChannelizerError, match="float"):
        cic(np.zeros(8))
    cic(np.zeros((8, 2), dtype=np.int16))
    with pytest.raises(ChannelizerError, match="trailing shape"):
        cic(np.zeros((8, 3), dtype=np.int16))


def test_cic_rejects_mismatched_registers():
    other = cic_registers(3, 8, input_bits=12, output_bits=16)
    with pytest.raises(ChannelizerError, match="output_bits"):
        IntegerCic(3, 8, input_bits=12, output_bits=12, registers=other)
    with pytest.raises(ChannelizerError, match="order"):
        IntegerCic(0, 8, input_bits=12, output_bits=12)


# ----------------------------------------------------------------- IntegerFir


def test_fir_rounds_half_up_and_saturates():
    # Round half up: add half an LSB, floor.  1/2 -> 1, -1/2 -> 0, 3/2 -> 2, -3/2 -> -1.
    fir = IntegerFir([1], 1, 1, input_bits=8, output_bits=8)
    assert fir(np.array([1, -1, 3, -3, 0])).tolist() == [1, 0, 2, -1, 0]
    # Gain 4 into 8 bits: 100 * 4 = 400 saturates at 127, -100 * 4 at -128.
    sat = IntegerFir([4], 0, 1, input_bits=8, output_bits=8)
    assert sat(np.array([100, -100, 31])).tolist() == [127, -128, 124]
    assert sat.saturated == 2


@pytest.mark.parametrize("decimation", [1, 2, 3, 5])
def test_fir_matches_naive_reference(rng, decimation):
    q = quantize_taps(scipy.signal.firwin(31, 0.8 / decimation), 16)
    x = _full_scale(14, 900, rng)
    for shift, out_bits in ((None, 14), (q.frac_bits - 2, 14), (0, 40)):
        fir = IntegerFir(q.integers, q.frac_bits, decimation, input_bits=14, output_bits=out_bits, shift=shift)
        want, sat = _fir_naive(q.integers, x, 1, decimation, fir.shift, out_bits)
        got = fir(x)
        assert got.dtype == np.int64
        assert np.array_equal(got, want)
        assert fir.saturated == sat
    assert sat == 0


def test_fir_matches_scipy_upfirdn(rng):
    # scipy.signal.upfirdn on integer-valued float64 is exact while sums stay below 2^53.
    taps = scipy.signal.remez(47, [0, 0.2, 0.3, 0.5], [1, 0], fs=1.0)
    q = quantize_taps(taps, 18)
    x = _full_scale(16, 2000, rng, (2,))
    fir = IntegerFir(q.integers, q.frac_bits, 2, input_bits=16, output_bits=16)
    wide = np.stack([scipy.signal.upfirdn(q.integers.astype(float), x[:, c].astype(float), 1, 2) for c in (0, 1)], axis=1)
    want = np.floor((wide[: 2000 // 2] + 2.0 ** (q.frac_bits - 1)) / 2.0**q.frac_bits)
    want = np.clip(want, -(2**15), 2**15 - 1)
    assert np.array_equal(fir(x), want.astype(np.int64))


def test_fir_halfband_zero_taps(rng):
    # Half-band: every other tap zero away from the centre (Vaidyanathan & Nguyen 1987).
    g = scipy.signal.remez(12, [0, 0.4], [1], fs=1.0)
    h = np.zeros(23)
    h[::2] = g / 2
    h[11] = 0.5
    q = quantize_taps(h, 18)
    x = _full_scale(16, 700, rng)
    fir = IntegerFir(q.integers, q.frac_bits, 2, input_bits=16, output_bits=16)
    want, _ = _fir_naive(q.integers, x, 1, 2, q.frac_bits, 16)
    assert np.array_equal(fir(x), want)


@pytest.mark.parametrize("decimation", [1, 3, 4])
def test_fir_streaming_equals_one_shot(rng, decimation):
    q = quantize_taps(scipy.signal.firwin(40, 0.9 / decimation), 16)
    x = _full_scale(16, 3000, rng, (2,))
    args = (q.integers, q.frac_bits, decimation)
    one = IntegerFir(*args, input_bits=16, output_bits=12, shift=q.frac_bits - 3)
    streamed_fir = IntegerFir(*args, input_bits=16, output_bits=12, shift=q.frac_bits - 3)
    a, b = one(x), _stream(streamed_fir, x, rng)
    assert b.dtype == np.int64
    assert np.array_equal(a, b)
    assert one.saturated == streamed_fir.saturated > 0


def test_fir_emits_floor_n_over_d(rng):
    fir = IntegerFir([1, 2, 3, 2, 1], 2, 3, input_bits=8, output_bits=8)
    total = emitted = 0
    for k in (1, 1, 0, 5, 2, 11, 3):
        emitted += fir(_full_scale(8, k, rng)).shape[0]
        total += k
        assert emitted == total // 3


def test_fir_refuses_int64_overflow():
    with pytest.raises(ChannelizerError, match="int64"):
        IntegerFir(np.full(64, 2**23 - 1), 23, 1, input_bits=40, output_bits=16)
    # Just inside: 2 taps of 2^20, 41-bit input -> 2^61 worst case, fits.
    IntegerFir([2**20, 2**20], 20, 1, input_bits=42, output_bits=16)


def test_fir_rejects_bad_arguments():
    with pytest.raises(ChannelizerError, match="decimation"):
        IntegerFir([1], 0, 0, input_bits=8, output_bits=8)
    with pytest.raises(ChannelizerError, match="integers"):
        IntegerFir([0.5], 0, 1, input_bits=8, output_bits=8)
    with pytest.raises(ChannelizerError, match="shift"):
        IntegerFir([1], 0, 1, input_bits=8, output_bits=8, shift=-1)


# ----------------------------------------------------------------- IntegerResampler


@pytest.mark.parametrize("up,down", [(3, 2), (2, 3), (4, 6), (5, 1), (1, 1), (7, 5)])
def test_resampler_matches_scipy_upfirdn(rng, up, down):
    # scipy.signal.upfirdn(h, x, up, down): zero-stuff, filter, keep every down-th.
    taps = scipy.signal.firwin(12 * up + 1, 0.9 / max(up, down)) * up
    q = quantize_taps(taps, 16)
    x = _full_scale(14, 600, rng, (2,))
    res = IntegerResampler(q.integers, q.frac_bits, up, down, input_bits=14, output_bits=16)
    got = res(x)
    count = 600 * up // down
    wide = np.stack([scipy.signal.upfirdn(q.integers.astype(float), x[:, c].astype(float), up, down) for c in (0, 1)], axis=1)
    want = np.floor((wide[:count] + 2.0 ** (q.frac_bits - 1)) / 2.0**q.frac_bits)
    want = np.clip(want, -(2**15), 2**15 - 1).astype(np.int64)
    assert got.dtype == np.int64 and got.shape == (count, 2)
    assert np.array_equal(got, want)
    naive, _ = _fir_naive(q.integers, x[:, 0], up, down, q.frac_bits, 16)
    assert np.array_equal(got[:, 0], naive)


@pytest.mark.parametrize("up,down", [(3, 2), (2, 3), (160, 147), (4, 6)])
def test_resampler_streaming_equals_one_shot(rng, up, down):
    taps = scipy.signal.firwin(6 * up + 3, 1.0 / max(up, down)) * up
    q = quantize_taps(taps, 16)
    x = _full_scale(16, 2500, rng, (2,))
    args = (q.integers, q.frac_bits, up, down)
    one = IntegerResampler(*args, input_bits=16, output_bits=16)(x)
    streamed = _stream(IntegerResampler(*args, input_bits=16, output_bits=16), x, rng)
    assert np.array_equal(one, streamed)


def test_resampler_emits_floor_n_up_over_down(rng):
    res = IntegerResampler([1, 1, 1], 0, 3, 7, input_bits=8, output_bits=8)
    total = emitted = 0
    for k in (1, 2, 0, 4, 9, 1, 13):
        emitted += res(_full_scale(8, k, rng)).shape[0]
        total += k
        assert emitted == total * 3 // 7


# ----------------------------------------------------------------- PhaseAccumulatorNco


def test_nco_phase_word_and_actual_frequency():
    # Phase word = round(f / fs * 2^A) mod 2^A (common practice for phase accumulators).
    nco = PhaseAccumulatorNco(250.0, fs=1000.0, accumulator_bits=32)
    assert nco.phase_word == 2**30
    assert nco.actual_frequency == 250.0
    neg = PhaseAccumulatorNco(-100.0, fs=1000.0, accumulator_bits=16)
    assert neg.phase_word == 2**16 - round(0.1 * 2**16)
    assert neg.actual_frequency == pytest.approx(-100.0, abs=1000.0 / 2**16)
    assert PhaseAccumulatorNco(1100.0, fs=1000.0).actual_frequency == pytest.approx(100.0, abs=1e-6)


def test_nco_tables():
    nco = PhaseAccumulatorNco(0.0, fs=1.0, table_bits=4, amplitude_bits=12)
    peak = 2**11 - 1
    assert nco.cosine_table.shape == (16,) and nco.cosine_table.dtype == np.int64
    assert nco.cosine_table[[0, 4, 8, 12]].tolist() == [peak, 0, -peak, 0]
    assert nco.sine_table[[0, 4, 8, 12]].tolist() == [0, peak, 0, -peak]
    assert nco.cosine_table[2] == round(np.cos(np.pi / 4) * peak)


def _nco_naive(word, acc_bits, table_bits, amp_bits, iq):
    """Python-int phase accumulator and complex multiply by exp(-j phase)."""
    peak = 2 ** (amp_bits - 1) - 1
    out, phase = [], 0
    for i, q in iq.tolist():
        idx = phase >> (acc_bits - table_bits)
        ang = 2 * np.pi * idx / 2**table_bits
        c, s = int(np.rint(np.cos(ang) * peak)), int(np.rint(np.sin(ang) * peak))
        out.append([i * c + q * s, q * c - i * s])
        phase = (phase + word) % 2**acc_bits
    return np.array(out, dtype=np.int64)


@pytest.mark.parametrize("acc_bits", [24, 32, 64])
def test_nco_mix_matches_naive_reference(rng, acc_bits):
    nco = PhaseAccumulatorNco(123.456e3, fs=1e6, input_bits=16, accumulator_bits=acc_bits, table_bits=10, amplitude_bits=18)
    x = _full_scale(16, 1500, rng, (2,))
    got = nco.mix(x)
    assert got.dtype == np.int64
    assert np.array_equal(got, _nco_naive(nco.phase_word, acc_bits, 10, 18, x))
    assert np.abs(got).max() < 2 ** (nco.output_bits - 1)


def test_nco_moves_frequency_to_zero():
    # Conjugate mixing: a tone at +f comes out at 0 Hz.
    fs, f = 1e6, 62.5e3
    n = np.arange(4096)
    tone = 20000 * np.exp(2j * np.pi * f * n / fs)
    x = np.stack([np.rint(tone.real), np.rint(tone.imag)], axis=1).astype(np.int64)
    y = PhaseAccumulatorNco(f, fs=fs, table_bits=12, amplitude_bits=16).mix(x)
    spectrum = np.abs(np.fft.fft(y[:, 0] + 1j * y[:, 1]))
    assert np.argmax(spectrum) == 0
    assert spectrum[0] > 1e3 * np.delete(spectrum, 0).max()


def test_nco_full_scale_corners_fit_the_output_width():
    nco = PhaseAccumulatorNco(1.0, fs=8.0, input_bits=8, table_bits=3, amplitude_bits=8)
    x = np.array([[-128, -128], [127, -128], [-128, 127], [127, 127]] * 4)
    y = nco.mix(x)
    assert np.abs(y).max() < 2 ** (nco.output_bits - 1)


def _worst_spur_dbc(nco, n):
    x = np.zeros((n, 2), dtype=np.int64)
    x[:, 0] = 2**15 - 1
    y = nco.mix(x)
    power = np.abs(np.fft.fft(y[:, 0] + 1j * y[:, 1])) ** 2
    k = np.argmax(power)
    carrier = power[k]
    power[k] = 0
    return 10 * np.log10(power.max() / carrier)


@pytest.mark.parametrize("table_bits", [6, 8, 10])
def test_nco_phase_truncation_spurs(table_bits):
    # Nicholas & Samueli 1987 (from memory): spurs from keeping P phase bits are about
    # -6.02 dB per bit, -6.02 P + 3.92 dBc at worst; the worst case is a word whose
    # lowest set bit is the one just below the kept bits (truncation error alternating
    # 0 and half a table step).  A = 16 so one FFT of 2^16 samples spans a full period
    # and every spur falls on a bin; 28-bit amplitudes keep amplitude spurs far below.
    acc = 16
    bound = -6.02 * table_bits + 3.92
    rng = np.random.default_rng(table_bits)
    worst_words = [(2 * k + 1) * 2 ** (acc - table_bits - 1) for k in (0, 5, 17)]
    odd_words = [2 * int(k) + 1 for k in rng.integers(0, 2 ** (acc - 1), size=3)]
    for word in worst_words + odd_words:
        nco = PhaseAccumulatorNco(word / 2**acc * 1e6, fs=1e6, accumulator_bits=acc, table_bits=table_bits, amplitude_bits=28)
        assert nco.phase_word == word
        spur = _worst_spur_dbc(nco, 2**acc)
        assert spur <= bound + 0.1
        if word in worst_words:
            assert spur == pytest.approx(bound, abs=0.5)
        else:
            assert spur >= bound - 6.0


def test_nco_streaming_equals_one_shot(rng):
    x = _full_scale(14, 5000, rng, (2,))
    kw = dict(fs=2.4e6, input_bits=14, accumulator_bits=32, table_bits=12, amplitude_bits=16)
    one = PhaseAccumulatorNco(-317.5e3, **kw).mix(x)
    nco = PhaseAccumulatorNco(-317.5e3, **kw)
    assert np.array_equal(one, _stream(nco.mix, x, rng))
    nco.reset()
    assert np.array_equal(one, nco.mix(x))


@pytest.mark.parametrize(
    "kwargs,needle",
    [
        ({"fs": 0.0}, "fs"),
        ({"fs": float("nan")}, "fs"),
        ({"fs": 1.0, "table_bits": 40}, "table_bits"),
        ({"fs": 1.0, "accumulator_bits": 70}, "accumulator_bits"),
        ({"fs": 1.0, "input_bits": 40, "amplitude_bits": 32}, "input_bits"),
    ],
)
def test_nco_rejects_bad_arguments(kwargs, needle):
    with pytest.raises(ChannelizerError, match=needle):
        PhaseAccumulatorNco(0.1, **kwargs)


def test_nco_rejects_wrong_shape():
    nco = PhaseAccumulatorNco(0.1, fs=1.0)
    with pytest.raises(ChannelizerError, match="trailing shape"):
        nco.mix(np.zeros(10, dtype=np.int64))

