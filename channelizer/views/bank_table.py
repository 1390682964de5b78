"""Plain-text summary of a filter-bank plan (printed by ``plan --spacing`` and ``show``)."""

from ..planning.plan import Plan
from ..units import format_hz
from .table import stage_rows

__all__ = ["format_bank_plan"]


def format_bank_plan(plan):
    """The readable summary of a :class:`~channelizer.planning.bank.BankPlan`."""
    fs, pred, spec = plan.input_rate, plan.predicted, plan.spec
    offsets = plan.offsets()
    K = len(plan.prototype) // plan.bins
    lines = [
        f"Filter bank: {format_hz(fs, 'sps')} -> {plan.count} channels of {format_hz(plan.bandwidth)} every "
        f"{format_hz(plan.spacing)} ({offsets[0]:+,.0f} to {offsets[-1]:+,.0f} Hz from the centre), "
        f"{format_hz(plan.output_rate, 'sps')} each",
        "",
        f"bank    {plan.bins} bins {format_hz(fs / plan.bins)} apart, oversampling {plan.oversampling} "
        f"(decimation {plan.decimation}, bin rate {format_hz(plan.bin_rate, 'sps')}), "
        f"prototype {len(plan.prototype)} taps (K={K})",
    ]
    if plan.stages:
        fine = Plan(plan.bin_rate, plan.output_rate, plan.bandwidth, dict(plan.spec), tuple(plan.stages), {})
        rows, _ = stage_rows(fine)
        for r in rows:
            lines.append(
                f"then    {r['kind']:<12} {r['ratio']:<6} {format_hz(r['rate_in'], 'sps'):>12} -> "
                f"{format_hz(r['rate_out'], 'sps'):>12}  {r['detail']}"
            )
    else:
        lines.append("then    nothing: each channel is its bin's output")
    residuals = {round(r, 6) for r in plan.residuals()}
    if residuals != {0.0}:
        lines.append(f"        residual tuning by an NCO at the bin rate ({len(residuals)} distinct offsets from bin centres)")
    chains = pred.get("chains_multiplies_per_input_sample", -1.0)
    lines += [
        "",
        f"Predicted passband ripple  {pred['passband_ripple_db']:.4f} dB   (target {spec['ripple_db']:g} dB)",
        f"Predicted alias rejection  {pred['alias_rejection_db']:.2f} dB   (target {spec['rejection_db']:g} dB)",
        f"Predicted adjacent-channel rejection  {pred['adjacent_rejection_db']:.2f} dB over the neighbours' passbands "
        f"(target {spec['rejection_db']:g} dB)",
        f"Cost  {pred['multiplies_per_input_sample']:.4f} multiplies per input sample for all {plan.count} channels"
        + (f" (one chain per channel: {chains:.4g})" if chains >= 0 else ""),
    ]
    return "\n".join(lines)
