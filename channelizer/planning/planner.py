"""Search for the cheapest multistage decimation chain that meets a spec.

Stages, in order: an optional CIC (order N, delay M, decimation R), a CIC-droop
compensating FIR (decimating by a small factor, or 1), zero or more half-bands by 2,
a final channel FIR (decimating by the rest) and, when the output rate is not an
integer divisor of the input rate, a rational resampler (L up to 256, or the
nearest fraction within 1 ppm).  The search walks the layouts of
:mod:`.layouts`, designs the most promising (ranked by a length estimate), checks
each candidate's composite response, raises only what falls short, and keeps the
cheapest that meets the spec.

References
----------
R. E. Crochiere and L. R. Rabiner, "Optimum FIR digital filter implementations for
decimation, interpolation, and narrow-band filtering", IEEE Trans. ASSP 23(5):444-456, 1975.
E. B. Hogenauer, "An economical class of digital filters for decimation and
interpolation", IEEE Trans. ASSP 29(2):155-162, 1981.
"""

from dataclasses import dataclass, field, replace
import math

import numpy as np

from .coeff_search import improve_integers
from .cost import chain_cost
from .design import choose_cic_order, design_compensator, design_decimator, design_halfband, design_kaiser
from .layouts import carrier, describe, has_final, layouts, ripple_shares, stage_estimates
from ..errors import ChannelizerError
from ..units import format_hz
from .hogenauer import planned_cic
from .output_rates import MIN_OVERSAMPLING, default_decimation, targets as _targets
from .limits import BudgetSpent, check_time, planning_budget, side_budget
from .quantize import quantize_taps
from .plan import Plan
from .response import fold, path_of, predict
from .spec import ChainSpec, ripple_to_delta
from .stages import CicStage, FirStage, ResamplerStage, chain_rates

__all__ = ["plan_chain", "plan_layout", "PlanResult", "Candidate", "MIN_OVERSAMPLING", "default_decimation"]

MAX_DESIGNED = 8
#: Largest L whose filter is designed by Parks-McClellan or linear programming;
#: beyond, a Kaiser window.
MAX_DESIGNED_L = 16
#: Rejection margin of hardware plans, for the bit-true chain's rounding (dB).
HARDWARE_MARGIN_DB = 0.5
MAX_CIC_ORDER = 10
MAX_RETRIES = 4
#: Default output rate: decimations down to ``d / RATE_SLACK`` are tried too, and
#: reported when they cost at most ``CHEAPER_BY`` of the chosen chain.
RATE_SLACK = 1.25
CHEAPER_BY = 0.8
#: Layouts estimated above this multiple of the best designed cost are not designed.
PRUNE = 1.3
#: Points per alias band while searching (the chosen chain is checked with the default).
SEARCH_POINTS = 8
SEARCH_REFINE = 401
#: A stage short of rejection is tightened by the shortfall and this margin (dB) in
#: the search, and by the smaller one when a chain is designed again at full resolution.
SEARCH_MARGIN_DB = 1.0
FULL_MARGIN_DB = 0.2


@dataclass
class Candidate:
    """One chain the search looked at."""

    layout: str
    estimate: float
    stages: tuple = ()
    prediction: object = None
    cost: object = None
    reason: str = ""
    meets: bool = False
    #: (layout, resampler, estimates) it was designed from, and whether its search
    #: judged it on the full-resolution prediction
    design: tuple = field(default=(), repr=False)
    full: bool = field(default=False, repr=False)


@dataclass
class PlanResult:
    """The chosen plan and the alternatives the search rejected."""

    plan: Plan
    chosen: Candidate
    alternatives: list = field(default_factory=list)


def _quantize(stage, bits):
    """Stage with taps rounded to ``bits``-bit coefficients, DC gain kept where possible."""
    q = quantize_taps(np.asarray(stage.taps), bits)
    ints = np.array(q.integers, dtype=np.int64)
    scale = 2**q.frac_bits
    gain = stage.interpolation if isinstance(stage, ResamplerStage) else 1
    want = gain * scale
    diff = want - int(ints.sum())
    c = len(ints) // 2
    if isinstance(stage, FirStage) and stage.kind == "halfband":
        if diff % 2 == 0 and diff:
            ints[c - 1] += diff // 2
            ints[c + 1] += diff // 2
    elif len(ints) % 2 == 1 and diff:
        ints[c] += diff
    elif diff % 2 == 0 and diff:
        ints[c - 1] += diff // 2
        ints[c] += diff // 2
    lim = 2 ** (bits - 1)
    ints = np.clip(ints, -lim, lim - 1)
    if not (isinstance(stage, FirStage) and stage.kind == "halfband"):
        ints = improve_integers(ints, np.asarray(stage.taps) * scale, bits=bits)
    taps = tuple(float(i) / scale for i in ints)
    return replace(stage, taps=taps, coefficient_bits=bits, coefficient_frac_bits=q.frac_bits)


def _unit_dc(taps, gain=1.0):
    taps = np.array(taps)
    return tuple(taps * gain / taps.sum())


def _build(layout, spec, resampler, shares, ds_mult, order_add=0):
    """Design every stage of one layout; returns (stages, reason).

    ``shares`` is each role's passband deviation, ``ds_mult`` tightens a role's
    stopband, ``order_add`` raises the CIC order above the rule's.  Intermediate
    stages keep ``spec.protected_edge`` free of aliases; with a stopband edge, the
    last stage also attenuates everything beyond it.
    """
    r, c, h, d_f = layout
    fs, fp = spec.input_rate, spec.passband_edge
    prot, edge = spec.protected_edge, spec.stopband_edge
    ds = spec.stopband_delta
    carry = carrier(layout, resampler=resampler, edge=edge)
    stages = []
    rate = fs
    cic = None
    if r > 1:
        order = choose_cic_order(r, fs=fs, fp=prot, ds=ds * ds_mult.get("cic", 1.0), compensated=carry is not None)
        if order is None or order + order_add > MAX_CIC_ORDER:
            return None, f"no CIC order up to {MAX_CIC_ORDER} rejects its alias bands enough"
        order += order_add
        # the widths the bit-true chain builds for a first stage that FIRs follow
        regs = planned_cic(order, r, 1, bits={"input": spec.input_bits, "output": spec.output_bits}).nominal
        cic = CicStage(r, order, 1, regs.full_bits, tuple(regs.discarded))
        stages.append(cic)
        rate /= r
        if carry is None:
            droop = 1.0 - abs(cic.response(np.array([fp]), fs=fs)[0])
            if droop > spec.passband_delta:
                return None, f"uncompensated CIC droop {20 * math.log10(1 / (1 - droop)):.3f} dB exceeds the ripple"
    if c:
        comp = design_compensator(cic, fp, c, fs_cic=fs, dp=shares["comp"], ds=ds * ds_mult.get("comp", 1.0), protect=prot)
        if comp is None:
            return None, "no compensator meets its share of the ripple"
        stages.append(FirStage(c, _unit_dc(comp.taps), "fir", "compensator"))
        rate /= c
    for _ in range(h):
        hb = design_halfband(prot, fs=rate, delta=min(shares["hb"], ds * ds_mult.get("hb", 1.0)))
        if hb is None:
            return None, f"no half-band serves a {format_hz(2 * prot)} band at {format_hz(rate, 'sps')}"
        g = np.array(hb.taps)
        # exact unit DC gain with the centre tap kept at 0.5 and the zeros kept zero
        others = np.arange(len(g)) != len(g) // 2
        g[others] *= 0.5 / g[others].sum()
        stages.append(FirStage(2, tuple(g), "halfband", "halfband"))
        rate /= 2
    if has_final(layout, resampler=resampler, edge=edge):
        last = edge if not resampler else None
        dp_f, ds_f = shares["final"], ds * ds_mult.get("final", 1.0)
        if carry == "final":
            fir = design_compensator(cic, fp, d_f, fs_cic=fs, dp=dp_f, ds=ds_f, fs=rate, protect=prot, stop_edge=last)
        else:
            fir = design_decimator(fp, d_f, fs=rate, dp=dp_f, ds=ds_f, protect=prot, stop_edge=last)
        if fir is None:
            return None, f"no channel FIR decimating by {d_f} meets the spec"
        stages.append(FirStage(d_f, _unit_dc(fir.taps), "fir", "channel"))
        rate /= d_f
    if resampler:
        up, down = resampler
        dp_r, ds_r = shares["res"], ds * ds_mult.get("res", 1.0)
        if up > MAX_DESIGNED_L:
            # long polyphase filter: a Kaiser window; the droop must then fit the ripple
            if carry == "res":
                droop = 1.0 - abs(cic.response(np.array([fp]), fs=fs)[0])
                if droop > dp_r:
                    return None, f"uncompensated CIC droop {20 * math.log10(1 / (1 - droop)):.3f} dB exceeds the ripple"
                dp_r -= droop
            fo = rate * up / down
            stop = edge if edge is not None else fo - prot
            res = design_kaiser(fp, stop, fs=rate * up, delta=min(dp_r, ds_r), gain=float(up))
        elif carry == "res":
            res = design_compensator(cic, fp, down, fs_cic=fs, dp=dp_r, ds=ds_r, fs=rate * up, protect=prot,
                                     stop_edge=edge, gain=float(up), fold_rate=rate)
        else:
            res = design_decimator(fp, down, fs=rate * up, dp=dp_r, ds=ds_r, gain=float(up), protect=prot, stop_edge=edge)
        if res is None:
            return None, f"no resampler filter for x{up}/{down} meets the spec"
        stages.append(ResamplerStage(up, down, _unit_dc(res.taps, up)))
    if not stages or all(isinstance(s, CicStage) for s in stages):
        return None, "a chain needs at least one FIR stage"
    if spec.objective == "hardware":
        stages = [s if isinstance(s, CicStage) else _quantize(s, spec.coefficient_bits) for s in stages]
    return tuple(stages), ""


def _role(stage):
    if isinstance(stage, ResamplerStage):
        return "res"
    if isinstance(stage, CicStage):
        return "cic"
    return {"compensator": "comp", "halfband": "hb"}.get(stage.role, "final")


def _culprits(stages, x, spec):
    """Which stages let the worst alias at input frequency ``x`` through: {'cic'} or FIR roles."""
    fs, ds = spec.input_rate, spec.stopband_delta
    rates = chain_rates(stages, fs=fs)
    out = set()
    if path_of(stages, x, fs=fs, bandwidth=spec.bandwidth) > 0:
        return {"res"}  # an image of the rational stage: only its filter rejects it
    if isinstance(stages[0], CicStage):
        g = fold(np.array([x]), rates[-1])
        ratio = abs(stages[0].response(np.array([x]), fs=fs)[0]) / max(abs(stages[0].response(g, fs=fs)[0]), 1e-300)
        if ratio > 0.9 * ds:
            return {"cic"}
    for st, rate in zip(stages, rates):
        if isinstance(st, CicStage):
            continue
        if abs(st.response(np.array([x]), fs=rate)[0]) / st.interpolation < 0.3:
            out.add(_role(st))
    return out or {_role(st) for st in stages if not isinstance(st, CicStage)}


def _design_candidate(cand, layout, resampler, est, spec, *, full=False):
    """Design one layout, raising only what fails; fills ``cand`` in.

    Each try is judged on the coarse prediction of the search, or with ``full`` on
    the full one the chosen chain is checked with.
    """
    sampling = {} if full else {"points_per_band": SEARCH_POINTS, "refine_points": SEARCH_REFINE}
    margin = FULL_MARGIN_DB if full else SEARCH_MARGIN_DB
    fs = spec.input_rate
    dp, ds = spec.passband_delta, spec.stopband_delta
    shares = ripple_shares(est, dp, ds)
    ds_mult, order_add = {}, 0
    stages, reason, pred = None, "", None
    for _ in range(MAX_RETRIES):
        stages, reason = _build(layout, spec, resampler, shares, ds_mult, order_add)
        if stages is None:
            break
        pred = predict(stages, fs=fs, bandwidth=spec.bandwidth, stopband_edge=spec.stopband_edge, **sampling)
        reason = _shortfall(pred, spec)
        if not reason:
            break
        if pred.passband_ripple_db > spec.ripple_db * (1 + 1e-9):
            over = ripple_to_delta(pred.passband_ripple_db) / dp
            shares = {k: v / max(over, 1.0) * (0.9 if k != "hb" else 1.0) for k, v in shares.items()}
        need = spec.rejection_db + (HARDWARE_MARGIN_DB if spec.objective == "hardware" else 0.0)
        if pred.alias_rejection_db < need:
            short = need - pred.alias_rejection_db
            for role in _culprits(stages, pred.worst_alias_hz, spec):
                if role == "cic":
                    order_add += 1
                else:
                    ds_mult[role] = ds_mult.get(role, 1.0) * 10 ** (-(short + margin) / 20)
        if pred.adjacent_rejection_db is not None and pred.adjacent_rejection_db < need:
            short = need - pred.adjacent_rejection_db
            role = _role(stages[-1])
            ds_mult[role] = ds_mult.get(role, 1.0) * 10 ** (-(short + margin) / 20)
    cand.stages = stages or ()
    if stages:
        cand.prediction = pred
        cand.cost = chain_cost(
            stages, fs=fs, objective=spec.objective, clock=spec.clock,
            input_bits=spec.input_bits, coefficient_bits=spec.coefficient_bits,
        )
    cand.reason = reason
    cand.meets = bool(stages) and not reason
    cand.design, cand.full = (layout, resampler, est), full
    return cand


def _search(spec, targets, max_designed=MAX_DESIGNED):
    """Design the most promising layouts for ``targets``; returns every Candidate tried."""
    fs, fp = spec.input_rate, spec.passband_edge
    dp, ds = spec.passband_delta, spec.stopband_delta
    ranked = []
    for d_int, resampler, _ in targets:
        for layout in layouts(d_int, fs, spec.protected_edge):
            est = stage_estimates(layout, fs=fs, fp=fp, prot=spec.protected_edge, dp=dp, ds=ds,
                                  edge=spec.stopband_edge, resampler=resampler)
            if est is None or not est:
                if est is not None and layout[0] > 1:
                    est = {}
                else:
                    continue
            ranked.append((sum(est.values()), layout, resampler, est))
    if not ranked:
        raise ChannelizerError(
            f"no chain can take {fs:g} Hz to a {spec.bandwidth:g} Hz channel; widen the output rate"
        )
    ranked.sort(key=lambda t: t[0])
    tried = []
    best_cost = math.inf
    designed = 0
    for total, layout, resampler, est in ranked[: 3 * max_designed]:
        check_time()
        if designed >= max_designed:
            break
        if total > PRUNE * best_cost and len(tried) >= 4:
            continue
        cand = Candidate(describe(layout, resampler, spec.stopband_edge), total)
        tried.append(_design_candidate(cand, layout, resampler, est, spec))
        designed += bool(cand.stages)
        if cand.meets:
            best_cost = min(best_cost, cand.cost.total.fir_multiplies_per_input_sample)  # as the estimates
    return tried


#: CPU seconds each nearby rate may take to look for a cheaper chain (a hint beside the plan).
CHEAPER_RATES_S = 1.0


def _cheaper_rates(spec, best, d):
    """Chains at a slightly higher output rate that cost markedly less than ``best``."""
    fs = spec.input_rate
    lo = max(2, int(math.ceil(d / RATE_SLACK)))
    options = [k for k in range(d - 1, lo - 1, -1)]
    # the smoothest decimations first: they factor into a CIC and half-bands
    options.sort(key=lambda k: (max(p for p in _prime_factors(k)), -k))
    out = []
    for k in options[:2]:  # the two smoothest: a planner answer stays fast
        alt = replace(spec, output_rate=fs / k)
        try:
            with side_budget(CHEAPER_RATES_S):
                good = [c for c in _search(alt, [(k, None, fs / k)], max_designed=4) if c.meets]
        except BudgetSpent:  # a hint only: the plan found stands
            break
        if not good:
            continue
        c = min(good, key=lambda c: c.cost.key())
        this = c.cost.total.fir_multiplies_per_input_sample  # the cpu key's first measure
        was = best.cost.total.fir_multiplies_per_input_sample
        if this <= CHEAPER_BY * was:
            c.layout = f"{c.layout} @ {fs / k:.6g} Hz"
            c.reason = (f"output {fs / k:.10g} Hz (/{k}) instead of {fs / d:.10g} Hz (/{d}): "
                        f"{this:.3g} FIR multiplies per input sample, {100 * (1 - this / was):.0f} % less")
            c.meets = False
            out.append(c)
    return out


def _width_that_meets(spec, targets):
    """Smallest coefficient width (up to 6 bits more, at most 32) with which the spec is met."""
    for bits in range(spec.coefficient_bits + 1, min(spec.coefficient_bits + 6, 32) + 1):
        wider = replace(spec, coefficient_bits=bits)
        if any(c.meets for c in _search(wider, targets, max_designed=3)):
            return bits
    return None


def _prime_factors(n):
    """Prime factors of ``n`` (1 for n = 1)."""
    out, p = [], 2
    while p * p <= n:
        while n % p == 0:
            out.append(p)
            n //= p
        p += 1
    if n > 1 or not out:
        out.append(n)
    return out


@planning_budget
def plan_chain(spec):
    """Plan the cheapest chain meeting ``spec``.

    Parameters
    ----------
    spec : ChainSpec

    Returns
    -------
    PlanResult

    Raises
    ------
    ChannelizerError
        When no chain meets the spec; the message says what to change.
    """
    if not isinstance(spec, ChainSpec):
        raise TypeError("spec must be a ChainSpec")
    targets = _targets(spec)
    long_filters = any(r is not None and r[0] > MAX_DESIGNED_L for _, r, _ in targets)
    tried = _search(spec, targets, max_designed=3 if long_filters else MAX_DESIGNED)
    good = sorted((c for c in tried if c.meets), key=lambda c: c.cost.key())
    if not good:
        if spec.objective == "hardware":
            _refuse_for_coefficient_width(spec)
        worst = "; ".join(f"{c.layout}: {c.reason}" for c in tried[:3])
        width = _width_that_meets(spec, targets) if spec.objective == "hardware" else None
        if width is not None:
            raise ChannelizerError(
                f"no chain met rejection {spec.rejection_db:g} dB with {spec.coefficient_bits}-bit coefficients "
                f"({worst}); {width}-bit coefficients meet it"
            )
        raise ChannelizerError(
            f"no chain met ripple {spec.ripple_db:g} dB and rejection {spec.rejection_db:g} dB ({worst}); "
            "relax the targets or widen the output rate"
        )
    # the search sampled each alias band coarsely: the chosen chain is checked in full
    while True:
        best = good[0]
        if not best.full:
            best.prediction = predict(best.stages, fs=spec.input_rate, bandwidth=spec.bandwidth,
                                      stopband_edge=spec.stopband_edge)
            best.reason = _shortfall(best.prediction, spec)
            if best.reason:
                # short at full resolution only: design it again, judged at full resolution
                again = _design_candidate(Candidate(best.layout, best.estimate), *best.design, spec, full=True)
                if again.meets:
                    good = sorted([again] + good[1:], key=lambda c: c.cost.key())
                    continue
        if not best.reason or len(good) == 1:
            break
        best.meets = False
        good.pop(0)
    if best.reason:
        raise ChannelizerError(
            f"no chain met ripple {spec.ripple_db:g} dB and rejection {spec.rejection_db:g} dB "
            f"({best.layout}: {best.reason}); relax the targets or widen the output rate"
        )
    failed = [c for c in tried if not c.meets]
    for c in good[1:]:
        extra = c.cost.total.fir_multiplies_per_input_sample - best.cost.total.fir_multiplies_per_input_sample
        if spec.objective == "hardware":
            more = c.cost.total.multipliers - best.cost.total.multipliers
            c.reason = f"needs {more} more multiplier{'s' if more != 1 else ''}"
        else:
            c.reason = f"costs {extra:.3g} more FIR multiplies per input sample"
    cheaper = []
    if spec.output_rate is None and spec.objective == "cpu":
        cheaper = _cheaper_rates(spec, best, targets[0][0])
    alternatives = cheaper + good[1:] + failed
    plan = _to_plan(best, spec)
    return PlanResult(plan, best, alternatives)


def _refuse_for_coefficient_width(spec):
    """Raise naming the coefficient width when that, not the layout, is the limit.

    Plans the same spec with unquantised taps; when that chain meets it, its taps
    are rounded to widening coefficient widths until one meets the spec too.
    """
    try:
        unquantised = plan_chain(replace(spec, objective="cpu"))
    except ChannelizerError:
        return
    stages = unquantised.plan.stages
    reached = None
    for bits in range(spec.coefficient_bits, 33):
        q = [s if isinstance(s, CicStage) else _quantize(s, bits) for s in stages]
        pred = predict(q, fs=spec.input_rate, bandwidth=spec.bandwidth, stopband_edge=spec.stopband_edge)
        if bits == spec.coefficient_bits:
            reached = pred
        if not _shortfall(pred, spec):
            break
    else:
        return
    raise ChannelizerError(
        f"no chain met ripple {spec.ripple_db:g} dB and rejection {spec.rejection_db:g} dB with "
        f"{spec.coefficient_bits}-bit coefficients: {unquantised.chosen.layout} meets it with exact taps, "
        f"rounded to {spec.coefficient_bits} bits it reaches ripple {reached.passband_ripple_db:.4f} dB, "
        f"rejection {reached.alias_rejection_db:.1f} dB; use --coefficient-bits {bits} or relax the targets"
    )


def _shortfall(pred, spec):
    msgs = []
    # a bit-true chain adds its rounding noise: hardware plans keep a small margin
    need = spec.rejection_db + (HARDWARE_MARGIN_DB if spec.objective == "hardware" else 0.0)
    if pred.passband_ripple_db > spec.ripple_db * (1 + 1e-9):
        msgs.append(f"ripple {pred.passband_ripple_db:.4f} dB over {spec.ripple_db:g}")
    if pred.alias_rejection_db < need:
        msgs.append(f"rejection {pred.alias_rejection_db:.1f} dB under {need:g}")
    if pred.adjacent_rejection_db is not None and pred.adjacent_rejection_db < need:
        msgs.append(f"stopband rejection {pred.adjacent_rejection_db:.1f} dB under {need:g}")
    return ", ".join(msgs)


def _to_plan(cand, spec):
    total = cand.cost.total
    rates = [spec.input_rate]
    for st in cand.stages:
        rates.append(rates[-1] * st.interpolation / st.decimation)
    predicted = {
        "passband_ripple_db": round(cand.prediction.passband_ripple_db, 6),
        "alias_rejection_db": round(cand.prediction.alias_rejection_db, 3),
        "worst_alias_hz": round(cand.prediction.worst_alias_hz, 3),
        "multiplies_per_input_sample": round(total.multiplies_per_input_sample, 6),
        "fir_multiplies_per_input_sample": round(total.fir_multiplies_per_input_sample, 6),
        "multiplies_per_second": round(total.multiplies_per_second, 1),
        "additions_per_second": round(total.additions_per_second, 1),
        "coefficients": total.coefficients,
        "register_bits": total.register_bits,
        "multipliers": total.multipliers,
    }
    spec_d = {
        "ripple_db": float(spec.ripple_db),
        "rejection_db": float(spec.rejection_db),
        "objective": spec.objective,
        "bits": {"input": spec.input_bits, "output": spec.output_bits, "coefficient": spec.coefficient_bits},
    }
    if spec.clock is not None:
        spec_d["clock"] = float(spec.clock)
    if spec.output_rate is not None and rates[-1] != spec.output_rate:
        predicted["output_rate_error_ppm"] = round((rates[-1] / spec.output_rate - 1) * 1e6, 6)
    if spec.stopband_edge is not None:
        spec_d["stopband_edge"] = float(spec.stopband_edge)
        predicted["stopband_rejection_db"] = round(cand.prediction.adjacent_rejection_db, 3)
    return Plan(
        input_rate=float(spec.input_rate),
        output_rate=float(rates[-1]),
        bandwidth=float(spec.bandwidth),
        spec=spec_d,
        stages=cand.stages,
        predicted=predicted,
    )


def plan_layout(spec, layout, resampler=None):
    """Design one given layout ``(R, c, h, d)`` (see :mod:`.layouts`) for ``spec``.

    For comparisons and tests that want a particular chain rather than the
    cheapest; the stages are designed and checked exactly as the search does.

    Returns
    -------
    PlanResult
        With no alternatives.

    Raises
    ------
    ChannelizerError
        When the layout cannot meet the spec.
    """
    est = stage_estimates(layout, fs=spec.input_rate, fp=spec.passband_edge, prot=spec.protected_edge,
                          dp=spec.passband_delta, ds=spec.stopband_delta, edge=spec.stopband_edge,
                          resampler=resampler)
    if est is None:
        raise ChannelizerError(f"layout {describe(layout, resampler, spec.stopband_edge)} cannot serve this spec")
    cand = _design_candidate(Candidate(describe(layout, resampler, spec.stopband_edge), sum(est.values())),
                             layout, resampler, est, spec)
    if cand.meets:
        cand.prediction = predict(cand.stages, fs=spec.input_rate, bandwidth=spec.bandwidth,
                                  stopband_edge=spec.stopband_edge)
        cand.reason = _shortfall(cand.prediction, spec)
        if cand.reason:  # short at full resolution only: design it again, judged there
            cand = _design_candidate(Candidate(cand.layout, cand.estimate), layout, resampler, est, spec, full=True)
    if cand.reason:
        raise ChannelizerError(f"layout {cand.layout} does not meet the spec: {cand.reason}")
    return PlanResult(_to_plan(cand, spec), cand, [])
