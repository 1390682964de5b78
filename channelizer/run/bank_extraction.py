"""Extracting a raster of channels through a filter bank: one pass, every channel out.

The bank pass reuses the extraction job's writers, summary, alias audit and
plots (:mod:`channelizer.run.extraction`); only the engine differs: one
:class:`~channelizer.engines.filterbank.BankChannelizer` serves every channel.
Each channel's summary, audit and plot use the path it takes as a chain
(:meth:`BankPlan.channel_plan`).
"""

import math

from ..errors import ChannelizerError
from ..io.channels import resolve_offset
from ..planning.bank import BankPlan, is_bank_data
from ..planning.plan import Plan, load_plan_text
from ..units import format_hz
from .extraction import RunOptions, read_plan_bytes, run_requests
from .processor import ChannelRequest, plan_identity

__all__ = ["load_any_plan_file", "raster_channel_name", "select_channels", "run_bank_extraction"]


def load_any_plan_file(path):
    """``(plan, identity)`` of a plan file: a :class:`BankPlan` for a bank plan, else a chain ``Plan``.

    The file is read and parsed once, whichever kind it holds.
    """
    data = read_plan_bytes(path)
    loaded = load_plan_text(data, source=path)
    kind = BankPlan if is_bank_data(loaded) else Plan
    return kind.from_dict(loaded, source=path), plan_identity(data)


def raster_channel_name(frequency):
    """Output name of a raster channel from its frequency in Hz: ``ch-0150000``,
    ``ch-m0150000`` below zero (offsets from the centre of a capture without one)."""
    f = int(round(frequency))
    return f"ch-{'m' if f < 0 else ''}{abs(f):07d}"


def select_channels(plan, entries, *, center, plan_source="plan"):
    """``[(name, raster index)]``: every raster channel, or those ``entries`` name.

    A frequency off the raster is refused with the nearest raster frequency.
    """
    base = 0.0 if center is None else center
    if not entries:
        return [(raster_channel_name(base + off), i) for i, off in enumerate(plan.offsets())]
    out = []
    for e in entries:
        if e.plan is not None:
            raise ChannelizerError(f"channel {e.name}: has its own plan {e.plan}; a bank plan serves every channel it extracts")
        off = resolve_offset(e, center)
        i, near = plan.raster_index(off)
        if i is None:
            raise ChannelizerError(
                f"channel {e.name}: {format_hz(base + off, digits=10)} is not on the raster of {plan_source} "
                f"({format_hz(plan.spacing)} spacing); the nearest raster frequency is {format_hz(base + near, digits=10)}"
            )
        out.append((e.name, i))
    return out


def run_bank_extraction(capture, plan, out_dir, *, entries=(), plan_id="", plan_source="", **options):
    """Extract the raster channels of a :class:`BankPlan` (all, or ``entries``) in one pass.

    Returns the ExtractResult with ``summary.json`` written and, unless ``plots``
    is false, ``overview.png`` and one ``NAME.png`` per channel, as
    :func:`channelizer.run.extraction.run_extraction` does, with the same ``options``
    (:class:`~channelizer.run.extraction.RunOptions`).
    """
    opts = RunOptions(**options)
    if opts.bit_true:
        raise ChannelizerError("--bit-true does not cover filter-bank plans yet; drop --bit-true or plan a chain")
    if opts.on_cluster:
        raise ChannelizerError("the filter-bank path runs in one process; drop --workers/--scheduler or plan a chain")
    if not math.isclose(capture.sample_rate, plan.input_rate, rel_tol=1e-9):
        raise ChannelizerError(
            f"{capture.path} runs at {format_hz(capture.sample_rate, 'sps')} but the bank plan {plan_source} expects {format_hz(plan.input_rate, 'sps')}"
        )
    chosen = select_channels(plan, list(entries), center=capture.center_frequency, plan_source=plan_source or "the plan")
    offsets, residuals = plan.offsets(), plan.residuals()
    path = plan.channel_plan()
    requests = [ChannelRequest(name, offsets[i], path, plan_id, plan_source) for name, i in chosen]
    from ..engines.filterbank import BankChannelizer  # the bank engine loads only for a bank plan

    engine = BankChannelizer(
        plan.prototype,
        plan.bins,
        plan.oversampling,
        channels=[(plan.channel_bins[i], residuals[i]) for _, i in chosen],
        fine_stages=plan.stages,
        fs=plan.input_rate,
    )
    reads = [capture.path, capture.data_path, *([plan_source] if plan_source else []), *opts.inputs]
    return run_requests(capture, requests, out_dir, opts, inputs=reads, engine=engine)
