"""One set of CIC widths everywhere: plan file, show, bit-true chain and export.

Every width is checked against Hogenauer's rules computed here from scratch
(E. B. Hogenauer, "An economical class of digital filters for decimation and
interpolation", IEEE Trans. ASSP 29(2):155-162, 1981):

* register growth: the most significant bit ``Bmax = ceil(N log2(R M) + B_in - 1)``, so
  the full register is ``Bmax + 1`` bits;
* the output truncation drops ``B_{2N+1} = Bmax - B_out + 1`` bits;
* the pruning rule: source ``j`` drops
  ``B_j = floor(-log2 F_j + log2 sigma_T + 0.5 log2(6 / N))`` bits, with
  ``sigma_T^2 = 2^(2 B_{2N+1}) / 12`` and ``F_j^2`` the sum of squares of the impulse
  response from source ``j`` to the output: ``(1 - z^-RM)^N / (1 - z^-1)^(N - j + 1)``
  for the integrators, ``(1 - z^-M)^(2N + 1 - j)`` (at the low rate) for the combs.

Here ``F_j^2`` comes from convolving integer sequences with numpy, not from the closed
form the package uses.  The chain's own conventions, stated in
``channelizer.planning.hogenauer``: the word leaving a CIC that FIRs follow has one
fraction bit below the output LSB (so Hogenauer's ``B_out`` is the output width plus
one), and every register is one guard bit wider than Hogenauer's.
"""

import json
import math
import re

import numpy as np
import pytest

from channelizer.engines.integer_chain import IntegerChain
from channelizer.errors import ChannelizerError
from channelizer.handoff.export import export_plan
from channelizer.planning.plan import Plan
from channelizer.planning.planner import plan_chain
from channelizer.planning.spec import ChainSpec
from channelizer.planning.stages import CicStage
from channelizer.views.table import format_plan

SPECS = [
    # the deep hardware chain of the issue: CIC/1024, N = 6, 76-bit registers
    dict(input_rate=61.44e6, bandwidth=20e3, output_rate=25e3, objective="hardware"),
    dict(input_rate=2.4e6, bandwidth=12.5e3),
    dict(input_rate=100e6, bandwidth=800e3, output_rate=1e6, objective="hardware", input_bits=14, output_bits=18),
    dict(input_rate=61.44e6, bandwidth=200e3, input_bits=12, output_bits=20),
    dict(input_rate=10e6, bandwidth=10e3, objective="hardware", input_bits=24, output_bits=24),
]


def _f2(n, rm, j):
    """F_j^2 from the impulse response, by convolution of exact integer sequences."""
    if j <= n:
        h = np.array([1], dtype=object)
        for _ in range(n - j + 1):
            h = np.convolve(h, np.ones(rm, dtype=object))  # 1/(1 - z^-1) times (1 - z^-RM) = boxcar
        comb = np.zeros(rm + 1, dtype=object)
        comb[0], comb[rm] = 1, -1
        for _ in range(j - 1):
            h = np.convolve(h, comb)
    else:
        h = np.array([1], dtype=object)
        for _ in range(2 * n + 1 - j):
            h = np.convolve(h, np.array([1, -1], dtype=object))
    return int(np.dot(h, h))


def _hogenauer(n, r, m, b_in, b_out):
    """(full width, discarded counts for sources 1..2N+1) by the growth and pruning rules."""
    b_max = math.ceil(n * math.log2(r * m) + b_in - 1)
    last = max(b_max - b_out + 1, 0)
    sigma_t = math.sqrt(2.0 ** (2 * last) / 12.0)
    dropped, prev = [], 0
    for j in range(1, 2 * n + 1):
        b = math.floor(-0.5 * math.log2(_f2(n, r * m, j)) + math.log2(sigma_t) + 0.5 * math.log2(6.0 / n) + 1e-12)
        prev = max(prev, b, 0)  # a register cannot regain bits the one before dropped
        dropped.append(prev)
    return b_max + 1, tuple(dropped) + (last,)


def test_the_independent_rules_reproduce_the_published_example():
    # Hogenauer's method worked for N=3, R=8, M=1, Bin=Bout=12 (Lyons, dsprelated.com, 2012):
    # gain 512, 21-bit registers, 9 bits dropped at the output; F_j^2 and the drops per stage
    # as derived in the project's reference notes; and the paper's own N=4, R=25 example
    assert [_f2(3, 8, j) for j in range(1, 7)] == [18152, 520, 48, 20, 6, 2]
    assert _hogenauer(3, 8, 1, 12, 12) == (21, (0, 3, 4, 5, 6, 7, 9))
    assert _hogenauer(4, 25, 1, 16, 16) == (35, (1, 6, 9, 13, 14, 15, 16, 17, 19))


@pytest.fixture(scope="module", params=range(len(SPECS)), ids=lambda i: f"spec{i}")
def planned(request):
    spec = ChainSpec(**SPECS[request.param])
    return spec, plan_chain(spec).plan


def test_every_width_agrees_with_hogenauer(planned, tmp_path):
    spec, plan = planned
    (i, cic), = [(i, s) for i, s in enumerate(plan.stages) if isinstance(s, CicStage)]
    assert i == 0 and len(plan.stages) > 1
    n, r, m = cic.order, cic.decimation, cic.differential_delay
    full, dropped = _hogenauer(n, r, m, spec.input_bits, spec.output_bits + 1)
    widths = tuple(full + 1 - b for b in dropped[:-1])

    # the plan file
    assert (cic.register_bits, cic.pruned_bits) == (full, dropped)
    back = Plan.from_yaml(plan.to_yaml(), source="t")
    assert back.stages[0] == cic

    # show
    assert f"registers {max(widths)} down to {min(widths)} bits (Hogenauer's {full} + 1 guard" in format_plan(back)

    # the bit-true chain
    row = IntegerChain.from_plan(back).widths["stage1_cic"]
    assert row.register_bits == full and row.pruned_bits == dropped
    assert row.integrator_bits + row.comb_bits == widths
    assert row.accumulator_bits == max(widths)
    assert row.output_bits == spec.output_bits + 2 and row.output_shift == dropped[-1] - dropped[-2]

    # the export: table, header and manifest
    out = tmp_path / "x"
    export_plan(back, out, vectors=0)
    csv = (out / "bit_widths.csv").read_text().splitlines()
    head = csv[0].split(",")
    cells = dict(zip(head, next(line for line in csv if line.startswith("stage1_cic,")).split(",")))
    assert tuple(int(v) for v in (cells["integrator_bits"] + " " + cells["comb_bits"]).split()) == widths
    assert tuple(int(v) for v in cells["pruned_bits"].split()) == dropped
    assert int(cells["register_bits"]) == full and int(cells["accumulator_bits"]) == max(widths)
    text = (out / "bit_widths.txt").read_text()
    assert f"full width {full} (Hogenauer) + 1 guard bit" in text
    assert "integrator widths " + " ".join(map(str, widths[:n])) in text
    header = (out / "coefficients.h").read_text()
    assert f"#define STAGE1_CIC_REGISTER_BITS {full}" in header
    assert f"stage1_cic_widths[{2 * n}] = {{{', '.join(map(str, widths))}}};" in header
    assert f"stage1_cic_pruned[{2 * n + 1}] = {{{', '.join(map(str, dropped))}}};" in header
    manifest = json.loads((out / "manifest.json").read_text())["cic_registers"]["stage1_cic"]
    assert manifest["register_bits"] == full and manifest["guard_bits"] == 1
    assert tuple(manifest["integrator_bits"] + manifest["comb_bits"]) == widths
    assert tuple(manifest["pruned_bits"]) == dropped


def test_the_deep_chain_states_one_widest_register():
    # the case: the plan said 76 and the export 75; now both state Hogenauer's 76
    # (16 + 6 log2 1024) and the widest register 76 + 1 - B_1 as built
    spec = ChainSpec(**SPECS[0])
    plan = plan_chain(spec).plan
    full, dropped = _hogenauer(6, 1024, 1, 16, 17)
    assert full == 76
    row = IntegerChain.from_plan(plan).widths["stage1_cic"]
    assert row.accumulator_bits == 77 - dropped[0]
    assert f"registers {77 - dropped[0]} down to" in format_plan(plan)


def test_a_plan_stating_the_old_pruning_is_refused():
    # a CIC that FIRs follow: pruning for the bare output width (one bit short of what the
    # chain carries) is not what the chain builds, and the message gives the right list
    spec = ChainSpec(**SPECS[1])
    plan = plan_chain(spec).plan
    cic = plan.stages[0]
    _, wrong = _hogenauer(cic.order, cic.decimation, 1, 16, 16)
    _, right = _hogenauer(cic.order, cic.decimation, 1, 16, 17)
    text = plan.to_yaml().replace(str(list(right)), str(list(wrong)))
    with pytest.raises(ChannelizerError, match=r"pruned_bits.*" + re.escape(str(list(right)))):
        Plan.from_yaml(text, source="t")
