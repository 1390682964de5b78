"""CIC registers wider than 64 bits: exact on Python integers, planned chains export.

Reference: the CIC is the FIR whose taps are the N-fold convolution of a length-R
boxcar (Hogenauer 1981, H(z) = ((1 - z^-R) / (1 - z^-1))^N); evaluated here with
Python integers, so nothing can overflow.
"""

import numpy as np

from channelizer.dsp.fixedpoint import IntegerCic
from channelizer.planning.hogenauer import cic_registers
from channelizer.checks.verify import verify_plan
from channelizer.handoff.export import export_plan
from channelizer.planning.planner import plan_chain
from channelizer.planning.spec import ChainSpec


def _boxcar_power(r, n):
    c = np.array([1], dtype=object)
    for _ in range(n):
        # convolve with a length-r boxcar: running sum of the last r values
        padded = np.concatenate([c, np.zeros(r - 1, dtype=object)])
        s = np.cumsum(padded)
        c = s - np.concatenate([np.zeros(r, dtype=object), s[:-r]])
    return c


def test_wide_cic_is_exact_against_python_integers():
    r, n, bits = 512, 8, 16  # 16 + 8 * 9 = 88-bit registers
    regs = cic_registers(n, r, 1, input_bits=bits, output_bits=bits + n * 9)
    assert regs.full_bits > 64 and max(regs.discarded) == 0
    cic = IntegerCic(n, r, input_bits=bits, output_bits=regs.output_bits)
    rng = np.random.default_rng(5)
    x = rng.integers(-(2 ** (bits - 1)), 2 ** (bits - 1), size=r * 20, dtype=np.int64)
    x[: r * 4] = -(2 ** (bits - 1))  # a run at full scale drives the registers to the top
    y = np.concatenate([cic(x[: r * 7 + 3]), cic(x[r * 7 + 3 :])])  # two blocks: state carried
    c = _boxcar_power(r, n)
    xo = x.astype(object)
    want = [sum(c[j] * xo[k * r - j] for j in range(min(len(c), k * r + 1))) for k in range(len(y))]
    assert [int(v) for v in y] == want
    assert any(abs(v) >= 2**63 for v in want)


def test_deep_hardware_plan_exports_and_verifies_bit_true(tmp_path):
    # 61.44 MHz to 25 kHz plans a CIC/1024 of order 6: 16 + 6 log2(1024) = 76-bit
    # registers (Hogenauer 1981)
    plan = plan_chain(ChainSpec(input_rate=61.44e6, bandwidth=20e3, output_rate=25e3, objective="hardware")).plan
    assert plan.stages[0].register_bits == 16 + 6 * 10
    export_plan(plan, tmp_path / "out")
    assert (tmp_path / "out" / "bit_widths.csv").exists()
    # a short tone sweep through the bit-true chain (the full one takes minutes)
    v = verify_plan(plan, bit_true=True, tones=6)
    assert v.meets_spec, (v.measured_ripple_db, v.measured_rejection_db)
    # the worst alias sits within the planner's 0.5 dB margin of the spec, where the
    # rounding noise of a 512-sample fit (about 0.4 dB) could decide: it is fitted again
    # over 8 times the samples, and a least-squares standard error falls as 1/sqrt(N)
    # (Kay 1993, ch. 8): 10 log10(8) = 9 dB lower, give or take the noise of the noise
    worst = max((t for t in v.tones if t.band == "alias"), key=lambda t: t.measured_db)
    passband = sorted(t.floor_db for t in v.tones if t.band == "passband")  # 512-sample fits
    refitted = worst.floor_db < passband[len(passband) // 2] - 7.0
    a, err = 10 ** (worst.measured_db / 20), 10 ** (worst.floor_db / 20)
    close = a + 3 * err >= 10 ** (-plan.spec["rejection_db"] / 20)  # within 3 standard errors of the spec
    assert refitted or not close, (worst, passband)


def test_limbs_against_python_integers():
    # every limb operation against Python's exact integers (common practice: compare
    # multi-word arithmetic with arbitrary precision)
    from channelizer.dsp import wide_int

    rng = np.random.default_rng(7)
    k, width = 3, 120
    vals = [int(v) for v in rng.integers(-(2**62), 2**62, size=64)]
    vals = [v * (1 << 55) + int(rng.integers(0, 2**40)) for v in vals]  # ~117-bit values

    def to_limbs(xs):
        return wide_int.normalize([np.array([(x >> (32 * i)) & 0xFFFFFFFF for x in xs], dtype=np.int64)
                                   if i < k - 1 else np.array([x >> (32 * i) for x in xs], dtype=np.int64)
                                   for i in range(k)])

    def signed(v, w):
        v &= (1 << w) - 1
        return v - (1 << w) if v >> (w - 1) else v

    a = to_limbs(vals)
    assert list(wide_int.join(a, exact=True)) == vals
    for s in (0, 5, 32, 37, 64, 70):
        assert list(wide_int.join(wide_int.shift_right(a, s), exact=True)) == [v >> s for v in vals]
    for w in (100, 96, 70, 64, 40, 20):
        assert list(wide_int.join(wide_int.wrap(a, w), exact=True)) == [signed(v, w) for v in vals]
    cs = np.cumsum(np.array(vals, dtype=object))
    got = wide_int.join(wide_int.wrap(wide_int.cumsum(a), width), exact=True)
    assert list(got) == [signed(int(v), width) for v in cs]
    d = wide_int.sub(a, wide_int.take(a, slice(None, None, -1)))
    assert list(wide_int.join(d, exact=True)) == [x - y for x, y in zip(vals, vals[::-1])]
