"""Speed-up of the distributed runner: the same extraction on one process and on N workers.

Both runs extract the same channels from the benchmark's capture with the
overview spectrum on (as the ``extract`` command does); the distributed one runs
on a local dask.distributed cluster of ``workers`` processes started once, whose
start-up is reported apart (a cluster serves many runs).  The outputs of the two
runs are compared sample for sample.  What limits the speed-up: the disk's read
rate (every worker reads its own range), the chunks' pre-roll (one block per
chunk, ``overlap_cost``), the client writing every output, and here the cores:
two workers on a 2-core machine share them with the client.

One process reads ahead on a second thread (:mod:`channelizer.io.read_ahead`),
so on a 2-core machine it already keeps part of the second core busy.  The
workers' scaling is therefore also measured against one process on one thread
(``read_ahead=False``, the way each worker runs its chunks): that ratio says how
well the work spreads over processes, the first what a user gains on this
machine.
"""

import os
import time

import numpy as np

from ..io.captures import open_capture
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
    single, one_thread, spread = [], [], []
    for _ in range(repeats):
        for ahead, runs in ((True, single), (False, one_thread)):
            t0 = time.perf_counter()
            extract_channels(open_capture(capture_path), requests, one_dir, read_ahead=ahead, channel_spectra=False)
            runs.append(time.perf_counter() - t0)
    t0 = time.perf_counter()
    with cluster_client(workers=workers) as client:
        started = time.perf_counter() - t0
        slots = worker_slots(client)

        def runner(one, *a, **k):
            run_on_client(client, one, *a, **k)

        for _ in range(repeats):
            t0 = time.perf_counter()
            extract_channels(open_capture(capture_path), requests, many_dir, runner=runner, channel_spectra=False)
            spread.append(time.perf_counter() - t0)
    names = [r.name for r in requests]
    identical = all(np.array_equal(a, b) for a, b in zip(_samples(one_dir, names), _samples(many_dir, names)))
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
        "workers_runs_s": [round(t, 4) for t in spread],
        "speedup": round(min(single) / min(spread), 4),
        "speedup_vs_one_thread": round(min(one_thread) / min(spread), 4),
        "identical": bool(identical),
        "cpu_count": os.cpu_count(),
    }
