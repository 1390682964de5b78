"""One self-contained HTML page for the demo: tables, embedded figures, a plain reading."""

import base64
import html
import os

from ..checks.alias_audit import format_attenuation
from ..io.atomic import write_text_atomic
from .table import stage_rows
from ..units import format_hz

__all__ = ["write_report"]

_STYLE = """
body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;max-width:1180px;margin:1.5em auto;padding:0 1em;color:#1d2733;line-height:1.45}
h1{font-size:1.6em;margin-bottom:.2em} h2{margin-top:1.6em;border-bottom:1px solid #ccd5df;padding-bottom:.2em}
table{border-collapse:collapse;margin:.6em 0;font-size:.92em} th,td{border:1px solid #ccd5df;padding:.25em .6em;text-align:right}
th{background:#eef2f6} td.l,th.l{text-align:left} img{max-width:100%;border:1px solid #e3e8ee;margin:.4em 0}
.reading{background:#f4f8ec;border-left:4px solid #7aa33a;padding:.6em 1em} .flag{color:#b03a2e;font-weight:600}
.ok{color:#2d7a3a;font-weight:600} .small{color:#56657a;font-size:.88em}
"""

_SCRIPT = """
window.addEventListener('load', function () {
  var imgs = document.images, ok = 0;
  for (var i = 0; i < imgs.length; i++) { if (imgs[i].complete && imgs[i].naturalWidth > 0) ok++; }
  document.body.setAttribute('data-images-total', imgs.length);
  document.body.setAttribute('data-images-loaded', ok);
});
"""


def _img(path, alt):
    with open(path, "rb") as fh:
        data = base64.b64encode(fh.read()).decode("ascii")
    return f'<img alt="{html.escape(alt)}" src="data:image/png;base64,{data}">'


def _table(head, rows, left=1):
    out = ["<table><tr>"]
    out += [f'<th class="{"l" if i < left else ""}">{html.escape(h)}</th>' for i, h in enumerate(head)]
    out.append("</tr>")
    for r in rows:
        out.append("<tr>" + "".join(f'<td class="{"l" if i < left else ""}">{html.escape(str(c))}</td>' for i, c in enumerate(r)) + "</tr>")
    out.append("</table>")
    return "".join(out)


def _plan_section(key, result, plan_file, fig):
    plan = result.plan
    rows, cost = stage_rows(plan)
    body = [f"<h3>{html.escape(key)} chain: {format_hz(plan.input_rate, 'sps')} to {format_hz(plan.output_rate, 'sps')}, "
            f"channel {format_hz(plan.bandwidth)}</h3>"]
    body.append(
        _table(
            ["#", "stage", "ratio", "in rate", "out rate", "mult / input sample", "detail"],
            [
                [r["stage"], r["kind"], r["ratio"], format_hz(r["rate_in"], "sps"), format_hz(r["rate_out"], "sps"),
                 f"{r['mults_per_in']:.4f}", r["detail"]]
                for r in rows
            ],
            left=3,
        )
    )
    p = plan.predicted
    spec = plan.spec
    facts = [
        ["passband ripple", f"{p['passband_ripple_db']:.4f} dB", f"{spec['ripple_db']:g} dB"],
        ["alias rejection", f"{p['alias_rejection_db']:.2f} dB", f"{spec['rejection_db']:g} dB"],
    ]
    if "stopband_rejection_db" in p:
        facts.append([f"rejection beyond {format_hz(spec['stopband_edge'])}", f"{p['stopband_rejection_db']:.2f} dB", f"{spec['rejection_db']:g} dB"])
    facts.append(["multiplies per input sample", f"{p['multiplies_per_input_sample']:.4f}", "as few as possible"])
    body.append(_table(["figure", "predicted", "target"], facts))
    body.append(f'<p class="small">Plan file: {html.escape(os.path.basename(plan_file))} (identity in each recording\'s metadata).</p>')
    body.append(_img(fig, f"{key} chain response"))
    return "\n".join(body)


def _reading(demo, annotations):
    ex = demo.extraction
    voice = demo.plans["voice"][0].plan
    lines = []
    lines.append(
        f"The voice chain brings the {format_hz(voice.input_rate, 'sps')} capture down to "
        f"{format_hz(voice.output_rate, 'sps')} in {len(voice.stages)} stages for "
        f"{voice.predicted['multiplies_per_input_sample']:.2f} multiplies per input sample; anything that would fold "
        f"onto a channel is predicted to arrive at least {voice.predicted['alias_rejection_db']:.0f} dB down."
    )
    v = demo.verification
    if v is not None:
        verdict = {"inconclusive": "is neither shown to meet nor to miss (measurement floor)"}.get(v.verdict, v.verdict)
        lines.append(
            f"Tone sweeps through the same code that extracted the channels measured {v.measured_rejection_db:.1f} dB of "
            f"alias rejection and {v.measured_ripple_db:.3f} dB of passband ripple: the chain {verdict} its targets."
        )
    flagged = [(c.name, a) for c in ex.channels for a in c.alias_audit if a["above_noise"]]
    folding = [(c.name, a) for c in ex.channels for a in c.alias_audit]
    if folding:
        worst = max(folding, key=lambda t: t[1]["output_level_dbfs_per_hz"] - (t[1]["output_level_dbfs_per_hz"] if t[1]["output_noise_floor_dbfs_per_hz"] is None else t[1]["output_noise_floor_dbfs_per_hz"]))
        name, a = worst
        margin = (a["output_noise_floor_dbfs_per_hz"] or 0) - a["output_level_dbfs_per_hz"]
        lines.append(
            f"The strongest signal folding onto a channel is the one at {format_hz(a['signal_center_hz'])} "
            f"({a['signal_power_dbfs']:.1f} dBFS) onto {name}: the chain attenuates it by {format_attenuation(a)}, "
            f"so it arrives {margin:.0f} dB below that channel's noise floor."
        )
    if flagged:
        lines.append(f'<span class="flag">{len(flagged)} folded signal(s) rise above an output noise floor; see the audits below.</span>')
    else:
        lines.append('<span class="ok">No folded signal rises above any channel\'s output noise floor.</span>')
    by_name = {c.name: c for c in ex.channels}
    weak = by_name.get("ridge-ch5")
    if weak is not None:
        lines.append(
            f"ridge-ch5 is 44 dB weaker than its neighbour 12.5 kHz away; with the neighbours removed from 7 kHz, its "
            f"recording holds {weak.mean_power_dbfs:.1f} dBFS on average (it is keyed, so quieter than its on-air level)."
        )
    return "<p>" + "</p><p>".join(lines) + "</p>"


def write_report(demo, *, annotations=()):
    """Write ``demo.report_path``."""
    ex = demo.extraction
    cap = ex.capture
    parts = [
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>",
        "<title>channelizer demo report: Ridge 7 relay site</title>",
        f"<style>{_STYLE}</style><script>{_SCRIPT}</script></head><body>",
        "<h1>Ridge 7 relay site: channel extraction report</h1>",
        f"<p class='small'>An invented scene: {html.escape(str(cap.metadata.get('core:description', '')))}</p>",
        f"<p class='small'>Capture {html.escape(os.path.basename(cap.path))}: {cap.num_samples} samples at "
        f"{format_hz(cap.sample_rate, 'sps')}, centre {format_hz(cap.center_frequency)}. Whole job in {demo.seconds:.1f} s.</p>",
        "<h2>Reading</h2>",
        f"<div class='reading' id='reading'>{_reading(demo, annotations)}</div>",
        "<h2>Chains</h2>",
    ]
    for key, (result, plan_file) in demo.plans.items():
        parts.append(_plan_section(key, result, plan_file, demo.figures[f"plan-{key}"]))
    sv = demo.survey
    parts.append("<h2>Survey of the capture</h2>")
    parts.append(
        f"<p>Welch average with a {sv.psd.window} window and {format_hz(sv.psd.bin_hz, digits=4)} bins; noise floor "
        f"{sv.noise_floor_dbfs_per_hz:.1f} dBFS/Hz; occupied bandwidth is the 99 % power bandwidth.</p>"
    )
    parts.append(
        _table(
            ["#", "centre", "occupied bandwidth", "power", "SNR"],
            [[i, format_hz(s.center_hz, resolution=sv.psd.bin_hz), format_hz(s.occupied_bandwidth_hz, resolution=sv.psd.bin_hz),
              f"{s.power_dbfs:.1f} dBFS", f"{s.snr_db:.1f} dB"]
             for i, s in enumerate(sv.signals, 1)],
        )
    )
    parts.append(_img(demo.figures["survey"], "survey: spectrum and spectrogram"))
    parts.append("<h2>Extracted channels</h2>")
    parts.append(
        _table(
            ["channel", "centre", "rate", "samples", "mean power", "delay (output samples)", "folding signals", "above noise"],
            [[c.name, format_hz(c.center_frequency, digits=10), format_hz(c.output_rate, "sps"), c.samples, f"{c.mean_power_dbfs:.1f} dBFS",
              f"{c.group_delay_output_samples:.1f}", len(c.alias_audit), sum(a["above_noise"] for a in c.alias_audit)]
             for c in ex.channels],
        )
    )
    ov = os.path.join(os.path.dirname(ex.summary_path), "overview.png")
    if os.path.exists(ov):
        parts.append(_img(ov, "input spectrum with the extracted channels"))
    if "before-after" in demo.figures:
        parts.append(f"<p>Before and after: channel {html.escape(demo.figures['before-after-channel'])} taken by plain "
                     "decimation (every D-th sample, no filter), where its neighbours fold in, and through its chain.</p>")
        parts.append(_img(demo.figures["before-after"], "the channel before and after the chain"))
    for c in ex.channels:
        parts.append(f"<h3 id='ch-{html.escape(c.name)}'>{html.escape(c.name)}</h3>")
        if c.alias_audit:
            parts.append(
                _table(
                    ["folding signal", "its power", "attenuation", "arrives at", "output noise", "lands at"],
                    [[format_hz(a["signal_center_hz"]), f"{a['signal_power_dbfs']:.1f} dBFS", format_attenuation(a),
                      f"{a['output_level_dbfs_per_hz']:.1f} dBFS/Hz",
                      "-" if a["output_noise_floor_dbfs_per_hz"] is None else f"{a['output_noise_floor_dbfs_per_hz']:.1f} dBFS/Hz",
                      format_hz(a['landing_offset_hz'], signed=True)]
                     for a in c.alias_audit],
                )
            )
        png = os.path.join(os.path.dirname(ex.summary_path), f"{c.name}.png")
        if os.path.exists(png):
            parts.append(_img(png, f"{c.name} output spectrum"))
    v = demo.verification
    if v is not None:
        parts.append("<h2>Verification of the voice chain</h2>")
        parts.append(
            _table(
                ["figure", "measured", "predicted", "target"],
                [
                    ["passband ripple", f"{v.measured_ripple_db:.4f} dB", f"{v.predicted_ripple_db:.4f} dB", f"{demo.plans['voice'][0].plan.spec['ripple_db']:g} dB"],
                    ["alias rejection", f"{v.measured_rejection_db:.2f} dB", f"{v.predicted_rejection_db:.2f} dB", f"{demo.plans['voice'][0].plan.spec['rejection_db']:g} dB"],
                ],
            )
        )
        parts.append(_img(demo.figures["verify"], "measured tones over the predicted response"))
    parts.append(
        "<p class='small'>Receiving and recording radio signals can be regulated: follow your local spectrum and "
        "privacy rules. This scene and its signals are invented.</p></body></html>"
    )
    write_text_atomic(demo.report_path, "\n".join(parts))
    return demo.report_path
