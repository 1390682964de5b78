"""Benchmark reports: the result objects (JSON round trip) and their printed form."""

from dataclasses import asdict, dataclass, field
import json

__all__ = ["BenchReport", "SoakReport", "format_report", "format_soak_report"]




class _JsonReport:
    """JSON round trip for the report dataclasses (plain JSON types in every field)."""

    def to_dict(self):
        return asdict(self)

    def to_json(self):
        """The report as JSON text (indented, ends with a newline)."""
        return json.dumps(self.to_dict(), indent=2, allow_nan=False) + "\n"

    @classmethod
    def from_dict(cls, data):
        return cls(**data)

    @classmethod
    def from_json(cls, text):
        return cls.from_dict(json.loads(text))


@dataclass
class BenchReport(_JsonReport):
    """Figures of one :func:`run_benchmark` run (plain JSON types throughout).

    Attributes
    ----------
    capture : dict
        ``sample_rate``, ``seconds``, ``samples``, ``datatype``, ``block_size``.
    plan : dict
        Layout, stages, output rate, decimation, predicted figures, identity.
    reference : dict
        The reference filter: taps, Kaiser beta, measured rejection and ripple.
    timings : dict
        Per measurement (``reference``, ``one_channel``, ``many_channels``):
        ``runs_s``, ``best_s``, ``input_msps``, ``realtime_factor``.
    memory : dict
        Per measurement: ``peak_rss_mb``, ``baseline_rss_mb``, ``mapped_file_mb``,
        ``peak_heap_mb`` (each from its own subprocess), ``seconds``.
    ratios : dict
        ``speedup_vs_reference``, ``many_over_one_time`` and the memory ratios
        against the reference.
    targets : dict
        Per target: ``value``, ``limit``, ``sense`` (``'>='`` or ``'<='``), ``met``.
    checks : dict
        Output lengths against ``floor(N L / M)`` per stage, and the power of the
        one-channel output against the reference's.
    environment : dict
        numpy, scipy, Python, platform, ``os.cpu_count()``.
    """

    capture: dict
    channels: int
    repeats: int
    plan: dict
    reference: dict
    timings: dict
    memory: dict
    ratios: dict
    targets: dict
    checks: dict
    environment: dict
    command: dict = field(default_factory=dict)
    workers: dict = field(default_factory=dict)

    @property
    def passed(self):
        """True when every target is met and every output length is right."""
        return all(t["met"] for t in self.targets.values()) and self.checks["lengths_ok"]


@dataclass
class SoakReport(_JsonReport):
    """Figures of one :func:`run_soak` run.

    Attributes
    ----------
    gigabytes : float
        Size of the capture written, in 10^9 bytes.
    samples : int
        Complex samples in it.
    channels : int
    plan : dict
    seconds, input_msps, realtime_factor : float
        Extraction time in the subprocess and the input rate it reached.
    memory : dict
        ``peak_rss_mb`` (``VmHWM``), ``baseline_rss_mb`` (after imports),
        ``mapped_file_mb`` (pages of the capture's memory map resident at the end),
        ``peak_heap_mb`` (``tracemalloc``), ``peak_rss_less_mapped_mb``.
    targets : dict
        As in :class:`BenchReport`.
    outputs : list of dict
        Per channel: ``name``, ``expected``, ``written``.
    lengths_ok : bool
    generation_seconds : float
    environment : dict
    """

    gigabytes: float
    samples: int
    channels: int
    plan: dict
    seconds: float
    input_msps: float
    realtime_factor: float
    memory: dict
    targets: dict
    outputs: list
    lengths_ok: bool
    generation_seconds: float
    environment: dict = field(default_factory=dict)

    @property
    def passed(self):
        """True when every target is met and every output length is right."""
        return self.lengths_ok and all(t["met"] for t in self.targets.values())


def _mark(t):
    return "met" if t["met"] else "MISSED"


def format_report(report):
    """The benchmark report as readable text."""
    c = report.capture
    p = report.plan
    r = report.reference
    lines = [
        f"benchmark: {c['seconds']:.3f} s of synthetic {c['datatype']} at {c['sample_rate'] / 1e6:g} Msps "
        f"({c['samples']:,} samples, blocks of {c['block_size']:,}), best of {report.repeats}",
        f"chain: {p['layout']} -> {p['output_rate'] / 1e3:g} kHz; predicted "
        f"{p['predicted'].get('alias_rejection_db', float('nan')):.1f} dB rejection, "
        f"{p['predicted'].get('passband_ripple_db', float('nan')):.3f} dB ripple",
        f"reference: resample_poly 1/{r['decimation']}, Kaiser FIR {r['numtaps']} taps (beta {r['beta']:.3f}), "
        f"measured {r['rejection_db']:.1f} dB rejection, {r['ripple_db']:.2g} dB ripple",
        "",
        f"{'run':<24}{'best s':>9}{'Msps':>9}{'x real time':>13}{'peak RSS MB':>13}{'heap MB':>10}",
    ]
    names = {"reference": "reference", "one_channel": "one channel", "many_channels": f"{report.channels} channels"}
    for key, label in names.items():
        t = report.timings[key]
        m = report.memory.get(key, {})
        rss = m.get("peak_rss_mb")
        heap = m.get("peak_heap_mb")
        lines.append(
            f"{label:<24}{t['best_s']:>9.3f}{t['input_msps']:>9.1f}{t['realtime_factor']:>13.2f}"
            f"{rss if rss is not None else float('nan'):>13.1f}{heap if heap is not None else float('nan'):>10.1f}"
        )
    cmd = report.command
    if cmd:
        lines += ["", f"whole command ({cmd['channels']} channels, fresh interpreter, start-up included): "
                  f"best {cmd['best_s']:.3f} s = {cmd['realtime_factor']:.2f}x real time; its pass {cmd['pass_s']:.3f} s "
                  f"({cmd['pass_realtime_factor']:.2f}x), start-up, audit and summary {cmd['outside_pass_s']:.3f} s; "
                  f"reference for {cmd['channels']} channels {cmd['reference_s']:.2f} s",
                  f"  {cmd['argv']}"]
        if "startup_floor_s" in cmd:
            lines.append(f"  a fresh interpreter that only imports numpy takes {cmd['startup_floor_s']:.3f} s here "
                         "(no command can be faster)")
    w = report.workers
    if w:
        lines += ["", f"{w['workers']} dask workers against one process ({w['channels']} channels, {w['chunks']} chunks, "
                  f"pre-rolls add {100 * w['overlap_cost']:.1f} % to the input): best {min(w['workers_runs_s']):.3f} s "
                  f"against {min(w['one_process_runs_s']):.3f} s, speed-up {w['speedup']:.2f}x; cluster start "
                  f"{w['cluster_start_s']:.1f} s; outputs {'identical' if w['identical'] else 'DIFFERENT'}"]
        if "speedup_vs_one_thread" in w:
            lines.append(f"  against one process on one thread (no read-ahead, as each worker runs): "
                         f"{min(w['one_thread_runs_s']):.3f} s, speed-up {w['speedup_vs_one_thread']:.2f}x")
        if "plain_speedup_vs_one_thread" in w:
            lines.append(f"  the same chunks on {w['workers']} plain processes (multiprocessing, no dask): "
                         f"{min(w['plain_processes_runs_s']):.3f} s, speed-up {w['plain_speedup_vs_one_thread']:.2f}x "
                         f"over one thread (what the cores allow); dask takes {w['dask_over_plain']:.2f}x their time")
    lines += ["", "targets:"]
    labels = {
        "speedup_vs_reference": "one channel speed / reference speed",
        "many_over_one_time": f"{report.channels} channels time / one channel time",
        "one_channel_realtime": "one channel speed / real time",
        "command_realtime": "whole command speed / real time",
        "command_speedup_vs_reference": "whole command speed / reference speed",
        "workers_speedup": "dask workers speed / one-thread speed",
    }
    for key, t in report.targets.items():
        lines.append(f"  {labels.get(key, key):<44}{t['value']:>9.2f}  {t['sense']} {t['limit']:g}  {_mark(t)}")
    ch = report.checks
    lines += [
        "",
        f"output lengths: {ch['expected_outputs']:,} expected per channel, "
        + ("all match" if ch["lengths_ok"] else "MISMATCH"),
        f"one channel power {ch['one_channel_power_dbfs']:.2f} dBFS, reference {ch['reference_power_dbfs']:.2f} dBFS",
        "memory vs reference (peak RSS): one channel "
        f"{_fmt_ratio(report.ratios.get('one_channel_peak_rss_vs_reference'))}, {report.channels} channels "
        f"{_fmt_ratio(report.ratios.get('many_channels_peak_rss_vs_reference'))}; "
        "(heap): one channel "
        f"{_fmt_ratio(report.ratios.get('one_channel_peak_heap_vs_reference'))}, {report.channels} channels "
        f"{_fmt_ratio(report.ratios.get('many_channels_peak_heap_vs_reference'))}",
        _fmt_env(report.environment),
    ]
    return "\n".join(lines)


def _fmt_ratio(v):
    return "n/a" if v is None else f"{v:.2f}x"


def _fmt_env(env):
    load = env.get("load_average")
    busy = f", load average {load[0]:g}" if load else ""
    return (f"machine: {env['cpu_count']} CPUs{busy}, {env['platform']}; numpy {env['numpy']}, scipy {env['scipy']}, "
            f"Python {env['python']}")


def format_soak_report(report):
    """The soak report as readable text."""
    m = report.memory
    lines = [
        f"soak: {report.gigabytes:.2f} GB ci16_le ({report.samples:,} samples), {report.channels} channels, "
        f"chain {report.plan['layout']}",
        f"extract: {report.seconds:.1f} s, {report.input_msps:.1f} Msps ({report.realtime_factor:.2f} x real time); "
        f"capture written in {report.generation_seconds:.1f} s",
        f"memory: peak RSS {m['peak_rss_mb']:.1f} MB (after imports {m['baseline_rss_mb']:.1f} MB), "
        f"capture pages mapped {_mb(m.get('mapped_file_mb'))}, heap peak {m['peak_heap_mb']:.1f} MB",
    ]
    for key, t in report.targets.items():
        lines.append(f"  {key.replace('_', ' '):<32}{t['value']:>10.1f}  {t['sense']} {t['limit']:g}  {_mark(t)}")
    lines.append(
        "output lengths: "
        + ", ".join(f"{o['name']} {o['written']:,}/{o['expected']:,}" for o in report.outputs)
        + ("" if report.lengths_ok else "  MISMATCH")
    )
    lines.append(_fmt_env(report.environment))
    return "\n".join(lines)


def _mb(v):
    return "n/a" if v is None else f"{v:.1f} MB"
