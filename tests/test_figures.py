"""Figures the tool prints, plots or exits with, checked against outside references.

Each check names where its expected value comes from; none is copied from our own output.
"""

from channelizer.planning.cost import chain_cost
from channelizer.planning.stages import CicStage, FirStage


def test_multiplier_count_is_exact_arithmetic():
    # CIC/3 then a 41-tap FIR/7 at 61.44 Msps: folded, 21 multiplies per output at
    # 61.44M / 21 = 2.925714... Msps, i.e. exactly 61.44 M multiplies/s; both rails at a
    # 61.44 MHz clock need exactly 2 multipliers, at 122.88 MHz exactly 1 (arithmetic:
    # 2 * 21 * (fs / 21) / clock).  The float product lands at 2.0000000000000004.
    stages = [CicStage(3, 4), FirStage(7, tuple([0.01] * 41))]
    for clock, expected in [(61.44e6, 2), (122.88e6, 1), (20.48e6, 6)]:
        cost = chain_cost(stages, fs=61.44e6, objective="hardware", clock=clock)
        assert cost.stages[1].multipliers == expected
