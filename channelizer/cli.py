"""Command line: a thin shell over the library.

Every command turns :class:`~channelizer.errors.ChannelizerError` (bad input) into
one ``error:`` line on stderr and exit status 2.
"""

import argparse
import math
import os
import sys

# One BLAS thread: the stages run many small matrix products, which OpenBLAS's own
# threads slow down badly on a busy machine.  Set before numpy is first imported.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

from .errors import ChannelizerError
from .units import parse_frequency

__all__ = ["main", "build_parser"]

#: Exit status of a check whose measurement cannot decide (0 meets, 1 misses, 2 bad input).
EXIT_INCONCLUSIVE = 3


def _rate(name, *, allow_negative=False):
    def parse(text):
        try:
            return parse_frequency(text, name=name, allow_negative=allow_negative)
        except ChannelizerError as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None

    parse.__name__ = name
    return parse


def _positive_float(text):
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not v > 0 or v != v or v == float("inf"):
        raise argparse.ArgumentTypeError(f"{text!r} must be a positive finite number")
    return v


def _bits(text):
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number of bits") from None
    if not 2 <= v <= 32:
        raise argparse.ArgumentTypeError(f"{v} bits is outside 2..32")
    return v


def read_plan(path):
    """Load a plan file, naming it in any error."""
    from .run.extraction import load_plan_file

    return load_plan_file(path)[0]


def _cmd_plan(args):
    from .io.atomic import write_text_atomic

    if args.spacing is not None or args.first is not None or args.last is not None:
        return _plan_bank(args)
    from .planning.planner import plan_chain
    from .planning.spec import ChainSpec
    from .views.table import format_alternatives, format_plan

    if args.clock is not None and args.objective != "hardware":
        raise ChannelizerError(
            "--clock is the hardware clock that multipliers are shared at; it only applies with --objective hardware "
            "(the cpu objective counts multiplies per second and has no clock)"
        )
    _check_outputs([args.out, args.plot], figures=[args.plot])
    spec = ChainSpec(
        input_rate=args.rate,
        bandwidth=args.bandwidth,
        output_rate=args.output_rate,
        ripple_db=args.ripple_db,
        rejection_db=args.rejection_db,
        input_bits=args.input_bits,
        output_bits=args.output_bits,
        coefficient_bits=args.coefficient_bits,
        objective=args.objective,
        clock=args.clock,
        stopband_edge=args.stopband_edge,
    )
    result = plan_chain(spec)
    print(format_plan(result.plan))
    alt = format_alternatives(result.alternatives)
    if alt:
        print(alt)
    if args.out:
        write_text_atomic(args.out, result.plan.to_yaml())
        print(f"\nplan written to {args.out}")
    if args.plot:
        from .views.plots import plot_plan

        plot_plan(result.plan, args.plot)
        print(f"response plot written to {args.plot}")
    return 0


def _plan_bank(args):
    from .io.atomic import write_text_atomic
    from .planning.bank import BankPlan
    from .planning.bank_planner import BankSpec, plan_bank
    from .views.bank_table import format_bank_plan
    from .views.table import format_alternatives, format_plan

    if args.spacing is None:
        raise ChannelizerError("--first and --last need --spacing (the raster of a filter bank)")
    for opt in ("stopband_edge", "clock"):
        if getattr(args, opt) is not None:
            raise ChannelizerError(f"--{opt.replace('_', '-')} does not apply to a bank plan (--spacing)")
    if args.objective != "cpu":
        raise ChannelizerError("a bank plan is costed for --objective cpu only")
    spec = BankSpec(
        input_rate=args.rate, bandwidth=args.bandwidth, spacing=args.spacing, output_rate=args.output_rate,
        first=args.first, last=args.last, ripple_db=args.ripple_db, rejection_db=args.rejection_db,
        input_bits=args.input_bits, output_bits=args.output_bits,
    )
    _check_outputs([args.out, args.plot], figures=[args.plot])
    result = plan_bank(spec)
    bank = isinstance(result.plan, BankPlan)
    print(format_bank_plan(result.plan) if bank else format_plan(result.plan))
    if not bank:
        print(f"\n{result.channels} channels: one chain each is cheaper than a bank; run extract with this plan and --channel")
    print(format_alternatives(result.alternatives, limit=6))
    if args.out:
        write_text_atomic(args.out, result.plan.to_yaml())
        print(f"\nplan written to {args.out}")
    if args.plot:
        from .views.plots import plot_plan

        plot_plan(result.plan.channel_plan() if bank else result.plan, args.plot)
        print(f"response plot written to {args.plot}")
    return 0


def _cmd_show(args):
    from .planning.bank import BankPlan
    from .run.bank_extraction import load_any_plan_file
    from .views.table import format_plan

    plan = load_any_plan_file(args.plan)[0]
    _check_outputs([args.plot], figures=[args.plot], inputs=[args.plan])
    if isinstance(plan, BankPlan):
        from .views.bank_table import format_bank_plan

        print(format_bank_plan(plan))
        plan = plan.channel_plan()
    else:
        print(format_plan(plan))
    if args.plot:
        from .views.plots import plot_plan

        plot_plan(plan, args.plot)
        print(f"response plot written to {args.plot}")
    return 0


def _open_capture(args):
    from .io.captures import open_capture

    return open_capture(
        args.capture,
        input_format=getattr(args, "input_format", None),
        rate=getattr(args, "rate", None),
        center=getattr(args, "center", None),
    )


def _read_text(path, what):
    from .io.paths import read_regular_file

    data = read_regular_file(path, what=what, limit=16 * 2**20)
    if len(data) > 16 * 2**20:
        raise ChannelizerError(f"{path}: larger than 16 MiB; not a {what}")
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError:
        raise ChannelizerError(f"{path}: not UTF-8 text; not a {what}") from None


def _cmd_extract(args):
    from .io.channels import parse_channel_list, parse_channel_option
    from .run.extraction import run_extraction

    entries = [parse_channel_option(c) for c in args.channel or []]
    base = "."
    if args.channels:
        entries += parse_channel_list(_read_text(args.channels, "channel list"), source=args.channels)
        base = os.path.dirname(os.path.abspath(args.channels))
    bank = loaded = None
    if args.plan:
        from .planning.bank import BankPlan
        from .run.bank_extraction import load_any_plan_file

        loaded = load_any_plan_file(args.plan)
        bank = loaded if isinstance(loaded[0], BankPlan) else None
    if not entries and bank is None:
        raise ChannelizerError("no channel to extract: give --channel NAME=FREQ or --channels FILE")
    if bank is not None and args.bit_true:
        raise ChannelizerError("--bit-true does not cover filter-bank plans yet; drop --bit-true or plan a chain")
    capture = _open_capture(args)
    common = dict(
        output_format=args.output_format,
        bit_true=args.bit_true,
        plots=not args.no_plots,
        progress=not args.quiet,
        nonfinite="zero" if args.zero_nonfinite else "error",
        block_size=args.block_size,
        trim_settling=args.trim_settling,
        audit_resolution=args.audit_resolution,
        workers=args.workers,
        scheduler=args.scheduler,
        inputs=[args.channels] if args.channels else [],
    )
    if bank is not None:
        from .run.bank_extraction import run_bank_extraction

        result = run_bank_extraction(capture, bank[0], args.out, entries=entries, plan_id=bank[1], plan_source=args.plan, **common)
    else:
        result = run_extraction(capture, entries, args.out, plan_path=args.plan, base_dir=base,
                                preloaded={args.plan: loaded} if loaded else None, **common)
    from .units import format_hz

    if capture.nonfinite_count:
        print(f"warning: {capture.nonfinite_count} non-finite samples were replaced by zero", file=sys.stderr)
    mode = "bit-true" if args.bit_true else "filter-bank" if bank is not None else "float"
    print(
        f"{capture.path}: {result.input_samples} samples at {format_hz(capture.sample_rate, 'sps')}, "
        f"{len(result.channels)} channel(s), {mode} path, {result.seconds:.2f} s "
        f"({result.input_samples / max(result.seconds, 1e-9) / 1e6:.1f} Msps)"
    )
    print(f"{'channel':<16} {'centre':>16} {'rate':>12} {'samples':>10} {'power':>11} {'delay':>9}  folding signals")
    for ch in result.channels:
        centre = format_hz(ch.center_frequency, digits=10) if ch.center_frequency is not None else format_hz(ch.offset, signed=True)
        flagged = sum(1 for a in ch.alias_audit if a["above_noise"])
        power = f"{ch.mean_power_dbfs:>7.2f}" if math.isfinite(ch.mean_power_dbfs) else f"{'n/a':>7}"
        print(
            f"{ch.name:<16} {centre:>16} {format_hz(ch.output_rate, 'sps'):>12} {ch.samples:>10} "
            f"{power} dBFS {ch.group_delay_output_samples:>9.2f}  "
            f"{len(ch.alias_audit)} ({flagged} above the output noise)"
        )
    print("power: mean after each chain has settled (from output sample power_from_sample in the summary)")
    print(f"summary written to {result.summary_path}")
    for ch in result.channels:
        if ch.clipped:
            # the largest component that fits a 16-bit word is 32767/32768 of full scale
            fit = 20 * math.log10((1 - 2.0**-15) / ch.peak)
            print(f"warning: channel {ch.name}: {ch.clipped} of {ch.samples} samples clipped at the {args.output_format} "
                  f"rails; a gain of {fit:.1f} dB before writing would fit them", file=sys.stderr)
    return _extract_warnings(result, fail_on_alias=args.fail_on_alias)


def _extract_warnings(result, *, fail_on_alias):
    """Warnings on stderr; exit status 1 when a signal folds above the noise and that is to fail."""
    from .units import format_hz

    for line in result.warnings:
        print(f"warning: {line}", file=sys.stderr)
    folded = [(ch.name, a) for ch in result.channels for a in ch.alias_audit if a["above_noise"]]
    for name, a in folded:
        print(
            f"warning: channel {name}: the signal at {format_hz(a['signal_center_hz'])} folds onto it at "
            f"{a['output_level_dbfs_per_hz']:.1f} dBFS/Hz, {a['output_level_dbfs_per_hz'] - a['output_noise_floor_dbfs_per_hz']:.1f} dB "
            "above the output noise floor",
            file=sys.stderr,
        )
    return 1 if folded and fail_on_alias else 0


def _add_capture_options(p):
    p.add_argument("capture", metavar="CAPTURE", help="SigMF recording (.sigmf-meta/.sigmf-data), two-channel WAV, or raw IQ")
    p.add_argument("--input-format", metavar="DTYPE", help="datatype of a raw file, e.g. ci16_le, cf32_le, cu8")
    p.add_argument("--rate", type=_rate("rate"), help="sample rate of a raw file in samples/s (e.g. 2.4M); must agree with the file's own rate if it has one")
    p.add_argument("--center", type=_rate("center"), help="centre frequency of a raw file in Hz (e.g. 161M; optional: without it, frequencies are offsets)")


def _register_extract(sub):
    e = sub.add_parser("extract", help="extract channels from a capture with a plan's chain", description="Run a plan's exact chain over a capture and write each channel as its own SigMF recording.")
    _add_capture_options(e)
    e.add_argument("--plan", metavar="PLAN.yaml", help="plan for every channel without its own")
    e.add_argument("--channel", action="append", metavar="NAME=FREQ", help="channel to extract; FREQ absolute when the capture states its centre, +/- for an offset (repeatable)")
    e.add_argument("--channels", metavar="FILE", help="YAML channel list: name, frequency, optional plan")
    e.add_argument("--out", required=True, metavar="DIR", help="output folder")
    e.add_argument("--output-format", choices=["cf32_le", "ci16_le"], default="cf32_le", help="SigMF datatype of the channel recordings: cf32_le (32-bit float, default) or ci16_le (16-bit integers, full scale 1.0 = 32768, saturating)")
    e.add_argument("--bit-true", action="store_true", help="integer arithmetic as hardware would do it")
    e.add_argument("--no-plots", action="store_true", help="skip overview.png and the per-channel plots")
    e.add_argument("--fail-on-alias", action="store_true", help="exit with status 1 when a signal folds onto a channel above its output noise floor (a warning either way)")
    e.add_argument("--trim-settling", action="store_true", help="leave out each channel's start-up samples (the chain's settling length) instead of marking them with an annotation")
    e.add_argument("--zero-nonfinite", action="store_true", help="replace NaN/inf samples by zero instead of refusing")
    e.add_argument("--audit-resolution", type=_rate("audit resolution"), default=None, metavar="HZ", help="bin spacing of the input spectrum the alias audit reads (default: from the narrowest channel, bandwidth / 32)")
    e.add_argument("--block-size", type=int, default=None, help=argparse.SUPPRESS)
    e.add_argument("--quiet", action="store_true", help="no progress bar on stderr")
    e.add_argument("--workers", type=int, metavar="N", help="run on a local dask.distributed cluster of N processes (optional extra: pip install 'channelizer[cluster]')")
    e.add_argument("--scheduler", metavar="ADDRESS", help="run on a running dask.distributed cluster, e.g. tcp://scheduler-host:8786 (the capture must be readable by every worker)")
    e.set_defaults(func=_cmd_extract)


def _cmd_survey(args):
    from .io.atomic import write_text_atomic
    from .io.channels import dump_channel_list
    from .checks.survey import format_survey, survey_capture
    from .views.survey_plot import plot_survey

    capture = _open_capture(args)
    _check_outputs([args.plot, args.channels_out], figures=[args.plot], inputs=[capture.path, capture.data_path])
    result = survey_capture(capture, resolution=args.resolution, threshold_db=args.threshold_db, progress=not args.quiet)
    print(format_survey(result))
    if args.plot:
        plot_survey(result, args.plot)
        print(f"\nsurvey plot written to {args.plot}")
    rows = result.channel_list()
    if args.plans_out:
        from .run.survey_plans import plan_signals

        list_dir = os.path.dirname(os.path.abspath(args.channels_out)) if args.channels_out else None
        rows, problems = plan_signals(rows, args.plans_out, fs=capture.sample_rate, list_dir=list_dir,
                                      inputs=[capture.path, capture.data_path], others=[args.plot, args.channels_out])
        for line in problems:
            print(f"warning: {line}", file=sys.stderr)
        print(f"{sum('plan' in r for r in rows)} plan(s) written to {args.plans_out}")
    if args.channels_out:
        write_text_atomic(args.channels_out, dump_channel_list(rows))
        hint = "edit names" if args.plans_out else "edit names, add plan: to each"
        print(f"channel list written to {args.channels_out} ({hint})")
    return 0


def _register_survey(sub):
    v = sub.add_parser("survey", help="spectrum, spectrogram and occupied signals of a capture", description="Survey a capture: Welch PSD, spectrogram, noise floor and the occupied signals.")
    _add_capture_options(v)
    v.add_argument("--plot", metavar="FILE.png", help="write the PSD and spectrogram figure")
    v.add_argument("--resolution", type=_rate("resolution"), help="frequency resolution in Hz (SI suffixes allowed, e.g. 500 or 1k): the Welch segment is the next power of two at or above rate / resolution, so bins come out at or below it (default: rate / 4096)")
    v.add_argument("--threshold-db", type=_positive_float, default=10.0, help="detection threshold in dB above the local noise floor, for the strongest bins and for the signal's power over the noise in its occupied band (default 10)")
    v.add_argument("--channels-out", metavar="FILE", help="write the detected signals as a channel list for extract --channels")
    v.add_argument("--plans-out", metavar="DIR", help="plan a chain for each detected signal from its occupied bandwidth and write DIR/NAME.yaml (named in the --channels-out list)")
    v.add_argument("--quiet", action="store_true", help="no progress bar")
    v.set_defaults(func=_cmd_survey)


def _cmd_demo(args):
    from .demo.job import run_demo, write_demo_capture

    if args.write_capture:
        folder = os.path.dirname(os.path.abspath(args.write_capture))
        try:
            os.makedirs(folder, exist_ok=True)
        except OSError as exc:
            raise ChannelizerError(f"{folder}: cannot create the folder ({exc.strerror})") from None
        write_demo_capture(args.write_capture)
        print(f"demo capture written to {args.write_capture}.sigmf-meta / .sigmf-data")
        return 0
    result = run_demo(args.out, capture_path=args.capture, progress=not args.quiet)
    print(f"capture   {result.capture_path}")
    for key, (res, path) in result.plans.items():
        p = res.plan
        print(f"plan      {key}: {res.chosen.layout}, {p.predicted['multiplies_per_input_sample']:.3f} mult/input, "
              f"rejection {p.predicted['alias_rejection_db']:.1f} dB -> {path}")
    print(f"survey    {len(result.survey.signals)} signals above {result.survey.noise_floor_dbfs_per_hz:.1f} dBFS/Hz + 10 dB")
    ex = result.extraction
    flagged = sum(a["above_noise"] for c in ex.channels for a in c.alias_audit)
    print(f"extract   {len(ex.channels)} channels in one pass -> {os.path.dirname(ex.summary_path)} ({flagged} folded signals above noise)")
    if result.raster is not None:
        plan, _, rex = result.raster
        print(f"raster    {plan.count} channels through a {plan.bins}-bin filter bank in one pass -> "
              f"{os.path.dirname(rex.summary_path)} ({rex.seconds:.2f} s)")
    if result.verification is not None:
        v = result.verification
        print(f"verify    measured rejection {v.measured_rejection_db:.1f} dB, ripple {v.measured_ripple_db:.4f} dB: "
              f"{v.verdict_text()}")
    print(f"\nreport: {os.path.abspath(result.report_path)}  ({result.seconds:.1f} s)")
    return 0


def _register_demo(sub):
    d = sub.add_parser("demo", help="run the whole job on the invented demo capture", description="Plan, survey, extract and verify on the invented Ridge 7 capture; write one HTML report.")
    d.add_argument("--out", default="demo-out", metavar="DIR", help="output folder (default demo-out)")
    d.add_argument("--capture", help=argparse.SUPPRESS)
    d.add_argument("--write-capture", metavar="BASE", help="only (re)generate the demo capture as BASE.sigmf-meta/-data")
    d.add_argument("--quiet", action="store_true", help="no progress bars")
    d.set_defaults(func=_cmd_demo)


def _cmd_verify(args):
    from .io.atomic import write_text_atomic
    from .checks.verify import verify_plan
    from .views.verify_plot import plot_verification

    from .planning.bank import BankPlan
    from .run.bank_extraction import load_any_plan_file

    plan = load_any_plan_file(args.plan)[0]
    bank = plan if isinstance(plan, BankPlan) else None
    if bank is not None and (args.bit_true or args.plot):
        raise ChannelizerError(f"--{'bit-true' if args.bit_true else 'plot'} does not cover filter-bank plans yet; verify {args.plan} without it")
    _check_outputs([args.plot, args.json], figures=[args.plot], inputs=[args.plan])
    if bank is not None:
        from .checks.bank_verify import verify_bank

        v = verify_bank(bank, **({} if args.tones is None else {"tones": args.tones}))
    else:
        v = verify_plan(plan, bit_true=args.bit_true, tones=args.tones)
    print("\n".join(v.summary_lines()))
    if args.plot:
        plot_verification(v, args.plot)
        print(f"plot written to {args.plot}")
    if args.json:
        write_text_atomic(args.json, v.to_json())
        print(f"measurements written to {args.json}")
    return {"meets": 0, "does not meet": 1}.get(v.verdict, EXIT_INCONCLUSIVE)


def _register_verify(sub):
    v = sub.add_parser("verify", help="measure a plan with tone sweeps through the real processor", description="Drive the extract processor with test tones in the passband and in every band that folds onto it; compare measured with predicted. Exit 0 when the measured figures meet the plan's spec, 1 when not, 2 for bad input, 3 when the measurement's own floor cannot decide.")
    v.add_argument("plan", metavar="PLAN.yaml")
    v.add_argument("--bit-true", action="store_true", help="run the integer chain")
    v.add_argument("--tones", type=int, default=None, help="number of test tones spread over the bands that fold onto the passband (default 200; the passband always gets 17)")
    v.add_argument("--plot", metavar="FILE.png", help="measured points over the predicted response")
    v.add_argument("--json", metavar="FILE", help="write every measurement as JSON")
    v.set_defaults(func=_cmd_verify)


def _cmd_bench(args):
    import json

    from .io.atomic import write_text_atomic
    from .bench.measure import run_benchmark, run_soak
    from .bench.planner_timing import time_planner
    from .bench.report import format_report, format_soak_report

    _check_outputs([args.json])
    if args.spacing is not None:
        from .bench.bank_speed import format_bank_report, run_bank_benchmark

        report = run_bank_benchmark(spacing=args.spacing, rate=args.rate or 2.4e6, bandwidth=args.bandwidth, seconds=args.seconds or 0.5)
        print(format_bank_report(report))
        doc = report.to_dict()
    elif args.soak:
        report = run_soak(gigabytes=args.soak, channels=4, progress=not args.quiet)
        print(format_soak_report(report))
        doc = report.to_dict()
    else:
        planner = time_planner()
        print("planner (design caches cleared, best of 3):")
        for row in planner["specs"]:
            print(f"  {row['seconds']:7.3f} s  {row['layout']:<28} {row['spec']}")
        print(f"  worst {planner['worst_s']:.3f} s (target < {planner['target_s']:g} s): {'met' if planner['met'] else 'MISSED'}\n")
        from .bench.engine_cost import compare

        costs = compare()
        print("float engine: predicted multiplies vs measured time per input sample:")
        for row in costs["rows"]:
            print(f"  {row['predicted']:7.2f} mult  {row['ns_per_sample']:7.2f} ns  {row['layout']:<28} {row['spec']}")
        print(f"  ranking {'agrees' if costs['agree'] else 'DIFFERS'} (Spearman {costs['spearman']:.2f})\n")
        from .bench.engine_cost import ranking_check

        ranking = ranking_check()
        print("planner's choice (fewest FIR multiplies, CIC free) against the fewest engine multiplies:")
        for row in ranking:
            c, f = row["chosen"], row["fewest"]
            line = f"  {row['decimation']:7.1f}x  {c['layout']:<24} fir {c['fir']:6.3f} engine {c['engine']:6.2f}"
            if "ratio" in row:
                line += (f"  {row['chosen_ns']:5.2f} ns | {f['layout']:<22} fir {f['fir']:6.3f} engine {f['engine']:6.2f}"
                         f"  {row['fewest_ns']:5.2f} ns  time ratio {row['ratio']:.2f}")
            else:
                line += "  (the same chain)"
            print(line)
        print()
        report = run_benchmark(seconds=args.seconds or 2.0, channels=args.channels, progress=not args.quiet, workers=args.workers)
        print(format_report(report))
        doc = report.to_dict()
        doc["planner"] = planner
        doc["engine_cost"] = costs
        doc["ranking"] = ranking
    if args.json:
        write_text_atomic(args.json, json.dumps(doc, indent=2) + "\n")
        print(f"figures written to {args.json}")
    return 0


def _register_bench(sub):
    b = sub.add_parser("bench", help="speed and memory figures as ratios against a reference run", description="Measure the planner, and extraction speed and memory against a scipy.signal.resample_poly reference in the same process; --soak runs the large-file memory check.")
    b.add_argument("--seconds", type=_positive_float, default=None, help="length of the synthetic capture in seconds (default 2; 0.5 with --spacing)")
    b.add_argument("--channels", type=int, default=8, help="channels of the many-channel run (default 8)")
    b.add_argument("--soak", type=_positive_float, metavar="GB", help="instead: extract 4 channels from a capture of GB gigabytes and report peak memory")
    b.add_argument("--spacing", type=_rate("spacing"), default=None, help="instead: every channel of this raster through the filter bank, against one channel and one chain each")
    b.add_argument("--rate", type=_rate("rate"), default=None, help="with --spacing: capture rate (default 2.4M)")
    b.add_argument("--bandwidth", type=_rate("bandwidth"), default=None, help="with --spacing: channel width (default 0.8 x spacing)")
    b.add_argument("--json", metavar="FILE", help="write the figures as JSON")
    b.add_argument("--workers", type=int, metavar="N", help="also time the extraction on a local dask cluster of N processes against one process")
    b.add_argument("--quiet", action="store_true", help="no progress lines")
    b.set_defaults(func=_cmd_bench)


def _cmd_export(args):
    from .handoff.export import export_plan

    from .io.paths import check_outputs

    plan = read_plan(args.plan)
    check_outputs(folders=[args.out], inputs=[args.plan])
    report = export_plan(plan, args.out, coefficient_bits=args.coefficient_bits, vectors=args.vectors)
    print(report.format())
    if not report.meets_spec:
        need = f"; {report.bits_needed}-bit coefficients would meet it" if report.bits_needed else ""
        print(f"warning: the quantised chain does not meet the plan's spec{need} (files written)", file=sys.stderr)
        return 1
    return 0


def _register_export(sub):
    x = sub.add_parser("export", help="coefficients, bit widths and test vectors for hardware", description="Write a plan's quantised coefficients (CSV, C header, $readmemh hex), its bit-width table and bit-true test vectors. Exit 0 when the quantised chain meets the plan's spec, 1 when not (files still written), 2 for bad input.")
    x.add_argument("plan", metavar="PLAN.yaml")
    x.add_argument("--out", required=True, metavar="DIR", help="output folder (created; an earlier export there is replaced)")
    x.add_argument("--coefficient-bits", type=_bits, default=None, help="coefficient width in bits (default: the plan's)")
    x.add_argument("--vectors", type=int, default=4096, help="input samples in the test vectors (default 4096; 0 for none)")
    x.set_defaults(func=_cmd_export)


def _check_outputs(files, *, figures=(), inputs=()):
    """Refuse output files that are inputs, folders or repeated, and figures of an unknown format."""
    from .io.paths import check_outputs, figure_format

    for path in figures:
        if path:
            figure_format(path)
    check_outputs(files, inputs=inputs)


def build_parser():
    p = argparse.ArgumentParser(
        prog="channelizer",
        description="Plan, apply, check and hand off multistage decimation chains for IQ captures.",
    )
    p.add_argument("--version", action="version", version=f"%(prog)s {sys.modules[__package__].__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    q = sub.add_parser("plan", help="design the cheapest chain for a channel", description="Design the cheapest decimation chain that meets a ripple and alias-rejection target.")
    q.add_argument("--rate", type=_rate("rate"), required=True, help="input complex sample rate in samples/s, SI suffixes allowed (e.g. 61.44M)")
    q.add_argument("--bandwidth", type=_rate("bandwidth"), required=True, help="channel's occupied two-sided bandwidth in Hz (e.g. 200k): the passband is +- half of it")
    q.add_argument("--output-rate", type=_rate("output rate"), default=None, help="required output rate in samples/s (default: the lowest integer-decimation rate at or above 1.25 x bandwidth)")
    q.add_argument("--ripple-db", type=_positive_float, default=0.1, help="largest peak-to-peak passband ripple in dB (default 0.1)")
    q.add_argument("--rejection-db", type=_positive_float, default=80.0, help="smallest alias rejection in dB: how far below the channel anything folding onto the passband must stay (default 80)")
    q.add_argument("--input-bits", type=_bits, default=16, help="ADC sample width in bits, real and imaginary each (2..32, default 16); sets the CIC register growth")
    q.add_argument("--output-bits", type=_bits, default=16, help="output sample width in bits for the hardware hand-off (2..32, default 16)")
    q.add_argument("--coefficient-bits", type=_bits, default=18, help="FIR coefficient width in bits for --objective hardware (default 18)")
    q.add_argument("--objective", choices=["cpu", "hardware"], default="cpu", help="what to minimise: cpu (multiplies per second in software) or hardware (multipliers at --clock); default cpu")
    q.add_argument("--clock", type=_rate("clock"), default=None, help="hardware clock in Hz that multipliers are shared at, with --objective hardware only (default: the input rate)")
    q.add_argument("--stopband-edge", type=_rate("stopband edge"), default=None, help="offset in Hz from the channel centre beyond which everything is also attenuated by --rejection-db (removes the neighbours; default: only what folds onto the passband)")
    q.add_argument("--spacing", type=_rate("spacing"), default=None, help="plan a filter bank for every channel on this raster spacing")
    q.add_argument("--first", type=_rate("first", allow_negative=True), default=None, help="with --spacing: first raster channel, offset from the capture centre (default: the whole band)")
    q.add_argument("--last", type=_rate("last", allow_negative=True), default=None, help="with --spacing: last raster channel, offset from the capture centre")
    q.add_argument("--out", metavar="FILE.yaml", help="write the plan file")
    q.add_argument("--plot", metavar="FILE.png", help="write the response figure")
    q.set_defaults(func=_cmd_plan)

    s = sub.add_parser("show", help="print and plot an existing plan", description="Print the stage table of a plan file and plot its response.")
    s.add_argument("plan", metavar="PLAN.yaml")
    s.add_argument("--plot", metavar="FILE.png", help="write the response figure")
    s.set_defaults(func=_cmd_show)

    for register in _EXTRA_COMMANDS:
        register(sub)
    return p


#: Registration functions of further commands, each adding one subparser.
_EXTRA_COMMANDS = [_register_extract, _register_survey, _register_verify, _register_export, _register_bench, _register_demo]


def main(argv=None):
    """Run the command line; returns the exit status."""
    from .io.console import ClosedPipeTolerant

    parser = build_parser()
    args, unknown = parser.parse_known_args(argv)
    if unknown:  # name the command and the option it does not know
        sub = f"{parser.prog} {args.command}"
        print(f"{sub}: error: unknown option or extra argument: {' '.join(unknown)} (see {sub} --help)", file=sys.stderr)
        return 2
    # a reader that stops early (| head) must not keep the command from writing its files
    stdout = sys.stdout = ClosedPipeTolerant(sys.stdout)
    try:
        return args.func(args) or 0
    except ChannelizerError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("error: interrupted; no output was completed", file=sys.stderr)
        return 130
    except OSError as exc:
        name = f"{exc.filename}: " if exc.filename else ""
        print(f"error: {name}{exc.strerror or exc}", file=sys.stderr)
        return 2
    finally:
        stdout.flush()
        sys.stdout = stdout.stream


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
