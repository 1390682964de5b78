"""Speed and memory of the extract path, measured against a scipy reference.

:func:`run_benchmark` writes a synthetic 61.44 Msps ``ci16_le`` recording, plans
one chain with a CIC and a half-band, and times, in this process:

(a) the reference: ``scipy.signal.resample_poly`` to the same output rate with a
    Kaiser-window FIR meeting the same rejection, on the same blocks read and
    converted by the same reader;
(b) :func:`channelizer.processor.extract_channels` with one channel (reading,
    conversion, chain, SigMF writing; no spectra or plots);
(c) the same with several channels in one pass over the file.

Each timing is the best of a few runs (the capture is then in the page cache,
having just been written).  Peak memory is read in fresh subprocesses, one per
measurement, as the operating system's peak resident set (``VmHWM``, or
``ru_maxrss`` where there is no ``/proc``) and as
the peak of memory allocated while working (``tracemalloc``, which sees numpy's
arrays but not the pages of the memory-mapped capture).  Speeds and memory are
reported as ratios against the reference run, which has the same reader and the
same machine, so the ratios say more than the absolute figures.

:func:`run_soak` writes a large capture, extracts a few channels from it in a
subprocess and reports that subprocess's peak memory and the output lengths.
"""

from dataclasses import asdict, dataclass, field
import json
import math
import numbers
import os
import platform
import shutil
import subprocess
import sys
import tempfile
import time

import numpy as np
import scipy
import scipy.signal

from ..io.captures import open_capture
from ..errors import ChannelizerError
from ..planning.plan import Plan
from ..planning.planner import plan_chain
from ..run.processor import ChannelRequest, extract_channels, plan_identity
from ..io.sigmf_writer import SigmfWriter
from ..planning.spec import ChainSpec
from ..planning.stages import CicStage, ResamplerStage

__all__ = [
    "BENCH_SPEC",
    "BenchReport",
    "SoakReport",
    "channel_offsets",
    "format_report",
    "format_soak_report",
    "reference_filter",
    "run_benchmark",
    "run_soak",
]

#: Capture rate of the synthetic recordings, Hz.
SAMPLE_RATE = 61_440_000
#: The chain measured: its plan is CIC/64 > compensator FIR/2 > half-band/2 (checked at run time).
BENCH_SPEC = ChainSpec(input_rate=float(SAMPLE_RATE), bandwidth=200e3, output_rate=240e3, rejection_db=100.0)
#: Samples per block, for the reference and for the extract runs alike.
BLOCK = 1 << 20
#: Timed runs per measurement; the best is kept.
REPEATS = 3
#: Most channels a benchmark takes (one generated tone each).
MAX_CHANNELS = 64
#: Peak resident memory allowed to the soak run, MB.
SOAK_RSS_TARGET_MB = 300.0

_SEED = 6144
_GEN_CHUNK = 1 << 18
_NOISE_RMS = 0.003  # per component
_TONE_OFFSET_HZ = 20_000  # each channel's tone, from its centre
_MB = 1e6


# ----------------------------------------------------------------------------- reports
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


# ----------------------------------------------------------------------------- checks of arguments
def _positive(value, name):
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value) or value <= 0:
        raise ChannelizerError(f"{name} must be a positive finite number, got {value!r}")
    return float(value)


def _count(value, name, hi):
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or not 1 <= value <= hi:
        raise ChannelizerError(f"{name} must be a whole number from 1 to {hi}, got {value!r}")
    return int(value)


# ----------------------------------------------------------------------------- synthetic capture
def channel_offsets(channels):
    """Channel centres in Hz from the capture centre: a 1 kHz grid holding 0, within +-0.4 fs."""
    step = min(2_500_000, int(0.8 * SAMPLE_RATE / channels) // 1000 * 1000)
    return [float((i - channels // 2) * step) for i in range(channels)]


def _write_capture(base, samples, *, tones, progress=False, label="capture"):
    """Write ``samples`` of noise plus one tone per entry of ``tones`` (Hz) as ci16_le SigMF.

    Deterministic: the generator is seeded and fed in fixed chunks.  Each tone's
    phase at chunk start ``n0`` is ``frac(f n0 / fs)`` from integers, so it does
    not drift; inside a chunk a table of ``exp(2j pi f k / fs)`` is scaled by it.
    """
    rng = np.random.default_rng(_SEED)
    amp = min(0.1, 0.4 / max(1, len(tones)))
    k = np.arange(_GEN_CHUNK, dtype=np.int64)
    tables = []
    for f in tones:
        f = int(f)
        phase = (f * k % SAMPLE_RATE) / SAMPLE_RATE
        tables.append((f, (amp * np.exp(2j * np.pi * phase)).astype(np.complex64)))
    meta = {
        "core:description": "synthetic noise and tones for the channelizer benchmark",
        "core:extensions": [{"name": "channelizer", "version": "1.0.0", "optional": True}],
        "channelizer:tones_hz": [int(f) for f in tones],
    }
    t0 = time.perf_counter()
    shown = -1
    with SigmfWriter(base, datatype="ci16_le", fs=float(SAMPLE_RATE), center_frequency=0.0, global_extra=meta) as w:
        for n0 in range(0, samples, _GEN_CHUNK):
            m = min(_GEN_CHUNK, samples - n0)
            x = rng.standard_normal(2 * m, dtype=np.float32).view(np.complex64)
            x *= np.float32(_NOISE_RMS)
            for f, table in tables:
                start = (f * n0 % SAMPLE_RATE) / SAMPLE_RATE
                x += table[:m] * np.complex64(np.exp(2j * np.pi * start))
            w.write(x)
            pct = int(100 * (n0 + m) / samples)
            if progress and pct // 10 != shown:
                shown = pct // 10
                _say(True, f"{label}: {pct:3d}% of {samples * 4 / _MB:,.0f} MB")
    return time.perf_counter() - t0


def _say(progress, text):
    if progress:
        sys.stderr.write(text + "\n")
        sys.stderr.flush()


# ----------------------------------------------------------------------------- reference filter
def reference_filter(spec, *, fs):
    """Single-stage FIR for ``scipy.signal.resample_poly`` meeting ``spec``'s rejection.

    Kaiser window design: order and beta from ``scipy.signal.kaiserord`` for the
    rejection target and the transition band from ``bandwidth / 2`` to
    ``output_rate - bandwidth / 2`` (the first frequency that folds onto the
    passband), cutoff in its middle (``output_rate / 2``), at ``fs`` (the
    up-sampled rate; the integer decimations used here need no up-sampling).
    Kaiser's formula is an estimate, so the design is checked with
    ``scipy.signal.freqz`` and the target raised in 0.25 dB steps until the
    stopband meets it.

    Parameters
    ----------
    spec : ChainSpec
    fs : float
        Rate the filter runs at, Hz.

    Returns
    -------
    dict
        ``taps`` (float64 array), ``numtaps``, ``beta``, ``rejection_db`` and
        ``ripple_db`` as measured.

    References
    ----------
    J. F. Kaiser, "Nonrecursive digital filter design using the I0-sinh window
    function", Proc. IEEE ISCAS, 1974 (from memory); A. V. Oppenheim and
    R. W. Schafer, *Discrete-Time Signal Processing*, 3rd ed., 2010, sec. 7.6
    (the method ``scipy.signal.kaiserord`` follows).
    """
    fp = spec.bandwidth / 2.0
    fstop = spec.output_rate - fp
    width = (fstop - fp) / (fs / 2.0)
    cutoff = spec.output_rate / 2.0
    atten = float(spec.rejection_db)
    for _ in range(40):
        numtaps, beta = scipy.signal.kaiserord(atten, width)
        numtaps |= 1  # odd: a whole-sample delay
        taps = scipy.signal.firwin(numtaps, cutoff, window=("kaiser", beta), fs=fs)
        rej, rip = _measure_lowpass(taps, fp, fstop, fs=fs)
        if rej >= spec.rejection_db and rip <= spec.ripple_db:
            break
        atten += 0.25
    else:  # pragma: no cover - kaiserord is never that far off
        raise ChannelizerError(f"no Kaiser design reaches {spec.rejection_db:g} dB for the reference")
    return {"taps": taps, "numtaps": int(numtaps), "beta": float(beta), "rejection_db": rej, "ripple_db": rip}


def _measure_lowpass(taps, fp, fstop, *, fs):
    n = 1 << max(16, int(math.ceil(math.log2(len(taps) * 64))))
    w, h = scipy.signal.freqz(taps, worN=n, fs=fs)
    mag = np.abs(h)
    rej = -20.0 * math.log10(max(float(mag[w >= fstop].max()), 1e-300))
    pb = mag[w <= fp]
    rip = 20.0 * math.log10(float(pb.max()) / float(pb.min()))
    return rej, rip


def _reference_pass(capture, taps32, down, block):
    """resample_poly on each block (no state across blocks); returns (samples out, mean power)."""
    n_out = 0
    power = 0.0
    for x in capture.blocks(block):
        y = scipy.signal.resample_poly(x, 1, down, window=taps32)
        n_out += y.size
        power += float(np.vdot(y, y).real)
    return n_out, power / max(n_out, 1)


# ----------------------------------------------------------------------------- plan summary
def _plan_summary(plan, ident):
    stages = []
    parts = []
    for st in plan.stages:
        if isinstance(st, CicStage):
            stages.append({"kind": "cic", "decimation": st.decimation, "order": st.order,
                           "differential_delay": st.differential_delay, "register_bits": st.register_bits})
            parts.append(f"CIC/{st.decimation} N={st.order}")
        elif isinstance(st, ResamplerStage):
            stages.append({"kind": "resampler", "up": st.interpolation, "down": st.decimation, "taps": st.num_taps})
            parts.append(f"x{st.interpolation}/{st.decimation} {st.num_taps} taps")
        else:
            stages.append({"kind": st.kind, "role": st.role, "decimation": st.decimation, "taps": st.num_taps})
            if st.kind == "halfband":
                parts.append(f"half-band/{st.decimation} {st.num_taps} taps")
            else:
                parts.append(f"FIR/{st.decimation} {st.num_taps} taps ({st.role})")
    return {
        "layout": " > ".join(parts),
        "stages": stages,
        "bandwidth": plan.bandwidth,
        "output_rate": plan.output_rate,
        "total_decimation": plan.total_decimation,
        "predicted": dict(plan.predicted),
        "sha256": ident,
    }


def _has_cic_and_halfband(plan):
    kinds = [getattr(st, "kind", "") for st in plan.stages]
    return "cic" in kinds and "halfband" in kinds


def _expected_outputs(plan, n):
    """Outputs after ``n`` inputs: ``floor(n L / M)`` stage after stage (see streaming's emission rule)."""
    for st in plan.stages:
        n = n * st.interpolation // st.decimation
    return n


def _environment():
    """Versions and machine; the load average (taken at the end) says how busy the machine was."""
    try:
        load = [round(v, 2) for v in os.getloadavg()]
    except (AttributeError, OSError):
        load = None
    return {
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "python": platform.python_version(),
        "platform": platform.platform(),
        "machine": platform.machine(),
        "cpu_count": os.cpu_count(),
        "load_average": load,
        "blas_threads_env": {k: os.environ[k] for k in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")
                             if k in os.environ},
    }


# ----------------------------------------------------------------------------- subprocess measurements
def _rss_kb(ru_maxrss):
    return ru_maxrss / 1024.0 if sys.platform == "darwin" else float(ru_maxrss)


def _status_kb(key):
    """A ``kB`` field of /proc/self/status (Linux), or None."""
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith(key + ":"):
                    return float(line.split()[1])
    except OSError:
        pass
    return None


def _mapped_kb(path):
    """Resident kB of this process's memory maps of file ``path`` (Linux ``smaps``), or None."""
    target = os.path.realpath(path)
    total = 0.0
    inside = False
    try:
        with open("/proc/self/smaps") as fh:
            for line in fh:
                head = line.split(None, 5)
                if len(head) >= 5 and "-" in head[0] and not head[0].endswith(":"):
                    inside = len(head) == 6 and head[5].rstrip("\n") == target
                elif inside and head and head[0] == "Rss:":
                    total += float(head[1])
    except OSError:
        return None
    return total


def _peak_rss_kb(resource):
    """Peak resident set of this process, kB.

    ``VmHWM`` where Linux gives it: ``ru_maxrss`` of a freshly started child
    also counts the parent's resident set at the fork (Linux keeps the larger
    of the old and new address spaces' peaks across ``exec``), so it would
    charge the benchmark's own memory to the measurement.
    """
    hwm = _status_kb("VmHWM")
    return hwm if hwm is not None else _rss_kb(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)


def _child_main():
    """Entry of a measurement subprocess: a JSON job on stdin, a JSON result on stdout."""
    import resource
    import tracemalloc

    job = json.loads(sys.stdin.read())
    capture = open_capture(job["capture"])
    with open(job["plan"], "rb") as fh:
        data = fh.read()
    plan = Plan.from_yaml(data, source=job["plan"])
    taps = np.load(job["taps"]).astype(np.float32) if job["mode"] == "reference" else None
    baseline = _peak_rss_kb(resource)
    tracemalloc.start()
    t0 = time.perf_counter()
    if job["mode"] == "reference":
        n_out, _ = _reference_pass(capture, taps, int(round(plan.total_decimation)), job["block"])
        samples = [n_out]
    else:
        reqs = [
            ChannelRequest(f"ch{i}", off, plan, plan_identity(data), job["plan"])
            for i, off in enumerate(job["offsets"])
        ]
        res = extract_channels(
            capture, reqs, job["out_dir"], block_size=job["block"], spectra=False, progress=job["progress"]
        )
        samples = [c.samples for c in res.channels]
    seconds = time.perf_counter() - t0
    _, heap_peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    peak = _peak_rss_kb(resource)
    mapped = _mapped_kb(capture.data_path)
    out = {
        "seconds": seconds,
        "samples": samples,
        "peak_rss_mb": peak * 1024 / _MB,
        "baseline_rss_mb": baseline * 1024 / _MB,
        "mapped_file_mb": None if mapped is None else mapped * 1024 / _MB,
        "peak_heap_mb": heap_peak / _MB,
    }
    sys.stdout.write(json.dumps(out) + "\n")
    return 0


def _measure_in_subprocess(job, *, progress=False):
    """Run one measurement in a fresh interpreter; returns its result dict."""
    package_parent = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env = dict(os.environ)
    env["PYTHONPATH"] = package_parent + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    code = "import sys; from channelizer.bench import _child_main; sys.exit(_child_main())"
    proc = subprocess.run(
        [sys.executable, "-c", code],
        input=json.dumps(job),
        stdout=subprocess.PIPE,
        stderr=None if progress else subprocess.PIPE,
        text=True,
        env=env,
        check=False,
    )
    if proc.returncode != 0:
        tail = (proc.stderr or "").strip().splitlines()[-5:]
        raise RuntimeError(f"measurement subprocess ({job['mode']}) failed with status {proc.returncode}: "
                           + " | ".join(tail))
    return json.loads(proc.stdout.strip().splitlines()[-1])


# ----------------------------------------------------------------------------- benchmark
def _target(value, limit, sense):
    met = value >= limit if sense == ">=" else value <= limit
    return {"value": value, "limit": limit, "sense": sense, "met": bool(met)}


def _ratio(a, b):
    return a / b if b else None


def run_benchmark(*, seconds=2.0, channels=8, workdir=None, progress=False, repeats=REPEATS):
    """Time the extract path against a single-stage scipy resampler on a synthetic capture.

    Parameters
    ----------
    seconds : float
        Length of the synthetic capture at 61.44 Msps (4 bytes a sample on disk).
    channels : int
        Channels of the many-channel run (1 to 64).
    workdir : str, optional
        Folder for the temporary files (default: the system's temporary folder);
        everything written is removed at the end.
    progress : bool
        Say on stderr what is being done.
    repeats : int
        Timed runs per measurement; the best is kept.

    Returns
    -------
    BenchReport

    Notes
    -----
    The capture holds white noise (-47 dBFS per component) and one tone per
    channel, 20 kHz above its centre.  The one-channel run and the reference
    both take the channel at the capture centre, so the reference needs no mixer;
    this favours the reference, whose blocks are resampled independently
    (zero-padded edges, as ``resample_poly`` does on a single array).  Both read
    and convert the capture through :meth:`Capture.blocks` in blocks of
    ``BLOCK`` samples; the reference's taps are float32 so that it computes in
    complex64 like the chain.  The chain writes its output (``cf32_le`` SigMF,
    with ``fsync``); the reference only sums its output power.

    References
    ----------
    R. E. Crochiere and L. R. Rabiner, "Optimum FIR digital filter
    implementations for decimation, interpolation, and narrow-band filtering",
    IEEE Trans. ASSP 23(5):444-456, 1975 (why a multistage chain beats one stage).
    """
    seconds = _positive(seconds, "seconds")
    channels = _count(channels, "channels", MAX_CHANNELS)
    repeats = _count(repeats, "repeats", 100)
    n = int(round(seconds * SAMPLE_RATE))
    _check_run(n, f"seconds {seconds:g}", workdir)
    spec = BENCH_SPEC
    offsets = channel_offsets(channels)
    one_offset = 0.0  # channel_offsets always holds the capture centre

    with tempfile.TemporaryDirectory(prefix="channelizer-bench-", dir=workdir) as tmp:
        _check_space(tmp, 4 * n)
        _say(progress, f"planning {spec.bandwidth / 1e3:g} kHz at {spec.output_rate / 1e3:g} kHz")
        plan, ident, plan_path = _plan_file(tmp)
        down = int(round(plan.total_decimation))
        ref = reference_filter(spec, fs=float(SAMPLE_RATE))
        taps_path = os.path.join(tmp, "reference_taps.npy")
        np.save(taps_path, ref["taps"])
        taps32 = ref["taps"].astype(np.float32)

        base = os.path.join(tmp, "synthetic")
        _say(progress, f"writing {n:,} samples ({4 * n / _MB:,.0f} MB)")
        _write_capture(base, n, tones=[int(o) + _TONE_OFFSET_HZ for o in offsets], progress=progress)
        capture = open_capture(base + ".sigmf-meta")

        def requests(offs):
            return [ChannelRequest(f"ch{i}", off, plan, ident, plan_path) for i, off in enumerate(offs)]

        one_dir, many_dir = os.path.join(tmp, "one"), os.path.join(tmp, "many")
        runs = {"reference": [], "one_channel": [], "many_channels": []}
        ref_out = ref_power = None
        one_res = many_res = None
        for rep in range(repeats):
            _say(progress, f"timing, round {rep + 1} of {repeats}")
            t0 = time.perf_counter()
            ref_out, ref_power = _reference_pass(capture, taps32, down, BLOCK)
            runs["reference"].append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            one_res = extract_channels(capture, requests([one_offset]), one_dir, block_size=BLOCK, spectra=False)
            runs["one_channel"].append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            many_res = extract_channels(capture, requests(offsets), many_dir, block_size=BLOCK, spectra=False)
            runs["many_channels"].append(time.perf_counter() - t0)

        expected = _expected_outputs(plan, n)
        written_one = [open_capture(os.path.join(one_dir, "ch0.sigmf-meta")).num_samples]
        written_many = [open_capture(os.path.join(many_dir, f"ch{i}.sigmf-meta")).num_samples for i in range(channels)]
        ref_expected = sum(-(-min(BLOCK, n - i) // down) for i in range(0, n, BLOCK))
        one_power_db = one_res.channels[0].mean_power_dbfs
        ref_power_db = 10 * math.log10(ref_power) if ref_power > 0 else -math.inf
        checks = {
            "expected_outputs": expected,
            "one_channel_written": written_one,
            "many_channels_written": written_many,
            "reference_outputs": ref_out,
            "reference_expected": ref_expected,
            "lengths_ok": bool(
                all(w == expected for w in written_one + written_many)
                and all(c.samples == expected for c in one_res.channels + many_res.channels)
                and ref_out == ref_expected
            ),
            "one_channel_power_dbfs": round(one_power_db, 4),
            "reference_power_dbfs": round(ref_power_db, 4),
            "power_difference_db": round(one_power_db - ref_power_db, 4),
        }

        memory = {}
        jobs = {
            "reference": {"mode": "reference", "offsets": [one_offset]},
            "one_channel": {"mode": "extract", "offsets": [one_offset]},
            "many_channels": {"mode": "extract", "offsets": offsets},
        }
        for name, job in jobs.items():
            _say(progress, f"peak memory of {name.replace('_', ' ')} (own process)")
            job.update(capture=base + ".sigmf-meta", plan=plan_path, taps=taps_path, block=BLOCK,
                       out_dir=os.path.join(tmp, f"mem-{name}"), progress=False)
            got = _measure_in_subprocess(job)
            memory[name] = {k: (None if v is None else round(v, 3)) for k, v in got.items() if k != "samples"}
        capture.close()

    timings = {}
    for name, ts in runs.items():
        best = min(ts)
        rate = n / best / 1e6
        timings[name] = {
            "runs_s": [round(t, 6) for t in ts],
            "best_s": round(best, 6),
            "input_msps": round(rate, 3),
            "realtime_factor": round(rate * 1e6 / SAMPLE_RATE, 4),
        }
    t_ref, t_one, t_many = (min(runs[k]) for k in ("reference", "one_channel", "many_channels"))
    ratios = {
        "speedup_vs_reference": round(t_ref / t_one, 4),
        "many_over_one_time": round(t_many / t_one, 4),
        "many_speedup_vs_reference_per_channel": round(channels * t_ref / t_many, 4),
    }
    for name in ("one_channel", "many_channels"):
        for key in ("peak_rss_mb", "peak_heap_mb"):
            r = _ratio(memory[name][key], memory["reference"][key])
            ratios[f"{name}_{key[:-3]}_vs_reference"] = None if r is None else round(r, 4)
    targets = {
        "speedup_vs_reference": _target(ratios["speedup_vs_reference"], 5.0, ">="),
        "many_over_one_time": _target(ratios["many_over_one_time"], 5.0, "<="),
        "one_channel_realtime": _target(timings["one_channel"]["realtime_factor"], 1.0, ">="),
    }
    return BenchReport(
        capture={"sample_rate": float(SAMPLE_RATE), "seconds": n / SAMPLE_RATE, "samples": n,
                 "datatype": "ci16_le", "block_size": BLOCK, "offsets_hz": offsets},
        channels=channels,
        repeats=repeats,
        plan=_plan_summary(plan, ident),
        reference={
            "method": "scipy.signal.resample_poly(x, 1, D, window=taps) per block, float32 taps",
            "numtaps": ref["numtaps"],
            "beta": round(ref["beta"], 6),
            "rejection_db": round(ref["rejection_db"], 3),
            "ripple_db": round(ref["ripple_db"], 6),
            "decimation": down,
        },
        timings=timings,
        memory=memory,
        ratios=ratios,
        targets=targets,
        checks=checks,
        environment=_environment(),
    )


def _check_run(n, given, workdir):
    """Refuse a run too short to give outputs, or a work folder that is not one."""
    least = 16 * int(round(SAMPLE_RATE / BENCH_SPEC.output_rate))
    if n < least:
        raise ChannelizerError(f"{given} gives {n} samples; the run needs at least {least}")
    if workdir is not None and not os.path.isdir(workdir):
        raise ChannelizerError(f"{workdir}: not a folder")


def _plan_file(folder):
    """Plan :data:`BENCH_SPEC`, write it to ``folder/plan.yaml``; returns (plan, identity, path)."""
    plan = plan_chain(BENCH_SPEC).plan
    if not _has_cic_and_halfband(plan):  # pragma: no cover - guards a planner change
        raise RuntimeError("the benchmark chain no longer holds a CIC and a half-band; choose another spec")
    data = plan.to_yaml().encode("utf-8")
    path = os.path.join(folder, "plan.yaml")
    with open(path, "wb") as fh:
        fh.write(data)
    return plan, plan_identity(data), path


def _check_space(folder, need_bytes):
    free = shutil.disk_usage(folder).free
    if free < need_bytes * 1.1 + 64 * 2**20:
        raise ChannelizerError(
            f"{folder}: {free / 1e9:.2f} GB free, the run needs about {need_bytes * 1.1 / 1e9:.2f} GB; "
            "give another work folder or a smaller size"
        )


# ----------------------------------------------------------------------------- soak
def run_soak(*, gigabytes=4.0, channels=4, workdir=None, progress=True):
    """Extract channels from a large capture in a subprocess and report its peak memory.

    Parameters
    ----------
    gigabytes : float
        Size of the ``ci16_le`` capture written, in 10^9 bytes (4 bytes a sample).
    channels : int
        Channels extracted in the one pass (1 to 64).
    workdir : str, optional
        Folder for the temporary files (default: the system's temporary folder);
        everything is removed at the end.
    progress : bool
        Say on stderr what is being done (and show the extract progress bar
        when stderr is a terminal).

    Returns
    -------
    SoakReport
        Target: peak resident memory of the extracting process below
        ``SOAK_RSS_TARGET_MB``.  The resident figure counts the pages of the
        memory-mapped capture that have been read (clean page cache, which the
        system can reclaim); ``mapped_file_mb`` and ``peak_rss_less_mapped_mb``
        show how much of it that is, and ``peak_heap_mb`` what the run allocated.
    """
    gigabytes = _positive(gigabytes, "gigabytes")
    channels = _count(channels, "channels", MAX_CHANNELS)
    n = int(gigabytes * 1e9) // 4
    _check_run(n, f"gigabytes {gigabytes:g}", workdir)
    down_total = int(round(SAMPLE_RATE / BENCH_SPEC.output_rate))
    offsets = channel_offsets(channels)
    with tempfile.TemporaryDirectory(prefix="channelizer-soak-", dir=workdir) as tmp:
        _check_space(tmp, 4 * n + 8 * n * channels // down_total)
        plan, ident, plan_path = _plan_file(tmp)
        base = os.path.join(tmp, "soak")
        _say(progress, f"writing {n:,} samples ({4 * n / 1e9:.2f} GB) in {tmp}")
        gen_s = _write_capture(base, n, tones=[int(o) + _TONE_OFFSET_HZ for o in offsets], progress=progress,
                               label="soak capture")
        out_dir = os.path.join(tmp, "out")
        _say(progress, f"extracting {channels} channels in a subprocess")
        got = _measure_in_subprocess(
            {"mode": "extract", "capture": base + ".sigmf-meta", "plan": plan_path, "taps": "", "block": BLOCK,
             "offsets": offsets, "out_dir": out_dir, "progress": bool(progress)},
            progress=progress,
        )
        expected = _expected_outputs(plan, n)
        outputs = []
        for i in range(channels):
            written = open_capture(os.path.join(out_dir, f"ch{i}.sigmf-meta")).num_samples
            outputs.append({"name": f"ch{i}", "offset_hz": offsets[i], "expected": expected, "written": written,
                            "reported": got["samples"][i]})
    lengths_ok = all(o["written"] == o["expected"] == o["reported"] for o in outputs)
    memory = {k: (None if v is None else round(v, 3)) for k, v in got.items() if k not in ("samples", "seconds")}
    if memory["mapped_file_mb"] is not None:
        memory["peak_rss_less_mapped_mb"] = round(memory["peak_rss_mb"] - memory["mapped_file_mb"], 3)
    rate = n / got["seconds"] / 1e6
    targets = {"peak_rss_mb": _target(memory["peak_rss_mb"], SOAK_RSS_TARGET_MB, "<=")}
    if memory.get("peak_rss_less_mapped_mb") is not None:
        targets["peak_rss_less_mapped_mb"] = _target(memory["peak_rss_less_mapped_mb"], SOAK_RSS_TARGET_MB, "<=")
    return SoakReport(
        gigabytes=4 * n / 1e9,
        samples=n,
        channels=channels,
        plan=_plan_summary(plan, ident),
        seconds=round(got["seconds"], 4),
        input_msps=round(rate, 3),
        realtime_factor=round(rate * 1e6 / SAMPLE_RATE, 4),
        memory=memory,
        targets=targets,
        outputs=outputs,
        lengths_ok=bool(lengths_ok),
        generation_seconds=round(gen_s, 3),
        environment=_environment(),
    )


# ----------------------------------------------------------------------------- text
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
    lines += ["", "targets:"]
    labels = {
        "speedup_vs_reference": "one channel speed / reference speed",
        "many_over_one_time": f"{report.channels} channels time / one channel time",
        "one_channel_realtime": "one channel speed / real time",
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


#: Typical planner requests, timed by :func:`time_planner` (target: each under 2 s).
PLANNER_SPECS = (
    dict(input_rate=61.44e6, bandwidth=200e3),
    dict(input_rate=2.4e6, bandwidth=12.5e3, output_rate=48e3),
    dict(input_rate=61.44e6, bandwidth=20e3, output_rate=25e3),
    dict(input_rate=100e6, bandwidth=1e6, objective="hardware"),
    dict(input_rate=2.4e6, bandwidth=11e3, output_rate=48e3, stopband_edge=7e3),
)
PLANNER_TARGET_S = 2.0


def time_planner(specs=PLANNER_SPECS, *, repeats=3):
    """Seconds :func:`channelizer.planner.plan_chain` takes per spec, design caches cleared.

    Returns a dict: ``specs`` (each with ``seconds``, the best of ``repeats``, and the
    chosen layout), ``worst_s``, ``target_s`` and ``met``.
    """
    from ..planning import design
    from ..planning.planner import plan_chain
    from ..planning.spec import ChainSpec

    rows = []
    for kw in specs:
        best = math.inf
        layout = ""
        for _ in range(repeats):
            for fn in (design.design_decimator, design.design_halfband, design.design_compensator):
                fn.cache_clear()
            t = time.perf_counter()
            res = plan_chain(ChainSpec(**kw))
            best = min(best, time.perf_counter() - t)
            layout = res.chosen.layout
        rows.append({"spec": {k: v for k, v in kw.items()}, "seconds": round(best, 4), "layout": layout})
    worst = max(r["seconds"] for r in rows)
    return {"specs": rows, "worst_s": worst, "target_s": PLANNER_TARGET_S, "met": worst < PLANNER_TARGET_S}
