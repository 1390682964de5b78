"""Tests of the streaming runners against scipy.signal.upfirdn and closed forms."""

from fractions import Fraction
import cmath
import math

from hypothesis import given, settings, strategies as st
import numpy as np
import pytest
import scipy.signal

from channelizer.errors import ChannelizerError
from channelizer.planning.stages import CicStage, FirStage, ResamplerStage, cic_taps
from channelizer.engines.streaming import FirDecimator, HalfbandDecimator, Mixer, MixingFirDecimator
from channelizer.engines.resampler import RationalResampler
from channelizer.engines.float_chain import Chain, ChannelBank, build_chain

FS = 61_440_000  # Hz, an integer so that reference phases can be computed with integers


@pytest.fixture
def rng():
    return np.random.default_rng(20260518)


# ----------------------------------------------------------------------------- references
def upfirdn_ref(h, x, up, down, n):
    """First ``n`` samples of scipy.signal.upfirdn in float64, zero-extended.

    upfirdn stops at its last input-dependent sample (output length
    ``((len(x) - 1) up + len(h)) // down + 1``); the up-sampler's trailing zeros
    that the emission rule also emits are zeros (Oppenheim & Schafer, sec. 4.6.2).
    """
    y = scipy.signal.upfirdn(np.asarray(h, dtype=complex), np.asarray(x, dtype=np.complex128), up, down)
    if y.size < n:
        y = np.concatenate((y, np.zeros(n - y.size, complex)))
    return y[:n]


def rel_rms(a, b):
    a = np.asarray(a, dtype=np.complex128)
    b = np.asarray(b, dtype=np.complex128)
    assert a.shape == b.shape
    scale = np.sqrt(np.mean(np.abs(b) ** 2)) if b.size else 1.0
    return float(np.sqrt(np.mean(np.abs(a - b) ** 2)) / scale) if a.size else 0.0


def noise(rng, n):
    return (rng.standard_normal(n) + 1j * rng.standard_normal(n)).astype(np.complex64)


def feed(stage, x, sizes):
    """Feed ``x`` in blocks of the given sizes (cycled), return the joined output."""
    out, i, k = [], 0, 0
    while i < x.size:
        m = sizes[k % len(sizes)]
        out.append(stage.process(x[i : i + m]))
        i += m
        k += 1
    return np.concatenate(out) if out else np.zeros(0, np.complex64)


def random_split(rng, x, pieces=30):
    cuts = np.sort(rng.integers(0, x.size + 1, pieces))
    return np.split(x, cuts)


def halfband(K, fp):
    """Half-band of length 4K-1 by the Vaidyanathan & Nguyen (1987) trick:
    ``h = (z^-(2K-1) + G(z^2)) / 2`` with G a one-band remez design of length 2K."""
    g = scipy.signal.remez(2 * K, [0, 2 * fp], [1], fs=1)
    h = np.zeros(4 * K - 1)
    h[0::2] = g / 2
    h[2 * K - 1] = 0.5
    return h


# ----------------------------------------------------------------------------- FIR decimator
@pytest.mark.parametrize(
    "L, D",
    [(1, 1), (5, 1), (40, 1), (1, 3), (3, 4), (16, 16), (7, 2), (19, 2), (76, 16), (33, 5), (120, 7)],
)
def test_fir_decimator_matches_upfirdn(rng, L, D):
    # reference: scipy.signal.upfirdn(h, x, 1, D) in float64
    h = rng.standard_normal(L)
    x = noise(rng, 3001)
    y = FirDecimator(h, D).process(x)
    assert y.dtype == np.complex64
    assert y.size == x.size // D
    assert rel_rms(y, upfirdn_ref(h, x, 1, D, x.size // D)) < 1e-5


@pytest.mark.parametrize("L, D", [(76, 16), (1, 1), (3, 4), (40, 1), (120, 7)])
def test_fir_decimator_large_blocks_match_upfirdn(rng, L, D):
    # blocks large enough to be read in place, with a remainder that is not a multiple of D;
    # reference: scipy.signal.upfirdn
    h = cic_taps(5, 16) if L == 76 else rng.standard_normal(L)
    x = noise(rng, 3 * 65536 + 77)
    st = FirDecimator(h, D)
    y = feed(st, x, [65536 + 5, 40000, 3, 70001])
    assert y.size == x.size // D
    assert rel_rms(y, upfirdn_ref(h, x, 1, D, x.size // D)) < 1e-5


def test_fir_decimator_complex_taps(rng):
    # complex taps (as after modulation); reference: scipy.signal.upfirdn
    h = rng.standard_normal(21) + 1j * rng.standard_normal(21)
    x = noise(rng, 999)
    y = feed(FirDecimator(h, 3), x, [13, 1, 200])
    assert rel_rms(y, upfirdn_ref(h, x, 1, 3, 333)) < 1e-5


@pytest.mark.parametrize("D, expected", [(2, 6), (3, 4)])
def test_down_sampler_lengths_common_practice(D, expected):
    # common practice: a length-12 sequence down-sampled by 2 has 6 samples, by 3 has 4;
    # with h = [1] the stage is the down-sampler x_d[n] = x[nM] (Oppenheim & Schafer, sec. 4.6.1)
    x = np.arange(12, dtype=np.complex64)
    y = FirDecimator([1.0], D).process(x)
    assert y.size == expected
    np.testing.assert_array_equal(y, x[::D])


def test_emission_rule_output_counts(rng):
    # floor(N / D) after N inputs, whatever the split: the samples of
    # upfirdn(h, x, 1, D) whose inputs x[nD .. nD + D - 1] have all arrived (common practice)
    st = FirDecimator(rng.standard_normal(30), 7)
    n = 0
    for m in [1, 5, 0, 6, 13, 2, 100, 1, 1]:
        st.process(noise(rng, m))
        n += m
        assert st.output_count == n // 7
        assert st.input_count == n


# ----------------------------------------------------------------------------- half-band
@pytest.mark.parametrize("K, fp", [(2, 0.1), (3, 0.1), (5, 0.15), (12, 0.2)])
def test_halfband_equals_fir_path_and_upfirdn(rng, K, fp):
    # reference: the general polyphase path on the same taps and scipy.signal.upfirdn
    h = halfband(K, fp)
    x = noise(rng, 4001)
    fast = feed(HalfbandDecimator(h), x, [1, 7, 64, 3])
    general = FirDecimator(h, 2).process(x)
    assert fast.dtype == np.complex64
    assert fast.size == general.size == x.size // 2
    assert rel_rms(fast, general) < 1e-6
    assert rel_rms(fast, upfirdn_ref(h, x, 1, 2, x.size // 2)) < 1e-5


def test_halfband_large_blocks(rng):
    h = halfband(6, 0.2)
    x = noise(rng, 2 * 40000 + 3)
    y = feed(HalfbandDecimator(h), x, [40001, 40002])
    assert rel_rms(y, upfirdn_ref(h, x, 1, 2, x.size // 2)) < 1e-5


@pytest.mark.parametrize(
    "taps",
    [
        scipy.signal.firwin(19, 0.5),  # windowed sinc: the zeros are right, the centre tap is 0.4986
        np.r_[halfband(3, 0.1), 0.0],  # even length
        halfband(3, 0.1) * 1.01,  # centre tap not 0.5
        [0.25, 0.5, 0.5],  # not symmetric
    ],
)
def test_halfband_rejects_other_taps(taps):
    # half-band: length 4K-1, centre 0.5, zeros at even distances from it, symmetric
    # (Vaidyanathan & Nguyen 1987, from memory; methods sheet)
    with pytest.raises(ValueError, match="half-band"):
        HalfbandDecimator(taps)


def test_halfband_error_is_channelizer_error():
    with pytest.raises(ChannelizerError):
        HalfbandDecimator(np.ones(5))


# ----------------------------------------------------------------------------- rational
@pytest.mark.parametrize("up", [2, 3])
def test_up_sampler_inserts_zeros_common_practice(up):
    # common practice: a length-3 sequence up-sampled by 2 has 6 samples, by 3 has 9, with
    # up - 1 zeros after each (Oppenheim & Schafer, sec. 4.6.2)
    x = np.array([1 + 1j, 2 - 1j, -3], dtype=np.complex64)
    y = RationalResampler([1.0], up, 1).process(x)
    expected = np.zeros(3 * up, np.complex64)
    expected[::up] = x
    assert y.dtype == np.complex64
    np.testing.assert_array_equal(y, expected)


@pytest.mark.parametrize("up, down, ntaps", [(3, 1, 30), (2, 3, 24), (3, 2, 31), (4, 6, 40), (48, 125, 480), (5, 4, 7)])
def test_rational_matches_upfirdn(rng, up, down, ntaps):
    # interpolation filter with gain up, cutoff at the lower Nyquist (Oppenheim & Schafer, sec. 4.6.3)
    h = up * scipy.signal.firwin(ntaps, 1.0 / max(up, down))
    x = noise(rng, 2003)
    n = x.size * up // down
    y = RationalResampler(h, up, down).process(x)
    assert y.dtype == np.complex64 and y.size == n
    assert rel_rms(y, upfirdn_ref(h, x, up, down, n)) < 1e-5
    y2 = np.concatenate([RationalResampler(h, up, down).process(p) for p in [x]])
    st = RationalResampler(h, up, down)
    y3 = np.concatenate([st.process(p) for p in random_split(rng, x)])
    assert st.output_count == n
    assert rel_rms(y3, y2) < 1e-6


def test_rational_delay():
    # linear phase: (len - 1) / 2 samples at the taps' rate, up times the input rate
    # (methods sheet; Oppenheim & Schafer, from memory)
    assert RationalResampler(np.ones(31), 3, 2).delay == pytest.approx(15 / 3)


# ----------------------------------------------------------------------------- mixing
def test_mixer_matches_modulation(rng):
    # y[n] = x[n] exp(-2j pi f_c n / fs) (Oppenheim & Schafer, sec. 2.9), phase 0 at n = 0
    x = noise(rng, 10007)
    f_c = -7_654_321.25
    n = np.arange(x.size)
    ref = x * np.exp(-2j * np.pi * f_c * n / FS)
    y = np.concatenate([Mixer(f_c, fs=FS).process(x)])
    assert y.dtype == np.complex64
    assert rel_rms(y, ref) < 1e-6
    st = Mixer(f_c, fs=FS)
    assert rel_rms(np.concatenate([st.process(p) for p in random_split(rng, x)]), ref) < 1e-6


@pytest.mark.parametrize("f_c", [1_234_567, -20_000_001, 30_719_999])
@pytest.mark.parametrize("n0", [3_000_000_007, 10**15 + 7])
def test_mixer_phase_at_large_index(rng, f_c, n0):
    # Billions of samples into a capture the phase must still be exact: the reference
    # reduces f_c n modulo fs with Python integers, one sample at a time.  At 1e15 a
    # float64 product f_c / fs * n would already be wrong by about 0.01 rad.
    st = Mixer(f_c, fs=FS, start_index=n0)
    x = np.ones(5000, np.complex64)
    y = np.concatenate([st.process(p) for p in random_split(rng, x, 12)])
    ref = np.array([cmath.exp(-2j * math.pi * ((f_c * n) % FS) / FS) for n in range(n0, n0 + x.size)])
    assert np.max(np.abs(y - ref)) < 1e-6


def test_mixer_phase_with_non_integer_offset():
    # offset 1.5 MHz + 0.1 Hz: exact rational phase of the binary float, with Fractions
    f_c = 1.5e6 + 0.1
    n0 = 2**52 + 12345
    y = Mixer(f_c, fs=FS, start_index=n0).process(np.ones(300, np.complex64))
    ratio = Fraction(f_c) / FS
    ref = np.array([cmath.exp(-2j * math.pi * float((ratio * n) % 1)) for n in range(n0, n0 + 300)])
    assert np.max(np.abs(y - ref)) < 1e-6


@pytest.mark.parametrize("f_c, D", [(1_234_567.0, 16), (-9_000_000.5, 4), (40e6, 3), (0.0, 2)])
def test_mixing_decimator_equals_mixer_then_fir(rng, f_c, D):
    # exp(-jw(nD - k)) = exp(-jwnD) exp(jwk): same samples as the two stages in turn
    h = scipy.signal.firwin(76, 0.8 / D)
    x = noise(rng, 8191)
    mixed = Mixer(f_c, fs=FS).process(x)
    two = FirDecimator(h, D).process(mixed)
    st = MixingFirDecimator(h, D, offset=f_c, fs=FS)
    one = np.concatenate([st.process(p) for p in random_split(rng, x)])
    assert one.dtype == np.complex64 and one.size == x.size // D
    assert rel_rms(one, two) < 1e-5
    # and both against upfirdn of the float64 modulated input
    n = np.arange(x.size)
    ref = upfirdn_ref(h, x * np.exp(-2j * np.pi * f_c * n / FS), 1, D, x.size // D)
    assert rel_rms(one, ref) < 1e-5


def test_mixing_decimator_start_index(rng):
    # starting mid-capture: the phase follows the absolute index of the first sample fed
    h = scipy.signal.firwin(31, 0.2)
    n0 = 1_000_000_000_003
    x = noise(rng, 2000)
    a = MixingFirDecimator(h, 4, offset=2_500_001, fs=FS, start_index=n0).process(x)
    b = FirDecimator(h, 4).process(Mixer(2_500_001, fs=FS, start_index=n0).process(x))
    assert rel_rms(a, b) < 1e-5


# ----------------------------------------------------------------------------- streaming parity
def _stages():
    h = scipy.signal.firwin(37, 0.2)
    return [
        lambda: FirDecimator(h, 5),
        lambda: FirDecimator(h[:3], 8),
        lambda: HalfbandDecimator(halfband(3, 0.1)),
        lambda: RationalResampler(3 * scipy.signal.firwin(36, 1 / 3), 3, 2),
        lambda: Mixer(3_000_001.5, fs=FS),
        lambda: MixingFirDecimator(h, 3, offset=-1e6, fs=FS),
    ]


@settings(max_examples=25, deadline=None)
@given(
    which=st.integers(0, 5),
    sizes=st.lists(st.integers(0, 97), min_size=1, max_size=12),
    seed=st.integers(0, 2**32 - 1),
)
def test_any_block_split_equals_one_shot(which, sizes, seed):
    # streaming parity: random block boundaries, empty blocks included, against one call
    make = _stages()[which]
    x = noise(np.random.default_rng(seed), 1500)
    whole = make().process(x)
    sizes = [s for s in sizes if s] or [1]
    st_ = make()
    pieces = feed(st_, x, sizes)
    assert pieces.dtype == np.complex64
    assert pieces.size == whole.size
    assert rel_rms(pieces, whole) < 1e-6


@pytest.mark.parametrize("sizes", [[1], [2, 3, 5, 7, 11, 13], [997], [15, 16, 17]])
def test_prime_and_unit_splits(rng, sizes):
    for make in _stages():
        x = noise(rng, 2500)
        whole = make().process(x)
        assert rel_rms(feed(make(), x, sizes), whole) < 1e-6


@pytest.mark.parametrize("make", _stages())
def test_dtypes_and_empty_blocks(make):
    # project rule: complex64 in, complex64 out on the float path, whatever the input dtype
    st_ = make()
    assert st_.process(np.zeros(0, np.complex64)).dtype == np.complex64
    assert st_.process(np.ones(64, np.complex128)).dtype == np.complex64
    assert st_.process(np.ones(64, np.float32)).dtype == np.complex64


def test_input_block_is_not_modified(rng):
    x = noise(rng, 50000)
    keep = x.copy()
    for make in _stages():
        make().process(x)
    np.testing.assert_array_equal(x, keep)


# ----------------------------------------------------------------------------- chains
def _chain_parts():
    cic = cic_taps(5, 16)
    hb1, hb2 = halfband(3, 0.1), halfband(5, 0.15)
    chan = scipy.signal.firwin(63, 0.2)
    return cic, hb1, hb2, chan


def test_chain_equals_cascade_of_upfirdn(rng):
    cic, hb1, hb2, chan = _chain_parts()
    f_c = 5_000_000.25
    chain = Chain(
        [
            MixingFirDecimator(cic, 16, offset=f_c, fs=FS),
            HalfbandDecimator(hb1),
            HalfbandDecimator(hb2),
            FirDecimator(chan, 2),
            RationalResampler(3 * scipy.signal.firwin(48, 1 / 4), 3, 4),
        ]
    )
    x = noise(rng, 64 * 1000 + 13)
    y = np.concatenate([chain.process(p) for p in random_split(rng, x, 20)])
    n = np.arange(x.size)
    ref = x * np.exp(-2j * np.pi * f_c * n / FS)
    for h, up, down in [(cic, 1, 16), (hb1, 1, 2), (hb2, 1, 2), (chan, 1, 2)]:
        ref = upfirdn_ref(h, ref, up, down, ref.size * up // down)
    ref = upfirdn_ref(3 * scipy.signal.firwin(48, 1 / 4), ref, 3, 4, ref.size * 3 // 4)
    assert y.dtype == np.complex64 and y.size == ref.size
    assert rel_rms(y, ref) < 1e-5
    assert chain.total_decimation == Fraction(16 * 8 * 4, 3)


def test_chain_delay_formula():
    # linear-phase FIR: (L - 1) / 2 input samples; CIC: N (R M - 1) / 2 (methods sheet)
    cic, hb1, hb2, chan = _chain_parts()
    chain = Chain([FirDecimator(cic, 16), HalfbandDecimator(hb1), HalfbandDecimator(hb2), FirDecimator(chan, 2)])
    cic_delay = 5 * (16 - 1) / 2
    expected_in = cic_delay + 16 * (hb1.size - 1) / 2 + 32 * (hb2.size - 1) / 2 + 64 * (chan.size - 1) / 2
    assert chain.delay_output_samples == pytest.approx(expected_in / 128, rel=1e-12)


def test_chain_delay_matches_measured_phase():
    # a slow tone leaves a linear-phase chain delayed by its group delay: the phase of
    # the complex inner product with the undelayed tone gives the delay in input samples
    cic, hb1, hb2, chan = _chain_parts()
    chain = Chain([FirDecimator(cic, 16), HalfbandDecimator(hb1), HalfbandDecimator(hb2), FirDecimator(chan, 2)])
    f0 = 1e-4  # cycles per input sample: inside every passband, phase f0 * delay < 1/2 cycle
    n = np.arange(128 * 2000)
    y = chain.process(np.exp(2j * np.pi * f0 * n).astype(np.complex64))
    m = np.arange(y.size)[300:]  # past the start-up transient
    ideal = np.exp(2j * np.pi * f0 * 128 * m)
    phase = np.angle(np.vdot(ideal, y[300:]))
    measured = -phase / (2 * np.pi * f0)  # input samples
    assert measured / 128 == pytest.approx(chain.delay_output_samples, abs=1e-3)


def test_chain_output_count_composes_floors(rng):
    chain = Chain([FirDecimator([1.0], 3), RationalResampler([1.0, 1.0], 2, 5), FirDecimator([1.0], 2)])
    x = noise(rng, 1000)
    y = np.concatenate([chain.process(p) for p in random_split(rng, x)])
    assert y.size == ((1000 // 3) * 2 // 5) // 2


def test_channel_bank_equals_separate_chains(rng):
    cic, hb1, hb2, _ = _chain_parts()

    def make(f_c):
        return Chain([MixingFirDecimator(cic, 16, offset=f_c, fs=FS), HalfbandDecimator(hb1), HalfbandDecimator(hb2)])

    offsets = [-12e6, -3.5e6, 0.0, 1e6 + 0.5, 20e6]
    bank = ChannelBank([make(f) for f in offsets])
    alone = [make(f) for f in offsets]
    x = noise(rng, 40000)
    got = [[] for _ in offsets]
    want = [[] for _ in offsets]
    for p in random_split(rng, x, 6):
        for acc, y in zip(got, bank.process(p)):
            acc.append(y)
        for acc, c in zip(want, alone):
            acc.append(c.process(p))
    for a, b in zip(got, want):
        np.testing.assert_array_equal(np.concatenate(a), np.concatenate(b))


def test_build_chain_from_planned_stages(rng):
    hb = halfband(3, 0.1)
    chan = scipy.signal.firwin(41, 0.3)
    res = 2 * scipy.signal.firwin(32, 1 / 3)
    planned = [
        CicStage(decimation=8, order=4),
        FirStage(decimation=2, taps=tuple(hb), kind="halfband", role="halfband"),
        FirStage(decimation=1, taps=tuple(chan), role="channel"),
        ResamplerStage(interpolation=2, decimation=3, taps=tuple(res)),
    ]
    f_c = -2_000_000.0
    chain = build_chain(planned, offset=f_c, fs=FS)
    kinds = [type(s).__name__ for s in chain.stages]
    assert kinds == ["MixingFirDecimator", "HalfbandDecimator", "FirDecimator", "RationalResampler"]
    x = noise(rng, 16 * 500 + 5)
    y = np.concatenate([chain.process(p) for p in random_split(rng, x, 10)])
    n = np.arange(x.size)
    ref = x * np.exp(-2j * np.pi * f_c * n / FS)
    # CIC N = 4, R = 8 as its FIR: the 4-fold convolution of a length-8 boxcar over 8**4
    # (Hogenauer 1981, H(z) = [(1 - z^-R) / (1 - z^-1)]^N, unit DC gain)
    cic = np.ones(1)
    for _ in range(4):
        cic = np.convolve(cic, np.ones(8))
    cic /= 8.0**4
    for h, up, down in [(cic, 1, 8), (hb, 1, 2), (chan, 1, 1), (res, 2, 3)]:
        ref = upfirdn_ref(h, ref, up, down, ref.size * up // down)
    assert rel_rms(y, ref) < 1e-5


def test_build_chain_resampler_first_mixes_separately():
    chain = build_chain([ResamplerStage(interpolation=3, decimation=2, taps=(1.0, 2.0, 1.0))], offset=1e6, fs=FS)
    assert [type(s).__name__ for s in chain.stages] == ["Mixer", "RationalResampler"]


# ----------------------------------------------------------------------------- bad input
@pytest.mark.parametrize(
    "make, field",
    [
        (lambda: FirDecimator([1.0, 2.0], 0), "decimation"),
        (lambda: FirDecimator([1.0, 2.0], 2.5), "decimation"),
        (lambda: FirDecimator([1.0, 2.0], True), "decimation"),
        (lambda: FirDecimator([], 2), "taps"),
        (lambda: FirDecimator([[1.0, 2.0]], 2), "taps"),
        (lambda: FirDecimator([1.0, np.nan], 2), "taps"),
        (lambda: RationalResampler([1.0], 0, 2), "up"),
        (lambda: RationalResampler([1.0], 2, -1), "down"),
        (lambda: Mixer(1e6, fs=0), "fs"),
        (lambda: Mixer(float("inf"), fs=FS), "offset"),
        (lambda: Mixer(1e6, fs=FS, start_index=-1), "start_index"),
        (lambda: MixingFirDecimator([1.0], 2, offset="1M", fs=FS), "offset"),
        (lambda: Chain([]), "stages"),
        (lambda: Chain([object()]), "stages"),
        (lambda: ChannelBank([]), "chains"),
    ],
)
def test_bad_arguments_name_the_field(make, field):
    with pytest.raises(ChannelizerError, match=field):
        make()


def test_bad_block_names_the_problem():
    with pytest.raises(ChannelizerError, match="block"):
        FirDecimator([1.0], 2).process(np.ones((4, 2), np.complex64))
    with pytest.raises(ChannelizerError, match="block"):
        Mixer(0.0, fs=FS).process(np.array(["a", "b"]))


def test_shared_front_bank_equals_separate_chains():
    # each channel of the bank must equal its own chain (itself checked against
    # scipy.signal.upfirdn above), whatever the block split
    from channelizer.planning.planner import plan_chain
    from channelizer.planning.spec import ChainSpec
    from channelizer.engines.float_chain import SharedFrontBank, build_chain

    fs = 2.4e6
    p1 = plan_chain(ChainSpec(input_rate=fs, bandwidth=12.5e3, output_rate=48e3)).plan
    p2 = plan_chain(ChainSpec(input_rate=fs, bandwidth=12.5e3, output_rate=36e3)).plan
    chans = [(p1.stages, 1e5), (p1.stages, -3.3e5), (p2.stages, 2e5), (p1.stages, 0.0)]
    rng = np.random.default_rng(3)
    x = (rng.standard_normal(50_001) + 1j * rng.standard_normal(50_001)).astype(np.complex64)
    bank = SharedFrontBank(chans, fs=fs)
    got = [[] for _ in chans]
    i = 0
    while i < x.size:
        n = int(rng.integers(1, 9000))
        for k, y in enumerate(bank.process(x[i : i + n])):
            got[k].append(y)
        i += n
    for k, (stages, off) in enumerate(chans):
        ref = build_chain(stages, offset=off, fs=fs).process(x)
        y = np.concatenate(got[k])
        assert y.dtype == np.complex64 and y.size == ref.size
        assert np.sqrt(np.mean(np.abs(y - ref) ** 2) / np.mean(np.abs(ref) ** 2)) < 1e-6
