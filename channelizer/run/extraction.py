"""The whole extraction job: plans and channels in, recordings, summary and plots out.

Used by the ``extract`` command and the demo; the command line only parses.
"""

import math
import os

from ..io.channels import resolve_offset
from ..errors import ChannelizerError
from ..planning.plan import MAX_PLAN_BYTES, Plan
from ..io.atomic import FileSet
from ..io.paths import check_outputs, read_regular_file
from ..io.run_folder import StagedFolder
from ..units import format_hz
from .output_folder import check_run_folder
from .processor import ChannelRequest, check_requests, extract_channels, plan_identity, write_summary

__all__ = ["load_plan_file", "run_extraction"]


def load_plan_file(path):
    """Read and validate a plan file; returns (plan, identity)."""
    data = read_plan_bytes(path)
    return Plan.from_yaml(data, source=path), plan_identity(data)


def read_plan_bytes(path):
    """The bytes of a plan file: a regular file, refused when too large to be one."""
    data = read_regular_file(path, what="plan", limit=MAX_PLAN_BYTES)
    if len(data) > MAX_PLAN_BYTES:
        raise ChannelizerError(f"{path}: file is larger than {MAX_PLAN_BYTES // 2**20} MiB; not a plan")
    return data


def run_extraction(
    capture,
    entries,
    out_dir,
    *,
    plan_path=None,
    base_dir=".",
    output_format="cf32_le",
    bit_true=False,
    plots=True,
    progress=False,
    nonfinite="error",
    block_size=None,
    audit=True,
    trim_settling=False,
    audit_resolution=None,
    workers=None,
    scheduler=None,
    inputs=(),
):
    """Extract ``entries`` (ChannelEntry) from an open capture into ``out_dir``.

    A channel's own plan path (from a channel list) is read relative to
    ``base_dir``; otherwise ``plan_path`` serves.  Returns the ExtractResult, with
    ``summary.json`` written and, unless ``plots`` is false, ``overview.png`` and
    one ``NAME.png`` per channel; ``result.warnings`` holds a line per channel whose
    listed bandwidth is wider than its plan's passband.  ``workers`` (a local cluster
    of that many processes) or ``scheduler`` (a running cluster's address) runs the
    pass on dask.distributed (:mod:`channelizer.run.distributed`), with the same outputs.

    ``out_dir`` then holds exactly this run: it must be missing, empty or an earlier
    run (:func:`channelizer.run.output_folder.check_run_folder`), which is replaced
    as a whole, and it may not be or hold any input (the capture, the plans, and
    ``inputs``, e.g. the channel list).
    """
    if workers is not None or scheduler is not None:
        from .distributed import check_cluster_options

        check_cluster_options(workers, scheduler)
    plans = {}
    requests = []
    warnings = []
    for e in entries:
        path = plan_path if e.plan is None else os.path.join(base_dir, e.plan)
        if path is None:
            raise ChannelizerError(f"channel {e.name}: no plan; give --plan PLAN.yaml or a plan in the channel list")
        if path not in plans:
            plans[path] = load_plan_file(path)
        plan, ident = plans[path]
        if e.bandwidth is not None and e.bandwidth > plan.bandwidth * (1 + 1e-9):
            warnings.append(
                f"channel {e.name}: listed bandwidth {format_hz(e.bandwidth)} is wider than the passband of its plan "
                f"{os.path.basename(path)} ({format_hz(plan.bandwidth)}); its edges will be cut"
            )
        requests.append(ChannelRequest(e.name, _offset(e, capture), plan, ident, path))
    kw = {} if block_size is None else {"block_size": block_size}
    kw["trim_settling"] = trim_settling
    if audit_resolution is not None:
        kw["audit_resolution"] = audit_resolution
    if workers is not None or scheduler is not None:
        from .distributed import distributed_runner

        kw["runner"] = distributed_runner(workers=workers, scheduler=scheduler)
    result = run_requests(capture, requests, out_dir, (output_format, bit_true, nonfinite, progress, plots, audit), kw,
                          inputs=[capture.path, capture.data_path, *plans, *inputs])
    result.warnings = warnings
    return result


def run_requests(capture, requests, out_dir, options, kw, *, inputs):
    """Extract ``requests``, write the summary and the plots: the whole run, or nothing.

    ``options`` is ``(output_format, bit_true, nonfinite, progress, plots, audit)``;
    ``kw`` goes to :func:`extract_channels` (block size, engine or runner, settling,
    audit resolution); ``inputs`` are the files the run reads, never to be written.
    """
    output_format, bit_true, nonfinite, progress, plots, audit = options
    check_requests(capture, requests, bit_true=bit_true, **({"block_size": kw["block_size"]} if "block_size" in kw else {}))
    check_outputs(folders=[out_dir], inputs=inputs)
    # the whole run (recordings, summary, plots) is built in a hidden sibling folder and
    # replaces out_dir in one rename (channelizer.io.run_folder)
    with StagedFolder(out_dir, kind="run", check=check_run_folder).writing() as stage:
        files = FileSet()
        try:
            result = _extract_and_summarise(capture, requests, stage, files, output_format, bit_true, nonfinite, progress, plots, audit, kw)
            files.commit()
        except BaseException:
            files.abort()
            raise
        if plots:
            _plot(result, requests, capture, stage)
    result.summary_path = os.path.join(out_dir, os.path.basename(result.summary_path))
    return result


def _offset(entry, capture):
    """The entry's offset from the centre; an absolute frequency far outside the band that
    would fit as an offset is refused with the offset spelled out."""
    offset = resolve_offset(entry, capture.center_frequency)
    half = capture.sample_rate / 2
    if not entry.is_offset and capture.center_frequency is not None and abs(offset) > half >= abs(entry.frequency):
        short = format_hz(entry.frequency, signed=True).replace(" ", "").removesuffix("Hz")
        raise ChannelizerError(
            f"channel {entry.name}: {format_hz(entry.frequency)} is read as an absolute frequency, outside the captured "
            f"band {format_hz(capture.center_frequency - half)} to {format_hz(capture.center_frequency + half)}; "
            f"for an offset from the centre write {entry.name}={short}"
        )
    return offset


def _extract_and_summarise(capture, requests, out_dir, files, output_format, bit_true, nonfinite, progress, plots, audit, kw):
    result = extract_channels(
        capture,
        requests,
        out_dir,
        output_format=output_format,
        bit_true=bit_true,
        nonfinite=nonfinite,
        progress=progress,
        spectra=plots or audit,
        fileset=files,
        **kw,
    )
    if audit and result.overview is not None:
        from ..checks.alias_audit import audit_channel

        for req, ch in zip(requests, result.channels):
            ch.alias_audit = audit_channel(result.overview, req, ch)
    write_summary(result, out_dir, fileset=files)
    return result


def _plot(result, requests, capture, out_dir):
    """``overview.png`` and one ``NAME.png`` per channel (each written atomically)."""
    from ..views.plots import plot_channel, plot_overview

    if result.overview is not None:
        center = capture.center_frequency or 0.0
        plot_overview(
            result.overview,
            [(r.name, center + r.offset, r.plan.bandwidth) for r in requests],
            os.path.join(out_dir, "overview.png"),
        )
    noise = None
    if result.overview is not None:
        from ..dsp.detection import estimate_noise_floor

        level = estimate_noise_floor(result.overview)
        noise = 10.0 * math.log10(level) if level > 0 else None
    for req, ch in zip(requests, result.channels):
        if ch.spectrum is None:
            continue
        floor = None if result.overview is None else _alias_floor(result.overview, req)
        plot_channel(
            ch.spectrum,
            name=ch.name,
            bandwidth=req.plan.bandwidth,
            alias_floor_dbfs_per_hz=floor,
            audit=ch.alias_audit,
            path=os.path.join(out_dir, f"{ch.name}.png"),
            rejection_db=req.plan.predicted.get("alias_rejection_db"),
            noise_floor_dbfs_per_hz=noise,
        )


def _alias_floor(psd, req):
    """Strongest input density anywhere, attenuated by the plan's predicted rejection."""
    import numpy as np

    peak = float(np.max(psd.dbfs_per_hz()))
    rej = float(req.plan.predicted.get("alias_rejection_db", math.nan))
    return peak - rej
