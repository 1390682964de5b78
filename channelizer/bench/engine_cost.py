"""What the float engine does per input sample, predicted and measured.

The float engine runs a CIC as its boxcar-power FIR (``N (R M - 1) + 1`` taps per
output, about ``N`` multiplies per input sample), a half-band on its ``2K`` non-zero
outer taps plus the centre, a rational stage one phase (``len(h) / L`` taps) per
output, and mixes the channel to DC in the first stage.  The planner's ``cpu`` cost
model counts exactly that (:mod:`channelizer.planning.cost`), and
:func:`engine_multiplies` adds the mixing; :func:`compare` times the real runners on
the same plans so the bench can show that the count ranks the plans as the clock does.
"""

import math
import time

import numpy as np

from ..engines.float_chain import build_chain
from ..planning.planner import plan_chain
from ..planning.spec import ChainSpec
from ..planning.cost import chain_cost

__all__ = ["engine_multiplies", "compare", "COST_SPECS"]

#: Plans whose engine costs differ enough for a noisy clock to rank them: each costs
#: at least 1.6 times the one before (the CIC plans cluster near N M multiplies per
#: input sample, so two of them, of different orders, would sit within the noise).
COST_SPECS = (
    dict(input_rate=61.44e6, bandwidth=200e3),
    dict(input_rate=1e6, bandwidth=40e3, output_rate=50e3, rejection_db=100),
    dict(input_rate=1e6, bandwidth=400e3, output_rate=500e3, rejection_db=100),
    dict(input_rate=1e6, bandwidth=450e3, output_rate=500e3, rejection_db=100),
    dict(input_rate=1e6, bandwidth=470e3, output_rate=500e3, rejection_db=110),
)


def engine_multiplies(stages, *, fs):
    """Complex multiplies per input sample the float runners perform (mixing included).

    The ``cpu`` cost model (:func:`channelizer.planning.cost.chain_cost`), which counts
    what the engine computes, CIC included, plus one rotation per input sample for the
    mixing to DC.
    """
    return 1.0 + chain_cost(stages, fs=fs, objective="cpu").total.multiplies_per_input_sample


def _spearman(a, b):
    ra = np.argsort(np.argsort(a))
    rb = np.argsort(np.argsort(b))
    n = len(a)
    return 1.0 - 6.0 * float(np.sum((ra - rb) ** 2)) / (n * (n * n - 1))


def compare(specs=COST_SPECS, *, samples=1 << 19, repeats=3):
    """Predicted engine multiplies vs measured nanoseconds per input sample.

    Returns a dict: ``rows`` (layout, predicted, ns_per_sample), ``spearman`` (rank
    correlation of the two columns) and ``agree`` (True when the ranking is the same).
    """
    rng = np.random.default_rng(0)
    x = ((rng.standard_normal(samples) + 1j * rng.standard_normal(samples)) * 0.1).astype(np.complex64)
    rows = []
    for kw in specs:
        plan = plan_chain(ChainSpec(**kw)).plan
        best = math.inf
        for _ in range(repeats):
            chain = build_chain(plan.stages, offset=1000.0, fs=plan.input_rate)
            t = time.perf_counter()
            for block in np.array_split(x, 8):
                chain.process(block)
            best = min(best, time.perf_counter() - t)
        layout = " > ".join(f"{type(s).__name__[:3]}/{s.decimation}" for s in plan.stages)
        rows.append({"spec": kw, "layout": layout, "predicted": engine_multiplies(plan.stages, fs=plan.input_rate),
                     "ns_per_sample": 1e9 * best / samples})
    rho = _spearman([r["predicted"] for r in rows], [r["ns_per_sample"] for r in rows])
    return {"rows": rows, "spearman": rho, "agree": rho == 1.0}
