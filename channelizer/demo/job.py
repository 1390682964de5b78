"""The first-run demo: the invented Ridge 7 relay-site capture, end to end.

Plans a chain for the voice channels and one for the data carrier, surveys the
capture, extracts every channel in one pass, verifies the voice plan with tone
sweeps, and writes one self-contained HTML report.
"""

from dataclasses import dataclass, field
import json
import os
import time

from ..io.atomic import write_text_atomic
from ..io.channels import ChannelEntry
from ..errors import ChannelizerError

__all__ = ["DemoResult", "run_demo", "write_demo_capture", "DEMO_CAPTURE", "VOICE_SPEC", "DATA_SPEC"]

#: The shipped capture, relative to the project folder.
DEMO_CAPTURE = os.path.join("captures", "ridge7-relay")
DEMO_SECONDS = 0.4

#: Voice channels: 11 kHz occupied on a 12.5 kHz raster, to 48 ksps, neighbours removed from 7 kHz.
VOICE_SPEC = dict(input_rate=2.4e6, bandwidth=11e3, output_rate=48e3, stopband_edge=7e3, ripple_db=0.1, rejection_db=80.0)
#: The data carrier: about 34 kHz occupied, to 60 ksps.
DATA_SPEC = dict(input_rate=2.4e6, bandwidth=40e3, output_rate=60e3, ripple_db=0.1, rejection_db=80.0)


def write_demo_capture(base, *, duration=DEMO_SECONDS, seed=7):
    """Generate the scenario and write it as a ci16_le SigMF recording at ``base``.

    Each emission is recorded as a SigMF annotation (label, band edges,
    description), which the demo reads back.
    """
    from .scene import make_scenario
    from ..io.sigmf_writer import write_sigmf

    sc = make_scenario(duration=duration, seed=seed)
    ann = []
    for ch in list(sc.channels) + [sc.interferer]:
        ann.append(
            {
                "core:sample_start": 0,
                "core:sample_count": int(sc.samples.size),
                "core:freq_lower_edge": float(ch.frequency - ch.bandwidth / 2),
                "core:freq_upper_edge": float(ch.frequency + ch.bandwidth / 2),
                "core:label": ch.name,
                "core:description": f"{ch.kind}, {ch.level_dbfs:.1f} dBFS: {ch.description}",
            }
        )
    write_sigmf(
        base,
        sc.samples,
        datatype="ci16_le",
        fs=sc.fs,
        center_frequency=sc.center_frequency,
        global_extra={"core:description": sc.description, "core:author": "channelizer demo generator (invented scene)"},
        annotations=ann,
    )
    return sc


def _annotations(capture):
    data = str(capture.data_path)
    try:
        with open(data[: -len("data")] + "meta") as fh:
            return json.load(fh).get("annotations", [])
    except (OSError, ValueError):
        return []


@dataclass
class DemoResult:
    out_dir: str
    report_path: str
    capture_path: str
    seconds: float
    plans: dict = field(default_factory=dict)
    extraction: object = None
    survey: object = None
    verification: object = None
    figures: dict = field(default_factory=dict)


def _find_capture(capture_path):
    if capture_path:
        return capture_path
    for root in (os.getcwd(), os.path.dirname(os.path.dirname(os.path.abspath(__file__)))):
        cand = os.path.join(root, DEMO_CAPTURE + ".sigmf-meta")
        if os.path.exists(cand):
            return cand
    return None


def _before_after(capture, extraction, entries, out_dir, figures):
    """The channel with the most folding neighbours, by plain decimation and by its chain."""
    from ..checks.plain_decimation import plain_decimation_psd
    from ..run.timing import channel_timing
    from ..views.before_after import plot_before_after

    best = None
    for ch in extraction.channels:
        plan = None if ch.spectrum is None else _plan_of(ch, entries)
        if plan is None:
            continue
        step = channel_timing(plan.stages, fs=capture.sample_rate).step
        if step.denominator == 1 and (best is None or len(ch.alias_audit) > len(best[0].alias_audit)):
            best = (ch, plan, int(step))
    if best is None:
        return
    ch, plan, d = best
    plain = plain_decimation_psd(capture, offset=ch.offset, decimation=d, nperseg=ch.spectrum.nperseg)
    figures["before-after"] = os.path.join(out_dir, "before-after.png")
    figures["before-after-channel"] = ch.name
    plot_before_after(plain, ch.spectrum, name=ch.name, bandwidth=plan.bandwidth, decimation=d, path=figures["before-after"])


def _plan_of(ch, entries):
    from ..run.extraction import load_plan_file

    entry = next((e for e in entries if e.name == ch.name and e.plan), None)
    return None if entry is None else load_plan_file(entry.plan)[0]


def run_demo(out_dir, *, capture_path=None, progress=False):
    """Run the whole job on the demo capture and write ``out_dir/report.html``."""
    from ..io.captures import open_capture
    from ..run.extraction import run_extraction
    from ..planning.planner import plan_chain
    from ..views.plots import plot_plan
    from ..views.report import write_report
    from ..planning.spec import ChainSpec
    from ..checks.survey import survey_capture
    from ..views.survey_plot import plot_survey

    t0 = time.perf_counter()
    if os.path.exists(out_dir) and not os.path.isdir(out_dir):
        raise ChannelizerError(f"{out_dir}: exists and is not a folder")
    os.makedirs(out_dir, exist_ok=True)
    path = _find_capture(capture_path)
    if path is None:
        # no shipped capture beside us (e.g. an installed copy): make it, deterministically
        base = os.path.join(out_dir, "ridge7-relay")
        write_demo_capture(base)
        path = base + ".sigmf-meta"
    capture = open_capture(path)
    ann = _annotations(capture)

    plans = {}
    figures = {}
    for key, kw in (("voice", VOICE_SPEC), ("data", DATA_SPEC)):
        result = plan_chain(ChainSpec(**kw))
        plan_file = os.path.join(out_dir, f"plan-{key}.yaml")
        write_text_atomic(plan_file, result.plan.to_yaml())
        fig = os.path.join(out_dir, f"plan-{key}.png")
        plot_plan(result.plan, fig)
        plans[key] = (result, plan_file)
        figures[f"plan-{key}"] = fig

    survey = survey_capture(capture, resolution=500.0, progress=progress)
    figures["survey"] = os.path.join(out_dir, "survey.png")
    plot_survey(survey, figures["survey"])

    entries = []
    for a in ann:
        label = a.get("core:label", "")
        centre = 0.5 * (a["core:freq_lower_edge"] + a["core:freq_upper_edge"])
        desc = a.get("core:description", "")
        if desc.startswith("nbfm-voice"):
            entries.append(ChannelEntry(label, centre, False, os.path.abspath(plans["voice"][1])))
        elif desc.startswith("qpsk-data"):
            entries.append(ChannelEntry(label, centre, False, os.path.abspath(plans["data"][1])))
    if not entries:
        raise ChannelizerError(f"{path}: no channel annotations; regenerate it with `channelizer demo --write-capture`")
    ch_dir = os.path.join(out_dir, "channels")
    extraction = run_extraction(capture, entries, ch_dir, base_dir="/", progress=progress)
    _before_after(capture, extraction, entries, out_dir, figures)

    verification = None
    try:
        from ..checks.verify import verify_plan
        from ..views.verify_plot import plot_verification
    except ImportError:  # pragma: no cover - verify ships with the package
        verify_plan = None
    if verify_plan is not None:
        verification = verify_plan(plans["voice"][0].plan)
        figures["verify"] = os.path.join(out_dir, "verify-voice.png")
        plot_verification(verification, figures["verify"])

    result = DemoResult(
        out_dir=out_dir,
        report_path=os.path.join(out_dir, "report.html"),
        capture_path=path,
        seconds=0.0,
        plans=plans,
        extraction=extraction,
        survey=survey,
        verification=verification,
        figures=figures,
    )
    result.seconds = time.perf_counter() - t0
    write_report(result, annotations=ann)
    return result
