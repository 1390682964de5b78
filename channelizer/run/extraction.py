"""The whole extraction job: plans and channels in, recordings, summary and plots out.

Used by the ``extract`` command and the demo; the command line only parses.
"""

from dataclasses import dataclass
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

__all__ = ["RunOptions", "load_plan_file", "run_extraction"]


@dataclass(frozen=True)
class RunOptions:
    """How an extraction runs and what it writes: the keyword options of
    :func:`run_extraction` and :func:`channelizer.run.bank_extraction.run_bank_extraction`.

    Attributes
    ----------
    output_format : str
        SigMF datatype of the channel recordings (``cf32_le`` by default).
    bit_true : bool
        Run the integer model of the plan instead of the float engine.
    plots : bool
        Write ``overview.png`` and one ``NAME.png`` per channel.
    progress : bool
        Show a progress bar on a terminal.
    nonfinite : {'error', 'zero'}
        Refuse a capture holding NaN or infinity, or replace those samples by zero.
    block_size : int, optional
        Input samples per block (the outputs do not depend on it).
    audit : bool
        Run the alias audit against the input spectrum.
    trim_settling : bool
        Drop each channel's first outputs, before its chain has settled.
    audit_resolution : float, optional
        Resolution in Hz of the input spectrum the audit reads.
    workers : int, optional
        Run on a local dask.distributed cluster of this many processes.
    scheduler : str, optional
        Run on the dask.distributed cluster at this address.
    inputs : sequence of str
        Further files the run reads (a channel list): never written.
    """

    output_format: str = "cf32_le"
    bit_true: bool = False
    plots: bool = True
    progress: bool = False
    nonfinite: str = "error"
    block_size: int | None = None
    audit: bool = True
    trim_settling: bool = False
    audit_resolution: float | None = None
    workers: int | None = None
    scheduler: str | None = None
    inputs: tuple = ()

    @property
    def on_cluster(self):
        """Whether the pass runs on dask.distributed (``workers`` or ``scheduler`` given)."""
        return self.workers is not None or self.scheduler is not None

    def pass_keywords(self):
        """The keywords of :func:`extract_channels` these options set (block size, settling, audit resolution)."""
        kw = {"trim_settling": self.trim_settling}
        if self.block_size is not None:
            kw["block_size"] = self.block_size
        if self.audit_resolution is not None:
            kw["audit_resolution"] = self.audit_resolution
        return kw


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


def run_extraction(capture, entries, out_dir, *, plan_path=None, base_dir=".", preloaded=None, **options):
    """Extract ``entries`` (ChannelEntry) from an open capture into ``out_dir``.

    A channel's own plan path (from a channel list) is read relative to
    ``base_dir``; otherwise ``plan_path`` serves.  ``preloaded`` maps a plan path to
    its ``(plan, identity)`` where the caller has read it already.  Returns the ExtractResult, with
    ``summary.json`` written and, unless ``plots`` is false, ``overview.png`` and
    one ``NAME.png`` per channel; ``result.warnings`` holds a line per channel whose
    listed bandwidth is wider than its plan's passband.  ``workers`` (a local cluster
    of that many processes) or ``scheduler`` (a running cluster's address) runs the
    pass on dask.distributed (:mod:`channelizer.run.distributed`), with the same outputs.

    ``out_dir`` then holds exactly this run: it must be missing, empty or an earlier
    run (:func:`channelizer.run.output_folder.check_run_folder`), which is replaced
    as a whole, and it may not be or hold any input (the capture, the plans, and
    ``inputs``, e.g. the channel list).  ``options`` are the fields of
    :class:`RunOptions`; an unknown one raises ``TypeError``.
    """
    opts = RunOptions(**options)
    if opts.on_cluster:
        from .distributed import check_cluster_options

        check_cluster_options(opts.workers, opts.scheduler)
    plans = dict(preloaded or {})
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
    kw = {}
    if opts.on_cluster:
        from .distributed import distributed_runner

        kw["runner"] = distributed_runner(workers=opts.workers, scheduler=opts.scheduler)
    result = run_requests(capture, requests, out_dir, opts, inputs=[capture.path, capture.data_path, *plans, *opts.inputs], **kw)
    result.warnings = warnings
    return result


def run_requests(capture, requests, out_dir, options, *, inputs, **engine):
    """Extract ``requests``, write the summary and the plots: the whole run, or nothing.

    ``options`` is a :class:`RunOptions`; ``engine`` (``engine=`` or ``runner=``) goes
    to :func:`extract_channels` with the options' own keywords; ``inputs`` are the
    files the run reads, never to be written.
    """
    kw = {**options.pass_keywords(), **engine}
    check_requests(capture, requests, bit_true=options.bit_true, **({"block_size": kw["block_size"]} if "block_size" in kw else {}))
    check_outputs(folders=[out_dir], inputs=inputs)
    # the whole run (recordings, summary, plots) is built in a hidden sibling folder and
    # replaces out_dir in one rename (channelizer.io.run_folder)
    with StagedFolder(out_dir, kind="run", check=check_run_folder).writing() as stage:
        files = FileSet()
        try:
            result = _extract_and_summarise(capture, requests, stage, files, options, kw)
            files.commit()
        except BaseException:
            files.abort()
            raise
        if options.plots:
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


def _extract_and_summarise(capture, requests, out_dir, files, options, kw):
    result = extract_channels(
        capture,
        requests,
        out_dir,
        output_format=options.output_format,
        bit_true=options.bit_true,
        nonfinite=options.nonfinite,
        progress=options.progress,
        spectra=options.plots or options.audit,
        channel_spectra=options.plots,  # only the plots read them; the audit reads the input spectrum
        fileset=files,
        **kw,
    )
    if options.audit and result.overview is not None:
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
