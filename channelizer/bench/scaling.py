"""Speed-up of the distributed runner: the same extraction on one process and on N workers.

Every run extracts the same channels from the benchmark's capture with the
overview spectrum on (as the ``extract`` command does); the distributed one runs
on a local dask.distributed cluster of ``workers`` processes started once, whose
start-up is reported apart (a cluster serves many runs).  The outputs of the
runs are compared sample for sample.  What limits the speed-up: the disk's read
rate (every worker reads its own range), the chunks' pre-roll (one block per
chunk, ``overlap_cost``), the client writing every output, and here the cores:
two workers on a 2-core machine share them, and their memory bandwidth, with
the client.

One process reads ahead on a second thread (:mod:`channelizer.io.read_ahead`),
so on a 2-core machine it already keeps part of the second core busy.  The
workers' scaling is therefore also measured against one process on one thread
(``read_ahead=False``, the way each worker runs its chunks): that ratio says how
well the work spreads over processes, the first what a user gains on this
machine.

To tell dask's own cost from the machine's, the same chunks also run on a plain
pool of ``workers`` processes (:mod:`multiprocessing`, no scheduler, no
retries), their results written by this process exactly as the dask run writes
them: the pool's speed-up over one thread is what the cores allow for this
split, and dask's time over the pool's is what the engine costs.
"""

import contextlib
import multiprocessing
import os
import time

import numpy as np

from ..io.captures import open_capture
from ..run.chunk_pass import run_chunk
from ..run.processor import extract_channels

__all__ = ["time_workers"]


def _samples(folder, names):
    out = []
    for name in names:
        cap = open_capture(os.path.join(folder, name + ".sigmf-meta"))
        out.append(cap.read(0, cap.num_samples))
    return out


def time_workers(capture_path, requests, work_dir, *, workers, repeats=3):
    """Best times of one process and of ``workers`` dask workers on the same job; a dict.

    Each run is the pass of ``extract --no-plots``: the input spectrum for the alias
    audit, no output spectra.
    """
    from ..run.chunks import aligned_block_size
    from ..run.distributed import check_cluster_options, cluster_client, cluster_layout, run_on_client, worker_slots

    check_cluster_options(workers=workers)
    one_dir, many_dir = os.path.join(work_dir, "one-process"), os.path.join(work_dir, "workers")
    pool_dir = os.path.join(work_dir, "plain-processes")
    single, one_thread, pooled, spread = [], [], [], []
    with _plain_pool(workers) as pool:
        pool_runner = _pool_runner(pool, workers)
        # one untimed run: every process of the pool imports and warms up as a dask worker has
        extract_channels(open_capture(capture_path), requests, pool_dir, runner=pool_runner, channel_spectra=False)
        for _ in range(repeats):
            for kind, runs in (("ahead", single), ("one thread", one_thread), ("pool", pooled)):
                t0 = time.perf_counter()
                extract_channels(open_capture(capture_path), requests, pool_dir if kind == "pool" else one_dir,
                                 read_ahead=kind == "ahead", runner=pool_runner if kind == "pool" else None,
                                 channel_spectra=False)
                runs.append(time.perf_counter() - t0)
    t0 = time.perf_counter()
    with cluster_client(workers=workers) as client:
        started = time.perf_counter() - t0
        slots = worker_slots(client)

        def runner(one, *a, **k):
            run_on_client(client, one, *a, **k)

        # one untimed run, as for the pool: the workers import and warm up (start-up is reported apart)
        extract_channels(open_capture(capture_path), requests, many_dir, runner=runner, channel_spectra=False)
        for _ in range(repeats):
            t0 = time.perf_counter()
            extract_channels(open_capture(capture_path), requests, many_dir, runner=runner, channel_spectra=False)
            spread.append(time.perf_counter() - t0)
    names = [r.name for r in requests]
    reference = _samples(one_dir, names)
    identical = all(np.array_equal(a, b) for a, b in zip(reference, _samples(many_dir, names)))
    pool_identical = all(np.array_equal(a, b) for a, b in zip(reference, _samples(pool_dir, names)))
    chains = [r.plan.stages for r in requests]
    cap = open_capture(capture_path)
    block = aligned_block_size(chains, 1 << 20)
    layout = cluster_layout(chains, cap.num_samples, block_size=block, slots=slots)
    return {
        "workers": workers,
        "channels": len(requests),
        "chunks": len(layout.chunks),
        "overlap_cost": round(layout.overlap_cost, 4),
        "cluster_start_s": round(started, 3),
        "one_process_runs_s": [round(t, 4) for t in single],
        "one_thread_runs_s": [round(t, 4) for t in one_thread],
        "plain_processes_runs_s": [round(t, 4) for t in pooled],
        "workers_runs_s": [round(t, 4) for t in spread],
        "speedup": round(min(single) / min(spread), 4),
        "speedup_vs_one_thread": round(min(one_thread) / min(spread), 4),
        "plain_speedup_vs_one_thread": round(min(one_thread) / min(pooled), 4),
        "dask_over_plain": round(min(spread) / min(pooled), 4),
        "identical": bool(identical and pool_identical),
        "cpu_count": os.cpu_count(),
    }


@contextlib.contextmanager
def _plain_pool(workers):
    """A :mod:`multiprocessing` pool of ``workers`` fresh processes, set up as the local cluster's workers."""
    from ..run.distributed import WORKER_ENVIRON

    saved = {k: os.environ.get(k) for k in WORKER_ENVIRON}
    os.environ.update(WORKER_ENVIRON)  # read by glibc and BLAS as each process starts
    try:
        pool = multiprocessing.get_context("spawn").Pool(workers)
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v
    try:
        yield pool
    finally:
        pool.terminate()
        pool.join()


def _pool_runner(pool, workers):
    """A ``runner`` for ``extract_channels``: the dask runner's chunks and writes, on ``pool``."""
    from ..run.distributed import chunk_jobs, cluster_layout, write_chunk_results

    def run(one, out_dir, files, *, output_format, nonfinite, progress):
        layout = cluster_layout([r.plan.stages for r in one.requests], one.capture.num_samples,
                                block_size=one.block_size, slots=workers)
        jobs = chunk_jobs(one, layout, nonfinite=nonfinite)
        if any(job.snapshot_at is not None for job in jobs):
            raise ValueError("the plain pool runs float chains only (bit-true CIC chunks follow one another)")
        write_chunk_results(one, out_dir, files, pool.imap(run_chunk, jobs), layout.chunks,
                            output_format=output_format, progress=progress)

    return run
