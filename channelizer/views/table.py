"""Plain-text tables of a plan's stages, predicted figures and alternatives."""

import math

from ..planning.cost import chain_cost
from ..planning.hogenauer import planned_cic
from ..planning.response import fold, path_of, resampler_of
from ..planning.stages import CicStage, ResamplerStage, chain_rates
from ..units import format_hz

__all__ = ["stage_rows", "format_plan", "format_alternatives"]


def _label(st):
    if isinstance(st, CicStage):
        return "CIC"
    if isinstance(st, ResamplerStage):
        return "resampler"
    return {"compensator": "compensator", "halfband": "half-band", "channel": "channel FIR"}.get(st.role, st.kind)


def _detail(st, bits, index, count):
    if isinstance(st, CicStage):
        # the widths the bit-true chain and the export build (one rule: hogenauer.planned_cic)
        built = planned_cic(st.order, st.decimation, st.differential_delay, bits=bits,
                            first=index == 0, last=index == count - 1)
        return f"N={st.order} M={st.differential_delay}, {built.describe()}"
    q = f", {st.coefficient_bits}-bit coefficients" if st.coefficient_bits else ""
    if isinstance(st, ResamplerStage):
        return f"up {st.interpolation}, down {st.decimation}{q}"
    return f"{len(st.taps)} taps{q}"


def _overall_ratio(stages):
    """The chain's rate change as a ratio: ``/245``, or ``x3/4`` through a rational stage."""
    up = down = 1
    for st in stages:
        up, down = up * st.interpolation, down * st.decimation
    g = math.gcd(up, down)
    up, down = up // g, down // g
    return f"/{down}" if up == 1 else f"x{up}/{down}"


def stage_rows(plan):
    """One dict per stage with the columns of the printed table."""
    spec = plan.spec
    cost = chain_cost(
        plan.stages,
        fs=plan.input_rate,
        objective=spec.get("objective", "cpu"),
        clock=spec.get("clock"),
        input_bits=spec["bits"]["input"],
        coefficient_bits=spec["bits"].get("coefficient", 18),
    )
    rates = chain_rates(plan.stages, fs=plan.input_rate)
    rows = []
    for i, (st, c) in enumerate(zip(plan.stages, cost.stages)):
        ratio = f"/{st.decimation}" if st.interpolation == 1 else f"x{st.interpolation}/{st.decimation}"
        rows.append(
            {
                "stage": i + 1,
                "kind": _label(st),
                "ratio": ratio,
                "rate_in": rates[i],
                "rate_out": rates[i + 1],
                "detail": _detail(st, spec["bits"], i, len(plan.stages)),
                "mults_per_in": c.multiplies_per_input_sample,
                "mults_per_s": c.multiplies_per_second,
                "adds_per_s": c.additions_per_second,
                "multipliers": c.multipliers,
            }
        )
    return rows, cost


def format_plan(plan):
    """The readable summary printed by ``plan`` and ``show``."""
    rows, cost = stage_rows(plan)
    spec = plan.spec
    pred = plan.predicted
    hw = spec.get("objective") == "hardware"
    lines = [
        f"Chain: {format_hz(plan.input_rate, 'sps')} -> {format_hz(plan.output_rate, 'sps')} "
        f"({_overall_ratio(plan.stages)}), channel {format_hz(plan.bandwidth)} "
        f"(passband +-{format_hz(plan.bandwidth / 2)}), objective {spec.get('objective', 'cpu')}",
        "",
    ]
    head = f"{'#':>2}  {'stage':<12} {'ratio':<7} {'in rate':>14} {'out rate':>14}  {'mult/in':>8} {'Mmult/s':>9}"
    if hw:
        head += f" {'mults':>5}"
    head += "  detail"
    lines.append(head)
    lines.append("-" * len(head.rstrip()) + "-" * 24)
    for r in rows:
        line = (
            f"{r['stage']:>2}  {r['kind']:<12} {r['ratio']:<7} {format_hz(r['rate_in'], 'sps'):>14} "
            f"{format_hz(r['rate_out'], 'sps'):>14}  {r['mults_per_in']:>8.4f} {r['mults_per_s'] / 1e6:>9.3f}"
        )
        if hw:
            line += f" {r['multipliers']:>5}"
        lines.append(line + "  " + r["detail"])
    t = cost.total
    if "output_rate_error_ppm" in pred:
        lines += ["", f"Output rate {format_hz(plan.output_rate, 'sps', digits=10)}, {pred['output_rate_error_ppm']:+.3f} ppm from the "
                      "rate asked for (the nearest simple L/M)"]
    lines += [
        "",
        f"Predicted passband ripple  {pred['passband_ripple_db']:.4f} dB   (target {spec['ripple_db']:g} dB)",
        f"Predicted alias rejection  {pred['alias_rejection_db']:.2f} dB   (target {spec['rejection_db']:g} dB)"
        + (f", worst at {worst_path_text(plan, pred['worst_alias_hz'])}" if "worst_alias_hz" in pred else ""),
    ]
    if "stopband_rejection_db" in pred:
        lines.append(
            f"Predicted stopband rejection {pred['stopband_rejection_db']:.2f} dB beyond {format_hz(spec['stopband_edge'])} "
            f"from the channel centre (target {spec['rejection_db']:g} dB)"
        )
    lines += [
        f"Cost  {t.multiplies_per_input_sample:.4f} multiplies per input sample"
        + ("" if hw else f" ({t.fir_multiplies_per_input_sample:.4f} in the FIRs, the CIC left out)")
        + ", "
        f"{t.multiplies_per_second / 1e6:.3f} M multiplies/s, {t.additions_per_second / 1e6:.3f} M additions/s, "
        f"{t.coefficients} coefficients, {t.register_bits} register bits"
        + (f", {t.multipliers} multiplier{'s' if t.multipliers != 1 else ''} at {format_hz(spec.get('clock') or plan.input_rate)}" if hw else ""),
    ]
    return "\n".join(lines)


def worst_path_text(plan, f):
    """Where the worst alias is, and whether it is an alias or an image of the rational stage."""
    k = path_of(plan.stages, f, fs=plan.input_rate, bandwidth=plan.bandwidth)
    if k == 0:
        return f"{format_hz(f)} from centre"
    res, fs_r = resampler_of(plan.stages, fs=plan.input_rate)
    land = float(fold(f + k * fs_r, plan.output_rate))
    return (f"{format_hz(f)} from centre on image path {k} of the x{res.interpolation}/{res.decimation} stage, "
            f"not an alias (its filter sees {format_hz(f + k * fs_r)}; lands at {format_hz(land)})")


def format_alternatives(alternatives, limit=5):
    """The next cheapest chains the search rejected, and why."""
    if not alternatives:
        return ""
    lines = ["", "Also considered:"]
    for c in alternatives[:limit]:
        lines.append(f"  {c.layout:<36} {c.reason}")
    return "\n".join(lines)
