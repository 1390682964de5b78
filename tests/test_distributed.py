"""Chunks in time and the dask.distributed runner: the same recordings as one process.

Outside sources: the trade facts of down-sampling (a length-12 sequence
down-sampled by 2 has 6 samples, by 3 has 4; common practice) for the chain's
period; the chunked-filtering rule of methods.md (a chunk on the period preceded
by the chain's memory gives the single pass's samples; the NCO phase at the chunk
start is 2 pi f n0 / fs, exact); dask.distributed's LocalCluster for the runs on
two processes.  The single pass of this project is the reference the chunked runs
must equal (same counts, bit for bit).
"""

import json
import math
import os
import subprocess
import sys
import time

import numpy as np
import pytest

from channelizer.cli import main
from channelizer.errors import ChannelizerError
from channelizer.io.captures import open_capture
from channelizer.io.sigmf_writer import write_sigmf
from channelizer.planning.planner import plan_chain
from channelizer.planning.spec import ChainSpec
from channelizer.planning.stages import CicStage, FirStage, ResamplerStage
from channelizer.run.chunks import aligned_block_size, balanced_chunk_blocks, chain_memory, chain_period, chunk_layout
from channelizer.run.distributed import INSTALL_HINT, run_on_client
from channelizer.run.processor import ChannelRequest, extract_channels

FS = 2.4e6
CENTRE = 145.0e6
N = 600_000  # 0.25 s
BLOCK = 50 * 1024  # a multiple of the chains' periods below (50 and 150)


def _list_schedule_span(total, c, workers):
    """Finish time, in blocks, of chunks of ``c`` blocks (each but the first with a one-block
    pre-roll) handed in order to whichever worker is free first: Graham's list scheduling
    (R. L. Graham, "Bounds on multiprocessing timing anomalies", SIAM J. Appl. Math. 17(2), 1969),
    simulated here independently of the formula under test."""
    free = [0] * workers
    for k, start in enumerate(range(0, total, c)):
        w = free.index(min(free))
        free[w] += min(c, total - start) + (1 if k else 0)
    return max(free)


@pytest.mark.parametrize("total,workers", [(235, 2), (59, 2), (235, 3), (1000, 8), (17, 4), (3, 2)])
def test_balanced_chunks_finish_with_the_best_chunk_length(total, workers):
    c = balanced_chunk_blocks(total, workers=workers, max_blocks=64)
    assert 1 <= c <= 64
    best = min(_list_schedule_span(total, k, workers) for k in range(1, 65))
    # within one chunk's pre-roll of the best any length up to 64 gives, and never worse than
    # the fixed 16-block chunks used before
    assert _list_schedule_span(total, c, workers) <= best + 1
    assert _list_schedule_span(total, c, workers) <= _list_schedule_span(total, 16, workers)


def test_balanced_chunks_on_the_bench_capture():
    # 4 s of 61.44 Msps in blocks of 2**20 samples is 235 blocks (common practice: ceil(245.76e6 / 2**20))
    blocks = math.ceil(4 * 61.44e6 / 2**20)
    assert blocks == 235
    # two workers: 4 chunks of 59 blocks (two each) instead of 15 chunks of 16 (8 on one worker)
    assert balanced_chunk_blocks(blocks, workers=2, max_blocks=64) == 59
    with pytest.raises(ChannelizerError, match="workers"):
        balanced_chunk_blocks(blocks, workers=0)


def test_chain_period_follows_each_stage_grid():
    # common practice: decimating by 2 then 3 repeats every 6 inputs (12 -> 6 -> 2 samples)
    two = FirStage(decimation=2, taps=(0.5, 0.5))
    three = FirStage(decimation=3, taps=(1 / 3,) * 3)
    assert chain_period((two, three)) == 6
    # a resampler 3/2 after a decimator by 4: its input must sit on multiples of 2, i.e. chain inputs of 8
    res = ResamplerStage(interpolation=3, decimation=2, taps=(1.0,) * 6)
    assert chain_period((FirStage(decimation=4, taps=(0.25,) * 4), res)) == 8
    # a resampler 5/6 needs its input on multiples of 6
    assert chain_period((res.__class__(interpolation=5, decimation=6, taps=(1.0,) * 10),)) == 6


def test_chain_memory_is_the_taps_scaled_to_the_input_rate():
    # methods.md: sum over stages of (len(h) - 1) at the input rate
    cic = CicStage(decimation=8, order=3)  # boxcar**3: 3 (8 - 1) + 1 taps
    fir = FirStage(decimation=2, taps=(0.1,) * 11)
    assert chain_memory((cic, fir)) == 3 * 7 + 10 * 8
    res = ResamplerStage(interpolation=3, decimation=2, taps=(1.0,) * 7)
    assert chain_memory((FirStage(decimation=4, taps=(0.25,) * 4), res)) == 3 + math.ceil(6 / 3 * 4)


def test_layout_covers_the_capture_once_on_the_block_grid():
    stages = (FirStage(decimation=2, taps=(0.5, 0.5)), FirStage(decimation=3, taps=(1 / 3,) * 3))
    lay = chunk_layout([stages], 1000, chunk_samples=250, block_size=120)
    assert lay.on_block_grid and lay.preroll == 120
    assert lay.chunks[0][0] == 0 and lay.chunks[-1][1] == 1000
    assert all(a % 120 == 0 and b - a == 360 for a, b in lay.chunks[:-1])  # 250 rounded up to whole blocks
    assert all(b == c for (_, b), (c, _) in zip(lay.chunks, lay.chunks[1:]))
    off = chunk_layout([stages], 1000, chunk_samples=250, block_size=100)  # 100 is off the period
    assert not off.on_block_grid and off.preroll == 6 and all(a % 6 == 0 for a, _ in off.chunks)
    assert aligned_block_size([stages], 100) == 96


@pytest.fixture(scope="module")
def scene(tmp_path_factory):
    """ci16 capture: noise, a strong tone and a weak one; an integer and a rational plan."""
    d = tmp_path_factory.mktemp("dist")
    rng = np.random.default_rng(15)
    n = np.arange(N)
    x = (rng.standard_normal(N) + 1j * rng.standard_normal(N)) * 3e-4
    x += 0.5 * np.exp(2j * np.pi * 3_000 * n / FS) + 1e-3 * np.exp(2j * np.pi * 401_000 * n / FS)
    base = str(d / "cap")
    write_sigmf(base, x.astype(np.complex64), datatype="ci16_le", fs=FS, center_frequency=CENTRE)
    plans = {}
    for name, rate in (("int", 48e3), ("rat", 36e3)):
        plan = plan_chain(ChainSpec(input_rate=FS, bandwidth=12.5e3, output_rate=rate)).plan
        path = d / f"{name}.yaml"
        path.write_text(plan.to_yaml())
        plans[name] = (str(path), plan)
    assert plans["rat"][1].stages[-1].kind == "resampler"
    return base + ".sigmf-meta", plans, d


def _requests(plans):
    # the strong tone's channel, and a weak one 60 dB down whose rms would show any front-end rounding
    return [ChannelRequest("strong", 0.0, plans["int"][1], "a"), ChannelRequest("weak", 400_000.0, plans["rat"][1], "b")]


def _read_all(folder, names):
    out = {}
    for name in names:
        cap = open_capture(os.path.join(folder, name + ".sigmf-meta"))
        out[name] = cap.read(0, cap.num_samples)
    return out


class _InlineFuture:
    def __init__(self, fn, args):
        self._fn, self._args = fn, args

    def result(self):
        args = [a.result() if isinstance(a, _InlineFuture) else a for a in self._args]
        return self._fn(*args)

    def cancel(self):
        pass


class _InlineClient:
    """Runs each task when its result is asked for, in this process (the client side without dask)."""

    def submit(self, fn, *args, pure=False, retries=0):
        return _InlineFuture(fn, args)


@pytest.mark.parametrize("bit_true", [False, True])
def test_chunked_run_writes_the_single_pass_samples(scene, tmp_path, bit_true):
    cap_path, plans, _ = scene
    reqs = _requests(plans)
    block = aligned_block_size([r.plan.stages for r in reqs], BLOCK)
    assert block == BLOCK
    single = extract_channels(open_capture(cap_path), reqs, str(tmp_path / "one"), bit_true=bit_true, block_size=block)

    def runner(one, *a, **k):
        run_on_client(_InlineClient(), one, *a, chunk_samples=2 * block, **k)

    chunked = extract_channels(open_capture(cap_path), reqs, str(tmp_path / "chunks"), bit_true=bit_true,
                               block_size=block, runner=runner)
    a = _read_all(tmp_path / "one", ["strong", "weak"])
    b = _read_all(tmp_path / "chunks", ["strong", "weak"])
    for name in a:
        assert a[name].size == b[name].size > 1000
        assert np.array_equal(a[name], b[name]), name
    for c1, c2 in zip(single.channels, chunked.channels):
        # the power is summed (in single precision) per written piece: the same samples, grouped otherwise
        assert c1.samples == c2.samples and c1.mean_power_dbfs == pytest.approx(c2.mean_power_dbfs, abs=1e-4)
    # the overview's spaced segments are the same ones, added in another order
    np.testing.assert_allclose(chunked.overview.psd, single.overview.psd, rtol=1e-9)


def test_off_grid_chunks_stay_within_float_rounding(scene, tmp_path):
    # blocks off the period: chunks get the memory as pre-roll, outputs equal up to rounding
    cap_path, plans, _ = scene
    reqs = _requests(plans)[:1]
    extract_channels(open_capture(cap_path), reqs, str(tmp_path / "one"), block_size=65_536, spectra=False)

    def runner(one, *a, **k):
        run_on_client(_InlineClient(), one, *a, chunk_samples=100_000, **k)

    extract_channels(open_capture(cap_path), reqs, str(tmp_path / "chunks"), block_size=65_536, spectra=False,
                     runner=runner)
    a = _read_all(tmp_path / "one", ["strong"])["strong"]
    b = _read_all(tmp_path / "chunks", ["strong"])["strong"]
    rms = np.sqrt(np.mean(np.abs(a) ** 2))
    # the default layout (blocks on the period) is bit-identical (tests above); off the
    # period only the summation order of the float32 block products differs: a few float32
    # eps (6e-8) per stage, measured up to 1.07e-6 of rms with the chains planned today
    assert a.size == b.size and np.max(np.abs(a - b)) <= 2e-6 * rms


def test_without_dask_the_options_end_with_one_install_line(scene, tmp_path, monkeypatch, capsys):
    cap_path, plans, _ = scene
    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed -> ImportError
    for opt in (["--workers", "2"], ["--scheduler", "tcp://127.0.0.1:1"]):
        status = main(["extract", cap_path, "--plan", plans["int"][0], "--channel", "a=+0", "--out",
                       str(tmp_path / "o"), "--quiet", *opt])
        err = capsys.readouterr().err.strip().splitlines()
        assert status == 2 and err == [f"error: {INSTALL_HINT}"]
    assert not os.path.exists(tmp_path / "o")


distributed = pytest.importorskip("distributed")


@pytest.fixture(scope="module")
def client():
    from channelizer.run.distributed import cluster_client

    with cluster_client(workers=2) as c:
        yield c


def _cli(cap_path, plans, out, *extra):
    return main(["extract", cap_path, "--plan", plans["int"][0], "--channel", "strong=+0", "--channel",
                 "weak=+400k", "--out", str(out), "--quiet", "--no-plots", "--block-size", str(BLOCK), *extra])


@pytest.mark.parametrize("bit_true", [[], ["--bit-true"]])
def test_two_worker_cluster_gives_the_one_process_recordings(scene, tmp_path, bit_true):
    cap_path, plans, _ = scene
    assert _cli(cap_path, plans, tmp_path / "one", *bit_true) == 0
    assert _cli(cap_path, plans, tmp_path / "two", "--workers", "2", *bit_true) == 0
    a = _read_all(tmp_path / "one", ["strong", "weak"])
    b = _read_all(tmp_path / "two", ["strong", "weak"])
    for name in a:
        assert a[name].size == b[name].size and np.array_equal(a[name], b[name]), name
    s1 = json.loads((tmp_path / "one" / "summary.json").read_text())
    s2 = json.loads((tmp_path / "two" / "summary.json").read_text())
    for c1, c2 in zip(s1["channels"], s2["channels"]):
        assert c1["samples"] == c2["samples"] and c1["mean_power_dbfs"] == pytest.approx(c2["mean_power_dbfs"], abs=1e-3)
        assert [e["signal_center_hz"] for e in c1["alias_audit"]] == pytest.approx(
            [e["signal_center_hz"] for e in c2["alias_audit"]])


def test_a_cluster_started_by_hand_gives_the_one_process_recordings(scene, tmp_path):
    # the README's two commands, `dask scheduler` and `dask worker`, as separate processes;
    # extract --scheduler then runs on them (dask's own command line, python -m dask)
    cap_path, plans, _ = scene
    info = tmp_path / "scheduler.json"
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, [os.path.dirname(os.path.dirname(
        os.path.abspath(__file__))), os.environ.get("PYTHONPATH")])))
    quiet = dict(stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env, cwd=tmp_path)
    started = [subprocess.Popen([sys.executable, "-m", "dask", "scheduler", "--host", "127.0.0.1", "--port", "0",
                                 "--no-dashboard", "--scheduler-file", str(info)], **quiet)]
    try:
        deadline = time.monotonic() + 60
        while not info.exists() and time.monotonic() < deadline:
            time.sleep(0.1)
        address = json.loads(info.read_text())["address"]
        started.append(subprocess.Popen([sys.executable, "-m", "dask", "worker", address, "--nthreads", "1",
                                         "--no-dashboard"], **quiet))
        from distributed import Client

        with Client(address, timeout="30s") as c:
            c.wait_for_workers(1, timeout=60)
            assert _cli(cap_path, plans, tmp_path / "one") == 0
            assert _cli(cap_path, plans, tmp_path / "two", "--scheduler", address) == 0
            # the chunks ran there: the scheduler has seen run_chunk tasks
            ran = c.run_on_scheduler(lambda dask_scheduler: sorted(dask_scheduler.task_prefixes))
        assert "run_chunk" in ran
    finally:
        for proc in reversed(started):
            proc.terminate()
            proc.wait(timeout=30)
    a = _read_all(tmp_path / "one", ["strong", "weak"])
    b = _read_all(tmp_path / "two", ["strong", "weak"])
    for name in a:
        assert a[name].size == b[name].size and np.array_equal(a[name], b[name]), name


def test_local_workers_run_with_the_quiet_settings(client):
    # the settings reach the worker processes (dask passes the client's configuration on
    # through each nanny), and so do the environment variables read as each process starts
    from channelizer.run.distributed import WORKER_ENVIRON, _LOCAL_CONFIG

    settings = {k: v for k, v in _LOCAL_CONFIG.items() if k != "distributed.nanny.pre-spawn-environ"}

    def seen():
        import dask

        return {k: dask.config.get(k) for k in settings}, {k: os.environ.get(k) for k in WORKER_ENVIRON}

    for config, environ in client.run(seen).values():
        assert config == settings
        assert environ == WORKER_ENVIRON


def test_a_worker_that_dies_has_its_chunk_run_again(scene, tmp_path, client):
    cap_path, plans, _ = scene
    reqs = _requests(plans)
    marker = str(tmp_path / "died-once")
    extract_channels(open_capture(cap_path), reqs, str(tmp_path / "one"), block_size=BLOCK, spectra=False)

    def dies_once(job, states=None):
        import os as _os

        from channelizer.run.chunk_pass import run_chunk

        if job.start > 0 and not _os.path.exists(marker):
            open(marker, "w").close()
            _os._exit(1)  # the worker process dies mid-run
        return run_chunk(job, states)

    def runner(one, *a, **k):
        run_on_client(client, one, *a, chunk_samples=2 * BLOCK, task=dies_once, **k)

    extract_channels(open_capture(cap_path), reqs, str(tmp_path / "two"), block_size=BLOCK, spectra=False,
                     runner=runner)
    assert os.path.exists(marker)
    a = _read_all(tmp_path / "one", ["strong", "weak"])
    b = _read_all(tmp_path / "two", ["strong", "weak"])
    for name in a:
        assert np.array_equal(a[name], b[name])


def test_a_chunk_that_keeps_failing_fails_the_run_whole(scene, tmp_path, client):
    cap_path, plans, _ = scene

    def always_fails(job, states=None):
        if job.start > 0:
            raise RuntimeError("disk went away")
        from channelizer.run.chunk_pass import run_chunk

        return run_chunk(job, states)

    def runner(one, *a, **k):
        run_on_client(client, one, *a, chunk_samples=2 * BLOCK, task=always_fails, **k)

    out = tmp_path / "two"
    with pytest.raises(ChannelizerError, match=r"distributed run failed at chunk 2 of .*disk went away.*nothing was written"):
        extract_channels(open_capture(cap_path), _requests(plans), str(out), block_size=BLOCK, spectra=False,
                         runner=runner)
    assert [f for f in os.listdir(out) if not f.startswith(".")] == []


def test_bench_workers_figures(scene, tmp_path):
    from channelizer.bench.scaling import time_workers

    cap_path, plans, _ = scene
    got = time_workers(cap_path, _requests(plans), str(tmp_path), workers=2, repeats=1)
    assert got["workers"] == 2 and got["identical"]
    assert got["speedup"] == pytest.approx(min(got["one_process_runs_s"]) / min(got["workers_runs_s"]), rel=1e-2, abs=1e-3)
    assert got["speedup_vs_one_thread"] == pytest.approx(min(got["one_thread_runs_s"]) / min(got["workers_runs_s"]),
                                                         rel=1e-2, abs=1e-3)
    # the plain pool of processes runs the same chunks: its recordings are in ``identical`` too
    assert len(got["plain_processes_runs_s"]) == 1
    assert got["plain_speedup_vs_one_thread"] == pytest.approx(
        min(got["one_thread_runs_s"]) / min(got["plain_processes_runs_s"]), rel=1e-2, abs=1e-3)
    assert got["dask_over_plain"] == pytest.approx(min(got["workers_runs_s"]) / min(got["plain_processes_runs_s"]),
                                                   rel=1e-2, abs=1e-3)
    assert got["chunks"] >= 1 and 0 <= got["overlap_cost"] < 1


def test_plain_pool_refuses_chunks_that_follow_one_another(scene, tmp_path):
    # bit-true CIC chunks take the previous chunk's registers; the bench's pool has no way to pass them
    from channelizer.bench.scaling import _pool_runner

    cap_path, plans, _ = scene
    out = tmp_path / "out"
    with pytest.raises(ValueError, match="bit-true"):
        extract_channels(open_capture(cap_path), _requests(plans), str(out), bit_true=True, block_size=BLOCK,
                         runner=_pool_runner(None, 2))
    assert [f for f in os.listdir(out) if not f.startswith(".")] == []


_BLAS_PROBE = """
import ctypes, glob, hashlib, json, os, sys
first = sys.argv[1]
if first == "numpy":
    import numpy
import channelizer
from channelizer.engines import streaming
import numpy as np
libs = glob.glob(os.path.join(os.path.dirname(np.__file__), "..", "numpy.libs", "*openblas*"))
count = None
has_local = False
for lib in libs:
    dll = ctypes.CDLL(lib)
    has_local = has_local or hasattr(dll, "openblas_set_num_threads_local")
    for name in ("scipy_openblas_get_num_threads64_", "openblas_get_num_threads64_", "openblas_get_num_threads"):
        if hasattr(dll, name):
            count = getattr(dll, name)
threads = None if count is None else count()
rng = np.random.default_rng(4)
x = (rng.standard_normal(1 << 18) + 1j * rng.standard_normal(1 << 18)).astype(np.complex64)
fir = streaming.FirDecimator(rng.standard_normal(301), 5)
y = np.concatenate([fir.process(b) for b in np.array_split(x, 3)])
print(json.dumps({"one_thread": streaming._BLAS_ONE_THREAD, "threads": threads,
                  "threads_after": None if count is None else count(),
                  "mode": os.environ.get("CHANNELIZER_BLAS_THREADS"), "has_local": has_local,
                  "digest": hashlib.sha256(y.tobytes()).hexdigest()}))
"""


def _blas_probe(first):
    env = {k: v for k, v in os.environ.items() if k not in ("OPENBLAS_NUM_THREADS", "CHANNELIZER_BLAS_THREADS")}
    env["PYTHONPATH"] = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    run = subprocess.run([sys.executable, "-c", _BLAS_PROBE, first], capture_output=True, text=True, env=env,
                         timeout=120)
    assert run.returncode == 0, run.stderr
    return json.loads(run.stdout.strip().splitlines()[-1])


def test_engines_know_whether_blas_runs_on_one_thread():
    # The block products are cut by whether OpenBLAS runs them on one thread, and a
    # distributed run equals one process only when both cut them alike.  OpenBLAS reads
    # OPENBLAS_NUM_THREADS once, when numpy loads it (OpenBLAS documentation, from
    # memory): imported after numpy, channelizer's setting comes too late, so each
    # product then sets one thread through openblas_set_num_threads_local and puts the
    # count back, or, without that function, the products are cut small.
    pinned, late = _blas_probe("channelizer"), _blas_probe("numpy")
    assert pinned["mode"] is None and pinned["one_thread"]
    if pinned["threads"] is not None:
        assert pinned["threads"] == 1  # OpenBLAS's own count, where numpy's build exposes it
    assert late["mode"] in ("each-product", "several")
    assert late["one_thread"] == (late["mode"] == "each-product")
    if late["mode"] == "each-product":
        # cut alike, the two processes compute the same products: the same bits
        assert late["digest"] == pinned["digest"]
        if late["threads"] is not None:
            assert late["threads_after"] == late["threads"]  # the caller's count put back
    if late["has_local"]:
        # numpy's wheel bundles an OpenBLAS that has the function (numpy 2.4 here): the
        # late case must then set the count per product, not cut small
        assert late["mode"] == "each-product"


def test_one_thread_context_saves_and_restores_the_count_once():
    # nested or concurrent products share one saved count: the first to enter sets one
    # thread and keeps what it replaced, the last to leave puts that back
    from channelizer.engines.blas_threads import OneThread

    calls, state = [], {"n": 6}

    def setter(n):
        calls.append(n)
        prev, state["n"] = state["n"], n
        return prev

    ctx = OneThread(setter)
    with ctx:
        assert state["n"] == 1
        with ctx:
            assert state["n"] == 1
        assert state["n"] == 1
    assert state["n"] == 6 and calls == [1, 6]
    with OneThread(None):  # no setter: nothing to do
        pass
