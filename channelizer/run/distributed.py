"""Extraction on a dask.distributed cluster: chunks in time, one task each, written by the client.

The capture is cut into chunks (:mod:`channelizer.run.chunks`); each is a task
(:func:`channelizer.run.chunk_pass.run_chunk`) that reads its own byte range of
the capture, so the capture's path must be readable by every worker (a shared
or copied file system; each worker checks and says so).  The client takes the
results in order and writes them through the same writers and the same atomic
run set as one process: the recordings appear together when every chunk is in,
or not at all.  A task whose worker dies is run again by dask elsewhere
(``retries`` more tries for a task that raises); a chunk that still fails ends
the run with one error line, nothing written.

dask.distributed is an optional extra (``pip install 'channelizer[cluster]'``):
the core stays numpy, scipy, matplotlib and PyYAML, and one process is the
right tool for most captures.
"""

import contextlib
import logging
import operator
import os

from ..errors import ChannelizerError
from ..io.progress import ProgressBar
from ..planning.stages import CicStage
from .chunk_pass import ChunkJob, portable_capture, run_chunk
from .chunks import balanced_chunk_blocks, chunk_layout

__all__ = ["INSTALL_HINT", "CHUNK_BLOCKS", "check_cluster_options", "chunk_jobs", "cluster_client", "cluster_layout",
           "distributed_runner", "run_on_client", "worker_slots", "write_chunk_results", "WORKER_ENVIRON"]

INSTALL_HINT = (
    "--workers and --scheduler need dask.distributed, an optional extra: "
    "pip install 'channelizer[cluster]' (or pip install 'dask[distributed]')"
)
#: Most blocks of the single pass per chunk (64 Mi samples, about 1.1 s of 61.44 Msps, in blocks
#: of 1 Mi): within it the chunk length is chosen for the cluster's worker count
#: (:func:`channelizer.run.chunks.balanced_chunk_blocks`).  The pre-roll is one block, so a chunk
#: of ``c`` blocks costs ``1 / c`` more work.
CHUNK_BLOCKS = 64
#: More tries for a task that raises (a worker that dies is handled by dask itself).
RETRIES = 2


#: Environment of every worker process, and the local cluster's settings, measured on a
#: 16 Mi-sample chunk against the same chunk run in this process: dask's sampling profiler
#: takes the worker's interpreter lock every 10 ms (a third slower); dask's
#: MALLOC_TRIM_THRESHOLD_ of 64 KiB turns off glibc's adaptive mmap threshold, so every
#: block-sized temporary is mapped and faulted in afresh (another third).  With these a worker
#: ran the chunk as fast as this process.
WORKER_ENVIRON = {
    "MALLOC_TRIM_THRESHOLD_": str(1 << 30),
    "MALLOC_MMAP_THRESHOLD_": str(1 << 25),
    "OMP_NUM_THREADS": "1",
    "MKL_NUM_THREADS": "1",
    "OPENBLAS_NUM_THREADS": "1",
}
#: The local cluster's periodic work is also slowed: its event-loop tick (20 ms), system
#: monitor (0.5 s) and memory monitor (0.1 s) kept an idle 2-worker cluster at 0.07-0.09 s
#: of CPU a second on a 2-core machine, time taken from the chunks; with these, 0.014 s.
#: They feed dask's dashboard and memory limits, which a run of a few chunks does not need.
_LOCAL_CONFIG = {
    "distributed.worker.profile.enabled": False,
    "distributed.nanny.pre-spawn-environ": WORKER_ENVIRON,
    "distributed.admin.tick.interval": "500ms",
    "distributed.admin.tick.limit": "10s",
    "distributed.admin.system-monitor.interval": "5s",
    "distributed.worker.memory.monitor-interval": "1s",
}


def _distributed():
    try:
        import distributed
    except ImportError:
        raise ChannelizerError(INSTALL_HINT) from None
    return distributed


def check_cluster_options(workers=None, scheduler=None):
    """Refuse contradictory or malformed options, and a missing dask, before any work."""
    if workers is not None and scheduler is not None:
        raise ChannelizerError("give --workers N or --scheduler ADDRESS, not both")
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int) or not 1 <= workers <= 256):
        raise ChannelizerError(f"--workers must be a whole number from 1 to 256, got {workers!r}")
    if scheduler is not None and (not isinstance(scheduler, str) or not scheduler.strip()):
        raise ChannelizerError(f"--scheduler needs an address such as tcp://host:8786, got {scheduler!r}")
    if workers is not None or scheduler is not None:
        _distributed()


@contextlib.contextmanager
def cluster_client(*, workers=None, scheduler=None):
    """A dask client: on a local cluster of ``workers`` processes started here, or on ``scheduler``."""
    distributed = _distributed()
    if scheduler is not None:
        try:
            client = distributed.Client(scheduler, timeout="10s")
        except (OSError, TimeoutError) as exc:
            raise ChannelizerError(f"scheduler {scheduler}: cannot connect ({exc})") from None
        try:
            yield client
        finally:
            client.close()
        return
    import dask

    with dask.config.set(_LOCAL_CONFIG):
        cluster = distributed.LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                           dashboard_address=":0", silence_logs=logging.ERROR)
    try:
        client = distributed.Client(cluster)
        try:
            yield client
        finally:
            client.close()
    finally:
        cluster.close()


def distributed_runner(*, workers=None, scheduler=None, chunk_samples=None):
    """A ``runner`` for :func:`channelizer.run.processor.extract_channels` that uses a cluster."""
    check_cluster_options(workers, scheduler)

    def run(one, out_dir, files, *, output_format, nonfinite, progress):
        with cluster_client(workers=workers, scheduler=scheduler) as client:
            run_on_client(client, one, out_dir, files, output_format=output_format, nonfinite=nonfinite,
                          progress=progress, chunk_samples=chunk_samples)

    return run


def run_on_client(client, one, out_dir, files, *, output_format, nonfinite, progress,
                  chunk_samples=None, retries=RETRIES, task=run_chunk):
    """Run pass ``one`` (a processor pass) as chunk tasks on ``client``; write in order.

    ``task`` is the function each chunk runs (:func:`run_chunk`; a test may wrap it).
    """
    cap = one.capture
    layout = cluster_layout([r.plan.stages for r in one.requests], cap.num_samples, block_size=one.block_size,
                            slots=worker_slots(client), chunk_samples=chunk_samples)
    jobs = chunk_jobs(one, layout, nonfinite=nonfinite)
    futures, prev = [], None
    for job in jobs:
        fut = client.submit(task, job, prev, pure=False, retries=retries)
        # a chunk whose CIC registers follow the previous chunk's waits for them
        prev = client.submit(operator.itemgetter("cic_states"), fut, pure=False) if job.snapshot_at is not None else None
        futures.append(fut)

    def results():
        for k, fut in enumerate(futures):
            res = _result(fut, k, layout.chunks)
            futures[k] = None
            yield res

    try:
        write_chunk_results(one, out_dir, files, results(), layout.chunks, output_format=output_format,
                            progress=progress)
    finally:
        for fut in futures:
            if fut is not None:
                fut.cancel()


def chunk_jobs(one, layout, *, nonfinite):
    """The :class:`~channelizer.run.chunk_pass.ChunkJob` of every chunk of ``layout``, in order.

    Where a chain has a bit-true CIC, each job but the last carries the input index at
    which the next chunk's registers are taken (``snapshot_at``): those chunks run one
    after another (see :mod:`channelizer.run.chunk_pass`).
    """
    shipped = portable_capture(one.capture)
    size = os.stat(shipped.data_path).st_size
    # pruned bit-true CIC integrators carry the whole history: those chunks follow one another
    sequential = one.bit_true and any(isinstance(st, CicStage) for r in one.requests for st in r.plan.stages)
    chunks = layout.chunks
    jobs = []
    for k, (a, b) in enumerate(chunks):
        snap = max(0, chunks[k + 1][0] - layout.preroll) if sequential and k + 1 < len(chunks) else None
        jobs.append(ChunkJob(shipped, tuple(one.requests), tuple(one.names), a, b, layout.preroll,
                             bit_true=one.bit_true, nonfinite=nonfinite, block_size=one.block_size,
                             overview=None if one.overview is None else one.overview.fresh(), data_size=size,
                             snapshot_at=snap))
    return jobs


def write_chunk_results(one, out_dir, files, results, chunks, *, output_format, progress):
    """Write the results of :func:`~channelizer.run.chunk_pass.run_chunk`, in chunk order, through ``one``.

    ``results`` yields one result per chunk of ``chunks``, in order; the recordings are
    left uncommitted in ``files``.
    """
    cap = one.capture
    bar = ProgressBar(cap.num_samples, enabled=None if progress else False, label=f"extract ({len(chunks)} chunks)")
    with contextlib.ExitStack() as stack:
        one.open_writers(stack, out_dir, files, output_format)
        for (_, stop), res in zip(chunks, results):
            for i, y in enumerate(res["outputs"]):
                one.take(i, y)
            if one.overview is not None and res["overview"] is not None:
                one.overview.merge(res["overview"])
            cap.nonfinite_count += res["nonfinite"]
            bar.update(stop)
        bar.close()


def cluster_layout(chains, total, *, block_size, slots, chunk_samples=None):
    """Chunks of ``total`` input samples for a cluster that runs ``slots`` tasks at once.

    Whole blocks of the pass, as many per chunk as :func:`~channelizer.run.chunks.balanced_chunk_blocks`
    finds best for ``slots`` (at most ``CHUNK_BLOCKS``), or ``chunk_samples`` when given.
    """
    if chunk_samples is None:
        blocks = balanced_chunk_blocks(-(-total // block_size), workers=slots, max_blocks=CHUNK_BLOCKS)
        chunk_samples = block_size * blocks
    return chunk_layout(chains, total, chunk_samples=chunk_samples, block_size=block_size)


def worker_slots(client):
    """Tasks the cluster runs at once: the sum of its workers' threads (at least 1)."""
    try:
        return max(1, sum(client.nthreads().values()))
    except (AttributeError, OSError, TimeoutError):  # a client that cannot say (a stand-in, a lost link)
        return 1


def _result(fut, k, chunks):
    try:
        return fut.result()
    except ChannelizerError:
        raise
    except Exception as exc:  # a worker lost beyond dask's retries, a broken connection, ...
        a, b = chunks[k]
        text = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
        raise ChannelizerError(
            f"distributed run failed at chunk {k + 1} of {len(chunks)} (samples {a}..{b}): "
            f"{type(exc).__name__}{': ' + text if text else ''}; nothing was written"
        ) from None
