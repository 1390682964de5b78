"""Planner timing: typical specs planned with the design caches cleared."""

import math
import time


from ..planning.planner import plan_chain
from ..planning.spec import ChainSpec

__all__ = ["time_planner", "PLANNER_SPECS", "PLANNER_TARGET_S"]


#: Typical planner requests, timed by :func:`time_planner` (target: each under 2 s).
PLANNER_SPECS = (
    dict(input_rate=61.44e6, bandwidth=200e3),
    dict(input_rate=2.4e6, bandwidth=12.5e3, output_rate=48e3),
    dict(input_rate=61.44e6, bandwidth=20e3, output_rate=25e3),
    dict(input_rate=100e6, bandwidth=1e6, objective="hardware"),
    dict(input_rate=2.4e6, bandwidth=11e3, output_rate=48e3, stopband_edge=7e3),
)


PLANNER_TARGET_S = 2.0


def time_planner(specs=PLANNER_SPECS, *, repeats=3):
    """Seconds :func:`channelizer.planner.plan_chain` takes per spec, design caches cleared.

    Returns a dict: ``specs`` (each with ``seconds``, the best of ``repeats``, and the
    chosen layout), ``worst_s``, ``target_s`` and ``met``.
    """
    from ..planning import design

    rows = []
    for kw in specs:
        best = math.inf
        layout = ""
        for _ in range(repeats):
            for fn in (design.design_decimator, design.design_halfband, design.design_compensator):
                fn.cache_clear()
            t = time.perf_counter()
            res = plan_chain(ChainSpec(**kw))
            best = min(best, time.perf_counter() - t)
            layout = res.chosen.layout
        rows.append({"spec": {k: v for k, v in kw.items()}, "seconds": round(best, 4), "layout": layout})
    worst = max(r["seconds"] for r in rows)
    return {"specs": rows, "worst_s": worst, "target_s": PLANNER_TARGET_S, "met": worst < PLANNER_TARGET_S}
