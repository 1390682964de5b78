"""Command line: a thin shell over the library.

Every command turns :class:`~channelizer.errors.ChannelizerError` (bad input) into
one ``error:`` line on stderr and exit status 2.
"""

import argparse
import contextlib
import os
import sys

# One BLAS thread: the stages run many small matrix products, which OpenBLAS's own
# threads slow down badly on a busy machine.  Set before numpy is first imported.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

from .errors import ChannelizerError
from .units import parse_frequency

__all__ = ["main", "build_parser"]


def _rate(name):
    def parse(text):
        try:
            return parse_frequency(text, name=name, allow_negative=False)
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
    from .planning.planner import plan_chain
    from .planning.spec import ChainSpec
    from .views.table import format_alternatives, format_plan

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
        _check_output_path(args.out)
        write_text_atomic(args.out, result.plan.to_yaml())
        print(f"\nplan written to {args.out}")
    if args.plot:
        from .views.plots import plot_plan

        _check_output_path(args.plot)
        plot_plan(result.plan, args.plot)
        print(f"response plot written to {args.plot}")
    return 0


def _cmd_show(args):
    from .views.table import format_plan

    plan = read_plan(args.plan)
    print(format_plan(plan))
    if args.plot:
        from .views.plots import plot_plan

        _check_output_path(args.plot)
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
    try:
        with open(path, "rb") as fh:
            data = fh.read(16 * 2**20 + 1)
    except OSError as exc:
        raise ChannelizerError(f"{path}: cannot read {what} ({exc.strerror})") from None
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
    if not entries:
        raise ChannelizerError("no channel to extract: give --channel NAME=FREQ or --channels FILE")
    capture = _open_capture(args)
    result = run_extraction(
        capture,
        entries,
        args.out,
        plan_path=args.plan,
        base_dir=base,
        output_format=args.output_format,
        bit_true=args.bit_true,
        plots=not args.no_plots,
        progress=not args.quiet,
        nonfinite="zero" if args.zero_nonfinite else "error",
        block_size=args.block_size,
    )
    from .units import format_hz

    if capture.nonfinite_count:
        print(f"warning: {capture.nonfinite_count} non-finite samples were replaced by zero", file=sys.stderr)
    mode = "bit-true" if args.bit_true else "float"
    print(
        f"{capture.path}: {result.input_samples} samples at {format_hz(capture.sample_rate, 'sps')}, "
        f"{len(result.channels)} channel(s), {mode} path, {result.seconds:.2f} s "
        f"({result.input_samples / max(result.seconds, 1e-9) / 1e6:.1f} Msps)"
    )
    print(f"{'channel':<16} {'centre':>16} {'rate':>12} {'samples':>10} {'power':>11} {'delay':>9}  folding signals")
    for ch in result.channels:
        centre = format_hz(ch.center_frequency) if ch.center_frequency is not None else f"{ch.offset:+g} Hz"
        flagged = sum(1 for a in ch.alias_audit if a["above_noise"])
        print(
            f"{ch.name:<16} {centre:>16} {format_hz(ch.output_rate, 'sps'):>12} {ch.samples:>10} "
            f"{ch.mean_power_dbfs:>7.2f} dBFS {ch.group_delay_output_samples:>9.2f}  "
            f"{len(ch.alias_audit)} ({flagged} above the output noise)"
        )
    print(f"summary written to {result.summary_path}")
    return 0


def _add_capture_options(p):
    p.add_argument("capture", metavar="CAPTURE", help="SigMF recording (.sigmf-meta/.sigmf-data), two-channel WAV, or raw IQ")
    p.add_argument("--input-format", metavar="DTYPE", help="datatype of a raw file, e.g. ci16_le, cf32_le, cu8")
    p.add_argument("--rate", type=_rate("rate"), help="sample rate of a raw file")
    p.add_argument("--center", type=_rate("center"), help="centre frequency of a raw file (optional)")


def _register_extract(sub):
    e = sub.add_parser("extract", help="extract channels from a capture with a plan's chain", description="Run a plan's exact chain over a capture and write each channel as its own SigMF recording.")
    _add_capture_options(e)
    e.add_argument("--plan", metavar="PLAN.yaml", help="plan for every channel without its own")
    e.add_argument("--channel", action="append", metavar="NAME=FREQ", help="channel to extract; FREQ absolute when the capture states its centre, +/- for an offset (repeatable)")
    e.add_argument("--channels", metavar="FILE", help="YAML channel list: name, frequency, optional plan")
    e.add_argument("--out", required=True, metavar="DIR", help="output folder")
    e.add_argument("--output-format", choices=["cf32_le", "ci16_le"], default="cf32_le")
    e.add_argument("--bit-true", action="store_true", help="integer arithmetic as hardware would do it")
    e.add_argument("--no-plots", action="store_true", help="skip overview.png and the per-channel plots")
    e.add_argument("--zero-nonfinite", action="store_true", help="replace NaN/inf samples by zero instead of refusing")
    e.add_argument("--block-size", type=int, default=None, help=argparse.SUPPRESS)
    e.add_argument("--quiet", action="store_true", help="no progress bar")
    e.set_defaults(func=_cmd_extract)


def _cmd_survey(args):
    from .io.atomic import write_text_atomic
    from .io.channels import dump_channel_list
    from .checks.survey import format_survey, survey_capture
    from .views.survey_plot import plot_survey

    capture = _open_capture(args)
    for path in (args.plot, args.channels_out):
        if path:
            _check_output_path(path)
    result = survey_capture(capture, resolution=args.resolution, threshold_db=args.threshold_db, progress=not args.quiet)
    print(format_survey(result))
    if args.plot:
        plot_survey(result, args.plot)
        print(f"\nsurvey plot written to {args.plot}")
    if args.channels_out:
        write_text_atomic(args.channels_out, dump_channel_list(result.channel_list()))
        print(f"channel list written to {args.channels_out} (edit names, add plan: to each)")
    return 0


def _register_survey(sub):
    v = sub.add_parser("survey", help="spectrum, spectrogram and occupied signals of a capture", description="Survey a capture: Welch PSD, spectrogram, noise floor and the occupied signals.")
    _add_capture_options(v)
    v.add_argument("--plot", metavar="FILE.png", help="write the PSD and spectrogram figure")
    v.add_argument("--resolution", type=_rate("resolution"), help="frequency resolution (default: rate / 4096)")
    v.add_argument("--threshold-db", type=_positive_float, default=10.0, help="detection threshold above the noise floor (default 10)")
    v.add_argument("--channels-out", metavar="FILE", help="write the detected signals as a channel list for extract --channels")
    v.add_argument("--quiet", action="store_true", help="no progress bar")
    v.set_defaults(func=_cmd_survey)


def _cmd_demo(args):
    from .demo.job import run_demo, write_demo_capture

    if args.write_capture:
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
    if result.verification is not None:
        v = result.verification
        print(f"verify    measured rejection {v.measured_rejection_db:.1f} dB, ripple {v.measured_ripple_db:.4f} dB: "
              f"{'meets' if v.meets_spec else 'MISSES'} the spec")
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

    plan = read_plan(args.plan)
    for path in (args.plot, args.json):
        if path:
            _check_output_path(path)
    v = verify_plan(plan, bit_true=args.bit_true, tones=args.tones)
    print("\n".join(v.summary_lines()))
    if args.plot:
        plot_verification(v, args.plot)
        print(f"plot written to {args.plot}")
    if args.json:
        write_text_atomic(args.json, v.to_json())
        print(f"measurements written to {args.json}")
    return 0 if v.meets_spec else 1


def _register_verify(sub):
    v = sub.add_parser("verify", help="measure a plan with tone sweeps through the real processor", description="Drive the extract processor with test tones in the passband and in every band that folds onto it; compare measured with predicted. Exit 0 when the measured figures meet the plan's spec, 1 when not, 2 for bad input.")
    v.add_argument("plan", metavar="PLAN.yaml")
    v.add_argument("--bit-true", action="store_true", help="run the integer chain")
    v.add_argument("--tones", type=int, default=None, help="number of alias-band tones (default: the library's choice)")
    v.add_argument("--plot", metavar="FILE.png", help="measured points over the predicted response")
    v.add_argument("--json", metavar="FILE", help="write every measurement as JSON")
    v.set_defaults(func=_cmd_verify)


def _cmd_bench(args):
    import json

    from .io.atomic import write_text_atomic
    from .bench.measure import run_benchmark, run_soak
    from .bench.planner_timing import time_planner
    from .bench.report import format_report, format_soak_report

    if args.json:
        _check_output_path(args.json)
    if args.soak:
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
        report = run_benchmark(seconds=args.seconds, channels=args.channels, progress=not args.quiet)
        print(format_report(report))
        doc = report.to_dict()
        doc["planner"] = planner
        doc["engine_cost"] = costs
    if args.json:
        write_text_atomic(args.json, json.dumps(doc, indent=2) + "\n")
        print(f"figures written to {args.json}")
    return 0


def _register_bench(sub):
    b = sub.add_parser("bench", help="speed and memory figures as ratios against a reference run", description="Measure the planner, and extraction speed and memory against a scipy.signal.resample_poly reference in the same process; --soak runs the large-file memory check.")
    b.add_argument("--seconds", type=_positive_float, default=2.0, help="length of the synthetic 61.44 Msps capture (default 2)")
    b.add_argument("--channels", type=int, default=8, help="channels of the many-channel run (default 8)")
    b.add_argument("--soak", type=_positive_float, metavar="GB", help="instead: extract 4 channels from a capture of GB gigabytes and report peak memory")
    b.add_argument("--json", metavar="FILE", help="write the figures as JSON")
    b.add_argument("--quiet", action="store_true", help="no progress lines")
    b.set_defaults(func=_cmd_bench)


def _cmd_export(args):
    from .handoff.export import export_plan

    plan = read_plan(args.plan)
    report = export_plan(plan, args.out, coefficient_bits=args.coefficient_bits, vectors=args.vectors)
    print(report.format())
    return 0


def _register_export(sub):
    x = sub.add_parser("export", help="coefficients, bit widths and test vectors for hardware", description="Write a plan's quantised coefficients (CSV, C header, $readmemh hex), its bit-width table and bit-true test vectors.")
    x.add_argument("plan", metavar="PLAN.yaml")
    x.add_argument("--out", required=True, metavar="DIR", help="output folder (created; an earlier export there is replaced)")
    x.add_argument("--coefficient-bits", type=_bits, default=None, help="coefficient width (default: the plan's)")
    x.add_argument("--vectors", type=int, default=4096, help="input samples in the test vectors (default 4096; 0 for none)")
    x.set_defaults(func=_cmd_export)


def _check_output_path(path):
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        raise ChannelizerError(f"{path}: folder {folder} does not exist")
    if os.path.isdir(path):
        raise ChannelizerError(f"{path}: is a folder, expected a file name")


def build_parser():
    p = argparse.ArgumentParser(
        prog="channelizer",
        description="Plan, apply, check and hand off multistage decimation chains for IQ captures.",
    )
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    q = sub.add_parser("plan", help="design the cheapest chain for a channel", description="Design the cheapest decimation chain that meets a ripple and alias-rejection target.")
    q.add_argument("--rate", type=_rate("rate"), required=True, help="input complex sample rate (e.g. 61.44M)")
    q.add_argument("--bandwidth", type=_rate("bandwidth"), required=True, help="channel's occupied two-sided bandwidth")
    q.add_argument("--output-rate", type=_rate("output rate"), default=None, help="required output rate (default: lowest integer-decimation rate >= 1.25 x bandwidth)")
    q.add_argument("--ripple-db", type=_positive_float, default=0.1, help="largest peak-to-peak passband ripple (default 0.1)")
    q.add_argument("--rejection-db", type=_positive_float, default=80.0, help="smallest alias rejection (default 80)")
    q.add_argument("--input-bits", type=_bits, default=16)
    q.add_argument("--output-bits", type=_bits, default=16)
    q.add_argument("--coefficient-bits", type=_bits, default=18, help="FIR coefficient width for --objective hardware (default 18)")
    q.add_argument("--objective", choices=["cpu", "hardware"], default="cpu", help="what to minimise (default cpu)")
    q.add_argument("--clock", type=_rate("clock"), default=None, help="hardware clock (default: the input rate)")
    q.add_argument("--stopband-edge", type=_rate("stopband edge"), default=None, help="also attenuate everything beyond this offset from the channel centre (removes the neighbours; default: only what folds onto the passband)")
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
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args) or 0
    except ChannelizerError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except BrokenPipeError:
        # output piped into a program that stopped reading (e.g. head): not an error
        with contextlib.suppress(OSError):
            sys.stdout = open(os.devnull, "w")
        return 0
    except KeyboardInterrupt:
        print("error: interrupted; no output was completed", file=sys.stderr)
        return 130
    except OSError as exc:
        name = f"{exc.filename}: " if exc.filename else ""
        print(f"error: {name}{exc.strerror or exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
