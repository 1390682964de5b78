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

import math
import numbers
import os
import shutil
import sys
import tempfile
import time

import numpy as np

from ..io.captures import open_capture
from ..errors import ChannelizerError
from ..planning.planner import plan_chain
from ..run.processor import ChannelRequest, extract_channels, plan_identity
from ..io.sigmf_writer import SigmfWriter
from ..planning.spec import ChainSpec
from ..planning.stages import CicStage, ResamplerStage
from .report import BenchReport, SoakReport
from .command import time_extract_command
from .memory import _environment, _measure_in_subprocess
from .reference import _reference_pass, reference_filter

__all__ = [
    "BENCH_SPEC",
    "channel_offsets",
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


# ----------------------------------------------------------------------------- subprocess measurements


# ----------------------------------------------------------------------------- benchmark
def _target(value, limit, sense):
    met = value >= limit if sense == ">=" else value <= limit
    return {"value": value, "limit": limit, "sense": sense, "met": bool(met)}


def _ratio(a, b):
    return a / b if b else None


def run_benchmark(*, seconds=2.0, channels=8, workdir=None, progress=False, repeats=REPEATS, workers=None):
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
    workers : int, optional
        Also time the two-channel extraction on a local dask.distributed cluster
        of this many processes against one process (see
        :mod:`channelizer.bench.scaling`).

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

        _say(progress, "timing the whole extract command (fresh interpreter, 2 channels)")
        command = time_extract_command(base + ".sigmf-meta", plan_path, os.path.join(tmp, "command"), samples=n,
                                       fs=float(SAMPLE_RATE), reference_one_s=min(runs["reference"]),
                                       repeats=repeats)
        scaling = {}
        if workers is not None:
            from .command import COMMAND_CHANNELS
            from .scaling import time_workers

            _say(progress, f"timing one process against {workers} dask workers")
            scaling = time_workers(base + ".sigmf-meta", requests(COMMAND_CHANNELS), tmp, workers=workers,
                                   repeats=repeats)

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
        "command_realtime": _target(command["realtime_factor"], 2.0, ">="),
        "command_speedup_vs_reference": _target(command["speedup_vs_reference"], 15.0, ">="),
    }
    if scaling:
        # the runner's scaling over processes: against the same work on one thread (see bench/scaling.py)
        targets["workers_speedup"] = _target(scaling["speedup_vs_one_thread"], 1.6, ">=")
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
        command=command,
        workers=scaling,
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


