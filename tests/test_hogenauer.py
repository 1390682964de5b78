"""CIC register growth and pruning against Hogenauer (1981) and published examples."""

import math

from hypothesis import given, settings, strategies as st
import pytest

from channelizer.errors import ChannelizerError
from channelizer.planning.hogenauer import CicRegisters, cic_registers


# ----------------------------------------------------------------- naive reference


def _simulate_impulse(order, decimation, delay, source, phase):
    """Decimated output of the CIC structure for an impulse entering stage ``source``.

    Stages as in Hogenauer 1981: integrators 1..N run at the input rate, every R-th
    sample goes on to combs N+1..2N (delay M).  An integrator source gets its
    impulse at input time ``phase``; a comb source at output time 0.  Plain Python
    integers, one sample at a time.
    """
    n, r, m = order, decimation, delay
    integ = [0] * n
    hist = [[0] * m for _ in range(n)]
    out = []
    for t in range((n * m + 3) * r):
        v = 1 if (source <= n and t == phase) else 0
        for i in range(source - 1, n) if source <= n else ():
            integ[i] += v
            v = integ[i]
        if t % r:
            continue
        if source > n:
            v = 1 if t == 0 else 0
        for i in range(source - n - 1 if source > n else 0, n):
            y = v - hist[i][0]
            del hist[i][0]
            hist[i].append(v)
            v = y
        out.append(v)
    return out


def _variance_terms_by_simulation(order, decimation, delay):
    """F_j^2 for j = 1..2N from simulated impulse responses.

    For an integrator source the decimated outputs for an impulse at phase p are
    h_j(nR - p); summing the squares over p = 0..R-1 visits every h_j(k) once.
    """
    terms = []
    for j in range(1, 2 * order + 1):
        phases = range(decimation) if j <= order else (0,)
        terms.append(sum(y * y for p in phases for y in _simulate_impulse(order, decimation, delay, j, p)))
    return terms


# ----------------------------------------------------------------- published values


def test_lyons_worked_example():
    # Published: Lyons' worked example of Hogenauer's method (dsprelated.com, 2012):
    # N=3, R=8, M=1, Bin=Bout=12 -> gain 512, 21-bit registers, 9 bits dropped at the output.
    r = cic_registers(3, 8, 1, input_bits=12, output_bits=12)
    assert r.gain == 512
    assert r.full_bits == 21
    assert r.discarded[-1] == 9
    assert r.output_shift == 9


def test_lyons_example_per_stage_drops():
    # Derived in methods.md from Hogenauer 1981's pruning formula (cross-check, not a citation).
    r = cic_registers(3, 8, 1, input_bits=12, output_bits=12)
    assert r.discarded == (0, 3, 4, 5, 6, 7, 9)
    assert r.variance_terms == (18152, 520, 48, 20, 6, 2, 1)
    assert r.widths == (21, 18, 17, 16, 15, 14)


def test_hogenauer_paper_example():
    # Hogenauer 1981's own design example (from memory; methods.md): N=4, R=25, M=1,
    # Bin=Bout=16 -> width 35, bits dropped 1,6,9,13,14,15,16,17,19.
    r = cic_registers(4, 25, 1, input_bits=16, output_bits=16)
    assert r.full_bits == 35
    assert r.discarded == (1, 6, 9, 13, 14, 15, 16, 17, 19)
    assert r.widths == tuple(35 - b for b in r.discarded[:-1])


# ----------------------------------------------------------------- formulas


@pytest.mark.parametrize("order,decimation,delay", [(1, 4, 1), (2, 3, 1), (3, 8, 1), (3, 4, 2), (4, 5, 1), (2, 2, 3), (7, 24, 1)])
def test_variance_terms_match_simulated_impulse_responses(order, decimation, delay):
    # Hogenauer 1981's closed form for h_j(k) against the structure itself.
    r = cic_registers(order, decimation, delay, input_bits=8, output_bits=8)
    assert list(r.variance_terms[:-1]) == _variance_terms_by_simulation(order, decimation, delay)
    assert r.variance_terms[-1] == 1


def test_full_width_matches_float_formula_off_the_integers():
    # Hogenauer 1981: width = Bin + ceil(N log2(R M)); checked with floats where
    # N log2(RM) is far from an integer, and at exact powers of two.
    for n in range(1, 11):
        for rm in (3, 5, 6, 7, 10, 25, 100, 1000):
            growth = n * math.log2(rm)
            if abs(growth - round(growth)) > 1e-9:
                r = cic_registers(n, rm, input_bits=10, output_bits=10)
                assert r.full_bits == 10 + math.ceil(growth)
        for k in range(1, 8):
            assert cic_registers(n, 2**k, input_bits=10, output_bits=10).full_bits == 10 + n * k


@settings(max_examples=200, deadline=None)
@given(
    n=st.integers(1, 10),
    r=st.integers(1, 300),
    m=st.integers(1, 3),
    b_in=st.integers(1, 24),
)
def test_full_width_is_the_smallest_that_holds_the_extremes(n, r, m, b_in):
    # Fact of two's complement: the extremes of the output are -G 2^(Bin-1) and
    # G (2^(Bin-1) - 1); the width holds them and one bit less would not.
    reg = cic_registers(n, r, m, input_bits=b_in, output_bits=b_in)
    g = (r * m) ** n
    assert reg.gain == g
    assert -(2 ** (reg.full_bits - 1)) <= -g * 2 ** (b_in - 1)
    assert reg.full_bits == b_in or -(2 ** (reg.full_bits - 2)) > -g * 2 ** (b_in - 1)


@settings(max_examples=200, deadline=None)
@given(
    n=st.integers(1, 6),
    r=st.integers(3, 64),
    m=st.integers(1, 2),
    b_in=st.integers(4, 20),
    b_out=st.integers(2, 24),
)
def test_each_source_adds_at_most_its_share(n, r, m, b_in, b_out):
    # Hogenauer 1981 pruning rule: source j may add at most 1/(2N) of the output
    # truncation variance, 2^(2 B_j) F_j^2 / 12 <= 2^(2 B_2N+1) / (12 * 2N), and B_j is
    # the largest count that does (unless clamped at 0).  Exact integer form; R M >= 3,
    # where the counts come out non-decreasing without adjustment.
    reg = cic_registers(n, r, m, input_bits=b_in, output_bits=b_out)
    b_last = reg.discarded[-1]
    assert b_last == max(reg.full_bits - b_out, 0)
    for b, f2 in zip(reg.discarded[:-1], reg.variance_terms[:-1]):
        if b > 0:
            assert 4**b * f2 * 2 * n <= 4**b_last
            assert 4 ** (b + 1) * f2 * 2 * n > 4**b_last
        else:
            assert 4 * f2 * 2 * n > 4**b_last


@pytest.mark.parametrize("n,r,m,b_in,b_out", [(3, 8, 1, 12, 12), (4, 25, 1, 16, 16), (5, 10, 1, 14, 12), (2, 7, 2, 10, 9)])
def test_drops_match_the_paper_expression_in_floats(n, r, m, b_in, b_out):
    # The expression as printed (methods.md, Hogenauer 1981):
    # B_j = floor(-log2 F_j + log2 sigma_T + 0.5 log2(6/N)), sigma_T^2 = 2^(2 B_2N+1)/12.
    reg = cic_registers(n, r, m, input_bits=b_in, output_bits=b_out)
    b_last = reg.discarded[-1]
    sigma_t = math.sqrt(2.0 ** (2 * b_last) / 12)
    for b, f2 in zip(reg.discarded[:-1], reg.variance_terms[:-1]):
        printed = math.floor(-0.5 * math.log2(f2) + math.log2(sigma_t) + 0.5 * math.log2(6 / n))
        assert b == max(printed, 0)


def test_predicted_noise_stays_within_twice_the_output_truncation():
    # Consequence of the pruning rule (Hogenauer 1981): 2N sources each at most 1/(2N)
    # of the output's 1/12 LSB^2, so the total lies in [1/12, 2/12].
    for n, r in [(3, 8), (4, 25), (5, 16), (6, 64)]:
        v = cic_registers(n, r, input_bits=16, output_bits=12).output_noise_variance
        assert 1 / 12 <= v <= 2 / 12


def test_no_pruning_when_output_is_wide_enough():
    r = cic_registers(3, 8, input_bits=12, output_bits=21)
    assert r.discarded == (0,) * 7
    assert r.output_shift == 0
    assert r.widths == (21,) * 6
    assert r.output_noise_variance == 0.0
    assert cic_registers(3, 8, input_bits=12, output_bits=40).discarded == (0,) * 7


def test_prune_false_truncates_only_the_output():
    r = cic_registers(3, 8, input_bits=12, output_bits=12, prune=False)
    assert r.discarded == (0, 0, 0, 0, 0, 0, 9)
    assert r.widths == (21,) * 6
    # Only the output truncation: 1/12 LSB^2 (uniform rounding-down error, common practice).
    assert r.output_noise_variance == pytest.approx(1 / 12)


def test_drops_never_decrease_for_small_rate_changes():
    # With R M <= 2 the raw rule can ask for fewer bits than the previous stage.
    for n in range(1, 11):
        for r, m in [(1, 1), (1, 2), (2, 1)]:
            d = cic_registers(n, r, m, input_bits=16, output_bits=4).discarded
            assert all(a <= b for a, b in zip(d, d[1:]))


def test_result_is_frozen():
    r = cic_registers(2, 4, input_bits=8, output_bits=8)
    assert isinstance(r, CicRegisters)
    with pytest.raises(AttributeError):
        r.full_bits = 3


@pytest.mark.parametrize(
    "args,kwargs,needle",
    [
        ((0, 8), {}, "0"),
        ((11, 8), {}, "11"),
        ((2.5, 8), {}, "2.5"),
        ((True, 8), {}, "True"),
        ((3, 0), {}, "decimation"),
        ((3, 8, 0), {}, "differential_delay"),
        ((3, 8), {"input_bits": 0}, "input_bits"),
        ((3, 8), {"output_bits": -1}, "-1"),
        ((3, 8), {"prune": 1}, "prune"),
    ],
)
def test_bad_arguments_name_the_value(args, kwargs, needle):
    kw = {"input_bits": 12, "output_bits": 12}
    kw.update(kwargs)
    with pytest.raises(ChannelizerError, match=needle):
        cic_registers(*args, **kw)


@pytest.mark.parametrize("order,rm", [(5, 40), (7, 1024), (10, 3000), (10, 2)])
def test_fast_variance_terms_equal_the_binomial_sums(order, rm):
    # Hogenauer 1981's closed form h_j(k) = sum_l (-1)^l C(N, l) C(N - j + k - RM l, k - RM l),
    # summed in exact Python integers, against the running sums joined by the Chinese
    # remainder theorem that the planner uses (exact integers both, so equal)
    from channelizer.planning.hogenauer import _variance_terms, _variance_terms_direct

    assert _variance_terms(order, rm) == _variance_terms_direct(order, rm)

