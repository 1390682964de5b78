"""Search for the cheapest multistage decimation chain that meets a spec.

Stages, in order: an optional CIC (order N, delay M, decimation R), a CIC-droop
compensating FIR (decimating by 1 or 2), zero or more half-bands by 2, a final
channel FIR (decimating by the rest) and, when the output rate is not an integer
divisor of the input rate, a rational resampler.  The search walks the
factorizations of the integer decimation, designs the most promising candidates
(ranked first by a length estimate), recomputes each candidate's composite
response and keeps the cheapest one that meets the spec.

References
----------
R. E. Crochiere and L. R. Rabiner, "Optimum FIR digital filter implementations for
decimation, interpolation, and narrow-band filtering", IEEE Trans. ASSP 23(5):444-456, 1975.
E. B. Hogenauer, "An economical class of digital filters for decimation and
interpolation", IEEE Trans. ASSP 29(2):155-162, 1981.
"""

from dataclasses import dataclass, field, replace
from fractions import Fraction
import math

import numpy as np

from .cost import chain_cost
from .design import (
    choose_cic_order,
    design_compensator,
    design_decimator,
    design_halfband,
    herrmann_length,
)
from ..errors import ChannelizerError
from ..units import format_hz
from .hogenauer import cic_registers
from .limits import check_time, planning_budget
from .quantize import quantize_taps
from .plan import Plan
from .response import predict
from .spec import ChainSpec
from .stages import CicStage, FirStage, ResamplerStage

__all__ = ["plan_chain", "PlanResult", "Candidate", "MIN_OVERSAMPLING", "default_decimation"]

#: Without an output rate, the planner picks the largest integer decimation whose
#: output rate is at least this multiple of the channel bandwidth: the transition band
#: from bw/2 to fs_out - bw/2 is then at least 25 % of the bandwidth wide.
MIN_OVERSAMPLING = 1.25
MAX_DESIGNED = 12
MAX_INTERPOLATION = 64


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


@dataclass
class PlanResult:
    """The chosen plan and the alternatives the search rejected."""

    plan: Plan
    chosen: Candidate
    alternatives: list = field(default_factory=list)


def _exact_ratio(a, b):
    return Fraction(repr(float(a))) / Fraction(repr(float(b)))


def default_decimation(input_rate, bandwidth):
    """Largest integer decimation leaving an output rate >= MIN_OVERSAMPLING x bandwidth."""
    return max(1, int(math.floor(input_rate / (MIN_OVERSAMPLING * bandwidth) + 1e-9)))


def _divisors(n):
    small = [d for d in range(1, int(math.isqrt(n)) + 1) if n % d == 0]
    return sorted(set(small + [n // d for d in small]))


def _twos(n):
    k = 0
    while n % 2 == 0 and n > 1:
        n //= 2
        k += 1
    return k


def _layouts(d_int, fs, fp):
    """(R, c, h, d_f): CIC decimation (1 = no CIC), compensator decimation (0 = none), half-bands, rest."""
    out = []
    for r in _divisors(d_int):
        if r != 1 and r < 4:
            continue
        rest = d_int // r
        fs_r = fs / r
        if r > 1 and fp >= fs_r / 4:
            continue
        comps = (0,) if r == 1 else (0, 1, 2) if rest % 2 == 0 else (0, 1)
        for c in comps:
            rest_c = rest // (c if c else 1)
            for h in range(0, _twos(rest_c) + 1):
                d_f = rest_c // 2**h
                out.append((r, c, h, d_f))
    return out


def _estimate(layout, fs, fp, dp, ds, *, protect=None, edge=None):
    """Multiplies per input sample estimated from Herrmann's length formula."""
    r, c, h, d_f = layout
    fp0 = fp
    fp = fp if protect is None else protect
    rate = fs / r
    total = 0.0
    if c:
        total += 9.0 / c * rate / fs
        rate /= c
    for _ in range(h):
        if fp >= rate / 4:
            return math.inf
        n = herrmann_length(dp, ds, max(0.5 - 2 * fp / rate, 1e-6))
        total += (n / 2 + 1) / 2 * (rate / fs)
        rate /= 2
    if edge is not None:
        n = herrmann_length(dp, ds, (edge - fp0) / rate)
        total += n / d_f * rate / fs
    elif d_f > 1:
        fo = rate / d_f
        if fo - fp <= fp:
            return math.inf
        n = herrmann_length(dp, ds, (fo - 2 * fp) / rate)
        total += n / d_f * rate / fs
    return total


def _describe(layout, resampler=None, edge=None):
    r, c, h, d_f = layout
    parts = []
    if r > 1:
        parts.append(f"CIC/{r}")
    if c:
        parts.append(f"comp/{c}")
    parts += ["HB/2"] * h
    if d_f > 1 or (edge is not None and not resampler):
        parts.append(f"FIR/{d_f}")
    if resampler:
        parts.append(f"x{resampler[0]}/{resampler[1]}")
    return " > ".join(parts) if parts else "none"


def _quantize(stage, bits):
    """Stage with taps rounded to ``bits``-bit coefficients, DC gain kept where possible."""
    q = quantize_taps(np.asarray(stage.taps), bits)
    ints = np.array(q.integers, dtype=np.int64)
    scale = 2**q.frac_bits
    gain = stage.interpolation if isinstance(stage, ResamplerStage) else 1
    want = gain * scale
    diff = want - int(ints.sum())
    if isinstance(stage, FirStage) and stage.kind == "halfband":
        c = len(ints) // 2
        if diff % 2 == 0 and diff:
            ints[c - 1] += diff // 2
            ints[c + 1] += diff // 2
    elif len(ints) % 2 == 1 and diff:
        ints[len(ints) // 2] += diff
    lim = 2 ** (bits - 1)
    ints = np.clip(ints, -lim, lim - 1)
    taps = tuple(float(i) / scale for i in ints)
    return replace(stage, taps=taps, coefficient_bits=bits, coefficient_frac_bits=q.frac_bits)


def _build(layout, spec, fs, fp, dp_stage, ds, resampler, d_int):
    """Design every stage of one layout; returns (stages, reason).

    Intermediate stages keep ``spec.protected_edge`` free of aliases; with a
    stopband edge, the last stage also attenuates everything beyond it.
    """
    r, c, h, d_f = layout
    prot = spec.protected_edge
    edge = spec.stopband_edge
    stages = []
    rate = fs
    cic = None
    final_fir = d_f > 1 or (edge is not None and not resampler)
    if r > 1:
        order = choose_cic_order(r, fs=fs, fp=prot, ds=ds)
        if order is None:
            return None, "no CIC order up to 8 rejects its alias bands enough"
        regs = cic_registers(order, r, 1, input_bits=spec.input_bits, output_bits=spec.output_bits)
        cic = CicStage(r, order, 1, regs.full_bits, tuple(regs.discarded))
        stages.append(cic)
        rate /= r
    if c:
        comp = design_compensator(cic, fp, c, fs_cic=fs, dp=dp_stage, ds=ds, protect=prot)
        if comp is None:
            return None, "no compensator meets its share of the ripple"
        taps = np.array(comp.taps)
        stages.append(FirStage(c, tuple(taps / taps.sum()), "fir", "compensator"))
        rate /= c
    elif cic is not None and (h or not final_fir):
        droop = 1.0 - abs(cic.response(np.array([fp]), fs=fs)[0])
        if droop > dp_stage:
            return None, f"uncompensated CIC droop {20 * math.log10(1 / (1 - droop)):.3f} dB exceeds its ripple share"
    for _ in range(h):
        hb = design_halfband(prot, fs=rate, delta=min(dp_stage, ds))
        if hb is None:
            return None, f"no half-band serves a {format_hz(2 * prot)} band at {format_hz(rate, 'sps')}"
        g = np.array(hb.taps)
        # exact unit DC gain with the centre tap kept at 0.5 and the zeros kept zero
        others = np.arange(len(g)) != len(g) // 2
        g[others] *= 0.5 / g[others].sum()
        stages.append(FirStage(2, tuple(g), "halfband", "halfband"))
        rate /= 2
    if final_fir:
        last = edge if not resampler else None
        if cic is not None and not c and not h:
            # no separate compensator: the channel FIR undoes the CIC's droop itself
            fir = design_compensator(cic, fp, d_f, fs_cic=fs, dp=dp_stage, ds=ds, fs=rate, protect=prot, stop_edge=last)
        else:
            fir = design_decimator(fp, d_f, fs=rate, dp=dp_stage, ds=ds, protect=prot, stop_edge=last)
        if fir is None:
            return None, f"no channel FIR decimating by {d_f} meets the spec"
        taps = np.array(fir.taps)
        stages.append(FirStage(d_f, tuple(taps / taps.sum()), "fir", "channel"))
        rate /= d_f
    if resampler:
        up, down = resampler
        res = design_decimator(fp, down, fs=rate * up, dp=dp_stage, ds=ds, gain=float(up), protect=prot, stop_edge=edge)
        if res is None:
            return None, f"no resampler filter for x{up}/{down} meets the spec"
        taps = np.array(res.taps)
        stages.append(ResamplerStage(up, down, tuple(taps * up / taps.sum())))
    if not stages or all(isinstance(s, CicStage) for s in stages):
        return None, "a chain needs at least one FIR stage"
    if spec.objective == "hardware":
        stages = [s if isinstance(s, CicStage) else _quantize(s, spec.coefficient_bits) for s in stages]
    return tuple(stages), ""


def _targets(spec):
    """(d_int, resampler (L, M) or None, output rate) options, best first."""
    fs = spec.input_rate
    if spec.output_rate is None:
        d = default_decimation(fs, spec.bandwidth)
        if spec.stopband_edge is not None:
            # the output band must reach beyond the stopband edge
            d = min(d, int(math.ceil(fs / (2.0 * spec.stopband_edge))) - 1)
            if d < 2 and default_decimation(fs, spec.bandwidth) >= 2:
                raise ChannelizerError(
                    f"stopband edge {format_hz(spec.stopband_edge)} needs an output rate above {format_hz(2 * spec.stopband_edge, 'sps')}, "
                    f"which leaves no decimation of {format_hz(fs, 'sps')} by 2 or more; move the edge below {format_hz(fs / 4)} "
                    "or give --output-rate"
                )
        if d < 2:
            raise ChannelizerError(
                f"bandwidth {format_hz(spec.bandwidth)} leaves no room to decimate {format_hz(fs, 'sps')} "
                f"(the output must be at least {MIN_OVERSAMPLING} x the bandwidth); give --output-rate or a narrower channel"
            )
        return [(d, None, fs / d)]
    ratio = _exact_ratio(fs, spec.output_rate)
    if ratio.denominator == 1:
        return [(int(ratio), None, spec.output_rate)]
    options = []
    for d_int in range(int(math.floor(ratio)), 0, -1):
        lm = Fraction(d_int) / ratio  # = L / M, below 1
        up, down = lm.numerator, lm.denominator
        if up > MAX_INTERPOLATION:
            continue
        options.append((up, -d_int, d_int, (up, down)))
    if not options:
        raise ChannelizerError(
            f"output rate {format_hz(spec.output_rate, 'sps', digits=12)} is no simple fraction of the input rate "
            f"{format_hz(fs, 'sps', digits=12)}: reaching it exactly needs interpolation by more than {MAX_INTERPOLATION}; "
            "choose an output rate that is a simpler fraction of the input rate"
        )
    options.sort()
    return [(d_int, lm, spec.output_rate) for _, _, d_int, lm in options[:4]]


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
    fs, fp = spec.input_rate, spec.passband_edge
    ds = spec.stopband_delta
    candidates = []
    for d_int, resampler, fs_out in _targets(spec):
        for layout in _layouts(d_int, fs, spec.protected_edge):
            r, c, h, d_f = layout
            n_ripple = (1 if c or r > 1 else 0) + h + (d_f > 1 or spec.stopband_edge is not None) + (resampler is not None)
            dp_stage = spec.passband_delta / max(n_ripple, 1)
            est = _estimate(layout, fs, fp, dp_stage, ds, protect=spec.protected_edge, edge=spec.stopband_edge)
            if resampler:
                up, down = resampler
                rate = fs / d_int * up
                est += herrmann_length(dp_stage, ds, (rate / down - 2 * fp) / rate) / down * (fs / d_int) / fs
            if math.isfinite(est):
                candidates.append((est, layout, resampler, dp_stage, d_int))
    if not candidates:
        raise ChannelizerError(
            f"no chain can take {format_hz(fs, 'sps')} to a {format_hz(spec.bandwidth)} channel; widen the output rate"
        )
    candidates.sort(key=lambda t: t[0])
    tried = []
    best_cost = math.inf
    for est, layout, resampler, dp_stage, d_int in candidates[:MAX_DESIGNED]:
        check_time()
        if est > 3.0 * best_cost and len(tried) >= 4:
            continue
        cand = Candidate(_describe(layout, resampler, spec.stopband_edge), est)
        stages, reason = None, ""
        for tighten in (1.0, 0.5, 0.25):
            stages, reason = _build(layout, spec, fs, fp, dp_stage * tighten, ds * tighten, resampler, d_int)
            if stages is None:
                break
            pred = predict(stages, fs=fs, bandwidth=spec.bandwidth, stopband_edge=spec.stopband_edge)
            reason = _shortfall(pred, spec)
            if not reason:
                break
        cand.stages = stages or ()
        if stages:
            cand.prediction = pred
            cand.cost = chain_cost(
                stages, fs=fs, objective=spec.objective, clock=spec.clock,
                input_bits=spec.input_bits, coefficient_bits=spec.coefficient_bits,
            )
        cand.reason = reason
        cand.meets = bool(stages) and not reason
        tried.append(cand)
        if cand.meets:
            best_cost = min(best_cost, cand.cost.total.multiplies_per_input_sample)
    good = sorted((c for c in tried if c.meets), key=lambda c: c.cost.key())
    if not good:
        if spec.objective == "hardware":
            _refuse_for_coefficient_width(spec)
        worst = "; ".join(f"{c.layout}: {c.reason}" for c in tried[:3])
        raise ChannelizerError(
            f"no chain met ripple {spec.ripple_db:g} dB and rejection {spec.rejection_db:g} dB ({worst}); "
            "relax the targets or widen the output rate"
        )
    failed = [c for c in tried if not c.meets]
    best = good[0]
    for c in good[1:]:
        extra = c.cost.total.multiplies_per_input_sample - best.cost.total.multiplies_per_input_sample
        if spec.objective == "hardware":
            more = c.cost.total.multipliers - best.cost.total.multipliers
            c.reason = f"needs {more} more multiplier{'s' if more != 1 else ''}"
        else:
            c.reason = f"costs {extra:.3g} more multiplies per input sample"
    alternatives = good[1:] + failed
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
    if pred.passband_ripple_db > spec.ripple_db * (1 + 1e-9):
        msgs.append(f"ripple {pred.passband_ripple_db:.4f} dB over {spec.ripple_db:g}")
    if pred.alias_rejection_db < spec.rejection_db:
        msgs.append(f"rejection {pred.alias_rejection_db:.1f} dB under {spec.rejection_db:g}")
    if pred.adjacent_rejection_db is not None and pred.adjacent_rejection_db < spec.rejection_db:
        msgs.append(f"stopband rejection {pred.adjacent_rejection_db:.1f} dB under {spec.rejection_db:g}")
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
