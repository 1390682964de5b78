"""What the float engine does per input sample, predicted and measured.

The float engine runs a CIC as its boxcar-power FIR (``N (R M - 1) + 1`` taps per
output, about ``N`` multiplies per input sample), a half-band on its ``2K`` non-zero
outer taps plus the centre, a rational stage one phase (``len(h) / L`` taps) per
output, and mixes the channel to DC in the first stage.  The planner's ``cpu`` cost
model counts exactly that (:mod:`channelizer.planning.cost`), and
:func:`engine_multiplies` adds the mixing; :func:`compare` times the real runners on
the same plans so the bench can show that the count ranks the plans as the clock does.

The planner ranks ``cpu`` chains by their FIR multiplies first (the CIC left out) and
by the engine's count only between equals; :func:`ranking_check` shows what that
costs in the engine: on specs where the chain with the fewest engine multiplies is
another one, it times both.
"""

import math
import time

import numpy as np

from ..engines.float_chain import build_chain
from ..planning.planner import plan_chain
from ..planning.spec import ChainSpec
from ..planning.cost import chain_cost

__all__ = ["engine_multiplies", "compare", "ranking_check", "COST_SPECS", "RANKING_SPECS"]

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


#: Specs from 2x to 10,000x decimation (those of the planner's hand-design tests), on
#: which the planner's FIR-first choice and the fewest-engine-multiplies choice are
#: compared by the clock.
RANKING_SPECS = (
    dict(input_rate=1e6, bandwidth=300e3, output_rate=500e3, rejection_db=60),
    dict(input_rate=1.024e6, bandwidth=100e3, rejection_db=60, ripple_db=0.5),
    dict(input_rate=20e6, bandwidth=150e3, output_rate=500e3),
    dict(input_rate=20e6, bandwidth=150e3, output_rate=240e3),
    dict(input_rate=61.44e6, bandwidth=40e3, output_rate=61.44e3),
    dict(input_rate=100e6, bandwidth=6e3, output_rate=10e3),
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


def _noise(samples):
    rng = np.random.default_rng(0)
    return ((rng.standard_normal(samples) + 1j * rng.standard_normal(samples)) * 0.1).astype(np.complex64)


def _ns_per_sample(chains, x, *, fs, repeats):
    """Best of ``repeats`` nanoseconds per input sample for each chain (a list of
    stage lists), the chains taking turns so that a slow minute falls on all of them."""
    best = [math.inf] * len(chains)
    for _ in range(repeats):
        for i, stages in enumerate(chains):
            chain = build_chain(stages, offset=1000.0, fs=fs)
            t = time.perf_counter()
            for block in np.array_split(x, 8):
                chain.process(block)
            best[i] = min(best[i], time.perf_counter() - t)
    return [1e9 * b / len(x) for b in best]


def compare(specs=COST_SPECS, *, samples=1 << 19, repeats=3):
    """Predicted engine multiplies vs measured nanoseconds per input sample.

    Returns a dict: ``rows`` (layout, predicted, ns_per_sample), ``spearman`` (rank
    correlation of the two columns) and ``agree`` (True when the ranking is the same).
    """
    x = _noise(samples)
    rows = []
    for kw in specs:
        plan = plan_chain(ChainSpec(**kw)).plan
        (ns,) = _ns_per_sample([plan.stages], x, fs=plan.input_rate, repeats=repeats)
        layout = " > ".join(f"{type(s).__name__[:3]}/{s.decimation}" for s in plan.stages)
        rows.append({"spec": kw, "layout": layout, "predicted": engine_multiplies(plan.stages, fs=plan.input_rate),
                     "ns_per_sample": ns})
    rho = _spearman([r["predicted"] for r in rows], [r["ns_per_sample"] for r in rows])
    return {"rows": rows, "spearman": rho, "agree": rho == 1.0}


def ranking_check(specs=RANKING_SPECS, *, samples=1 << 20, repeats=5):
    """The planner's choice against the chain with the fewest engine multiplies.

    For each spec, among the chains that meet it, the planner's choice (fewest FIR
    multiplies, the CIC left out) and the one the engine's count would choose; where
    they differ, both are timed on the same input, taking turns.

    Returns
    -------
    list of dict
        ``spec``, ``decimation`` (input over output rate), ``chosen`` and ``fewest`` (each ``layout``, ``fir``, ``engine``: FIR
        and engine multiplies per input sample), and, where the two differ,
        ``chosen_ns`` and ``fewest_ns`` (nanoseconds per input sample) and ``ratio``
        (``fewest_ns / chosen_ns``: below 1, the engine's choice would have run faster).
    """
    x = _noise(samples)
    rows = []
    for kw in specs:
        res = plan_chain(ChainSpec(**kw))
        meeting = [res.chosen] + [c for c in res.alternatives if c.meets and c.stages]
        fewest = min(meeting, key=lambda c: c.cost.total.multiplies_per_input_sample)
        row = {"spec": kw, "decimation": kw["input_rate"] / res.plan.output_rate}
        for label, c in (("chosen", res.chosen), ("fewest", fewest)):
            t = c.cost.total
            row[label] = {"layout": c.layout, "fir": t.fir_multiplies_per_input_sample,
                          "engine": t.multiplies_per_input_sample}
        if fewest is not res.chosen:
            row["chosen_ns"], row["fewest_ns"] = _ns_per_sample(
                [res.chosen.stages, fewest.stages], x, fs=kw["input_rate"], repeats=repeats)
            row["ratio"] = row["fewest_ns"] / row["chosen_ns"]
        rows.append(row)
    return rows
