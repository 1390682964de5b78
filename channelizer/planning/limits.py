"""What the planner agrees to plan, and the time it may take.

Every bound is checked before any design starts, with a message that names it:

* rates and frequencies from ``MIN_HZ`` to ``MAX_HZ`` (far inside float64, whose
  products and quotients of rates must neither underflow to 0 nor overflow);
* the decimation ``input_rate / bandwidth`` at most ``MAX_RATIO`` (beyond it the
  search over factorizations and the filter lengths outgrow the time budget);
* ripple at least ``MIN_RIPPLE_DB`` and rejection at most ``MAX_REJECTION_DB``
  (flatter or deeper targets need filters whose design does not finish in time,
  and whose deviations come close to float64's rounding of a sum of taps).

The search itself runs under a CPU-time budget (:func:`planning_budget`): where a
spec inside the bounds still needs more, the planner stops with one error line
instead of running on.  CPU time, not wall time, so that a busy machine does not
refuse a spec a quiet one plans.
"""

import contextlib
import contextvars
import functools
import time

from ..errors import ChannelizerError
from ..units import MAX_HZ, MIN_HZ, check_rate_range

__all__ = ["BudgetSpent", "check_spec_limits", "check_time", "planning_budget", "side_budget", "MIN_HZ", "MAX_HZ", "MAX_RATIO",
           "MIN_RIPPLE_DB", "MAX_REJECTION_DB", "CPU_BUDGET_S"]

MAX_RATIO = 5e4
MIN_RIPPLE_DB = 1e-4
MAX_REJECTION_DB = 150.0
#: Search time; with the interpreter's start-up and the design step in flight when it runs
#: out, the command answers (a plan or a refusal) within 10 s.
CPU_BUDGET_S = 8.0

_deadline = contextvars.ContextVar("channelizer_planning_deadline", default=None)


def check_spec_limits(spec):
    """Refuse a :class:`~channelizer.planning.spec.ChainSpec` outside the planner's bounds."""
    for name in ("input_rate", "bandwidth", "output_rate", "clock", "stopband_edge"):
        v = getattr(spec, name)
        if v is not None:
            check_rate_range(v, name.replace("_", " "))
    ratio = spec.input_rate / spec.bandwidth
    if ratio > MAX_RATIO:
        raise ChannelizerError(
            f"input rate / bandwidth is {ratio:.3g}, beyond the {MAX_RATIO:g} one plan decimates; "
            "ask for a wider channel or a slower capture"
        )
    if spec.ripple_db < MIN_RIPPLE_DB:
        raise ChannelizerError(f"ripple {spec.ripple_db:g} dB is below the {MIN_RIPPLE_DB:g} dB the planner designs for")
    if spec.rejection_db > MAX_REJECTION_DB:
        raise ChannelizerError(
            f"rejection {spec.rejection_db:g} dB is beyond the {MAX_REJECTION_DB:g} dB the planner designs for"
        )


class BudgetSpent(ChannelizerError):
    """The planning budget (or a :func:`side_budget` inside it) ran out."""


@contextlib.contextmanager
def _budget(seconds):
    token = _deadline.set(time.process_time() + seconds)
    try:
        yield
    finally:
        _deadline.reset(token)


@contextlib.contextmanager
def side_budget(seconds):
    """At most ``seconds`` more CPU time (and never past the whole budget) for optional
    work, such as looking for cheaper nearby rates once a plan is found; the caller
    catches :class:`BudgetSpent` and keeps what it has."""
    now = time.process_time()
    outer = _deadline.get()
    token = _deadline.set(now + seconds if outer is None else min(outer, now + seconds))
    try:
        yield
    finally:
        _deadline.reset(token)


def check_time():
    """Stop the search when the budget of the current :func:`planning_budget` call is spent."""
    deadline = _deadline.get()
    if deadline is not None and time.process_time() > deadline:
        raise BudgetSpent(
            f"no chain found within the planner's {CPU_BUDGET_S:g} s budget; relax the ripple or rejection, "
            "move the stopband edge away from the passband, or widen the channel"
        )


def planning_budget(plan_fn):
    """Decorate the planner's entry: check the spec's bounds, then run it under the CPU budget."""

    @functools.wraps(plan_fn)
    def planned(spec, *args, **kwargs):
        if hasattr(spec, "rejection_db"):
            check_spec_limits(spec)
        with _budget(CPU_BUDGET_S):
            return plan_fn(spec, *args, **kwargs)

    return planned
