"""One chunk of a capture through every channel's chain, as a worker runs it.

A worker opens the capture itself and reads only its own byte range (the chunk
and its pre-roll, see :mod:`channelizer.run.chunks`); it returns the chunk's
output samples of every channel, its part of the overview spectrum and its count
of replaced non-finite samples.  Nothing here needs dask: the distributed runner
ships :class:`ChunkJob` objects to :func:`run_chunk`, and a test can call it in
this process.

The bit-true CIC is the one stage whose memory is not finite: its integrators
carry the whole history, and with Hogenauer's pruning their truncations depend
on it, so a pre-roll does not reproduce them.  A bit-true chunk of a chain with a
CIC therefore starts from the CIC registers the previous chunk saw at the
chunk's pre-roll start (``snapshot_at``); those chunks run one after another.
"""

from dataclasses import dataclass, replace
from fractions import Fraction
import os
from pathlib import Path
import socket

import numpy as np

from ..errors import ChannelizerError
from .chunks import output_ratio
from .processor import _Pass

__all__ = ["ChunkJob", "portable_capture", "run_chunk"]


@dataclass(frozen=True)
class ChunkJob:
    """What a worker needs for one chunk.

    Attributes
    ----------
    capture : Capture
        The opened capture with absolute paths and no memory map (see
        :func:`portable_capture`).
    requests, names : tuple
        The channels (ChannelRequest) and their checked output names.
    start, stop, preroll : int
        The chunk's input range and the pre-roll fed before it.
    bit_true : bool
    nonfinite : {'error', 'zero'}
    block_size : int
    overview : SpacedWelch or None
        An empty accumulator of the overview's segment grid.
    data_size : int
        Size in bytes of the data file as the client sees it.
    snapshot_at : int or None
        Bit-true: input index at which to return the CIC registers (the next
        chunk's pre-roll start).
    """

    capture: object
    requests: tuple
    names: tuple
    start: int
    stop: int
    preroll: int
    bit_true: bool = False
    nonfinite: str = "error"
    block_size: int = 1 << 20
    overview: object = None
    data_size: int = 0
    snapshot_at: int | None = None


def portable_capture(capture):
    """The capture with absolute paths and no open map, ready to send to a worker."""
    return replace(
        capture,
        path=Path(os.path.abspath(capture.path)),
        data_path=Path(os.path.abspath(capture.data_path)),
        nonfinite_count=0,
    )


def _check_visible(job):
    cap = job.capture
    host = socket.gethostname()
    try:
        size = os.stat(cap.data_path).st_size
    except OSError as exc:
        raise ChannelizerError(
            f"{cap.data_path}: not readable on worker {host} ({exc.strerror}); "
            "the capture must be on a path every worker can read"
        ) from None
    if size != job.data_size:
        raise ChannelizerError(
            f"{cap.data_path}: {size} bytes on worker {host} but {job.data_size} on the client; not the same file"
        )
    return replace(cap, nonfinite_count=0)


def run_chunk(job, cic_states=None):
    """Run one chunk; returns a dict of plain data.

    Parameters
    ----------
    job : ChunkJob
    cic_states : list, optional
        Bit-true: every channel's CIC registers at the pre-roll start (the
        ``'cic_states'`` of the previous chunk's result); ``None`` at the start.

    Returns
    -------
    dict
        ``outputs`` (one complex64 array per channel: exactly the single pass's
        samples for ``[start, stop)``), ``overview`` (``SpacedWelch.state()`` or
        None), ``nonfinite`` (samples replaced in the chunk), ``cic_states``
        (at ``snapshot_at``, or None).
    """
    cap = _check_visible(job)
    s0 = max(0, job.start - job.preroll)
    one = _Pass(cap, list(job.requests), list(job.names), bit_true=job.bit_true, block_size=job.block_size,
                spectra=False, start_index=s0)
    if job.bit_true and cic_states is not None:
        for runner, states in zip(one.runners, cic_states):
            runner.set_cic_states(states)
    cuts = sorted({s0, job.start, job.stop} | ({job.snapshot_at} if job.snapshot_at is not None else set()))
    outs = [[] for _ in job.requests]
    nonfinite, snapshot = 0, None
    for a, b in zip(cuts[:-1], cuts[1:]):
        if a == job.start:
            nonfinite = -cap.nonfinite_count  # count only the chunk's own samples, not the pre-roll's
        if job.bit_true:
            blocks = cap.raw_blocks(job.block_size, start=a, stop=b)
        else:
            blocks = cap.blocks(job.block_size, start=a, stop=b, nonfinite=job.nonfinite)
        for block in blocks:
            for k, y in enumerate(one._outputs(0, block)):
                outs[k].append(y)
        if b == job.snapshot_at:
            snapshot = [runner.cic_states() for runner in one.runners]
    nonfinite += cap.nonfinite_count
    outputs = []
    for k, req in enumerate(job.requests):
        r = output_ratio(req.plan.stages)
        skip, first = Fraction(job.start - s0) * r, Fraction(job.start) * r
        want = int(job.stop * r) - int(first)  # floor(N L / M) after the chunk, less before it
        y = np.concatenate(outs[k]) if outs[k] else np.zeros(0, np.complex64)
        if skip.denominator != 1 or first.denominator != 1 or y.size - int(skip) != want:
            raise ChannelizerError(
                f"chunk {job.start}..{job.stop} of channel {job.names[k]}: {y.size - int(skip)} outputs, {want} expected "
                "(chunk not on the chain's period)"
            )
        outputs.append(np.ascontiguousarray(y[int(skip):]))
    overview = None
    if job.overview is not None:
        acc = job.overview.fresh()
        n = acc.nperseg
        starts = list(acc.starts(job.start, job.stop))
        if starts:
            acc.add_segments(np.stack([cap.read(s, n, nonfinite="zero") for s in starts]))
        overview = acc.state()
    return {"outputs": outputs, "overview": overview, "nonfinite": int(nonfinite), "cic_states": snapshot}
