"""Speed of the filter bank against one channel and against one chain per channel.

:func:`run_bank_benchmark` plans a bank for every channel of a raster, and the
chain one channel would run on its own, then times on the same in-memory blocks
of noise (complex64, so that no reading or writing is measured), in this process:

(a) one channel: that chain (:class:`SharedFrontBank` of one, as ``extract`` runs it);
(b) every raster channel through the bank (:class:`BankChannelizer`);
(c) today's per-channel path: one chain per raster channel, channels sharing a
    first stage sharing its product.  With more than ``PER_CHANNEL_MEASURED``
    channels it is timed on that many and scaled by the count (its cost grows
    linearly: every chain runs on its own after the shared product).

Each figure is the best of at least ``REPEATS`` runs, repeated until ``MIN_TIMED_S`` is spent, reported as seconds per second of
capture and as ratios between the three, which say more than the absolute
figures on a shared machine.  The bank's CPU time over all its threads is given
too: on a machine whose other core is busy, it is the work the bank does.

Memory: the bank runs once more on the same blocks for the first ``N`` and the
first ``2N`` raster channels (``N`` half the raster) under :mod:`tracemalloc`
(numpy reports its arrays to it), from before the bank is made to the last
block, its work in one thread; the larger of the peak while the bank is made
and the peak of each block less that block's channel outputs is the memory the
bank needs beyond its outputs.  The target is that it does not grow with the
number of channels (``2N`` over ``N`` near 1).
"""

from dataclasses import asdict, dataclass
import time
import tracemalloc

import numpy as np

from ..engines import filterbank
from ..engines.filterbank import BankChannelizer
from ..engines.float_chain import SharedFrontBank
from ..errors import ChannelizerError
from ..planning.bank import BankPlan
from ..planning.bank_planner import BankSpec, per_channel_chain, plan_bank

__all__ = ["BankBenchReport", "run_bank_benchmark", "format_bank_report"]

REPEATS = 3
#: Short runs are repeated until this much time is spent (at most ``MAX_RUNS`` runs).
MIN_TIMED_S = 0.25
MAX_RUNS = 200
BLOCK = 1 << 20
PER_CHANNEL_MEASURED = 16
#: Targets of the bank work: every 12.5 kHz channel of 2.4 Msps within this many times
#: one channel's time; every 200 kHz channel of 61.44 Msps at least real time.
TARGET_ALL_OVER_ONE = 3.0
TARGET_REAL_TIME = 1.0


@dataclass
class BankBenchReport:
    rate: float
    spacing: float
    bandwidth: float
    channels: int
    seconds_of_capture: float
    bank_layout: str
    chain_layout: str
    one_channel_s: float  # per second of capture
    bank_s: float
    per_channel_s: float
    per_channel_measured: int
    bank_cpu_s: float = 0.0  # process CPU time (all threads) per second of capture
    memory_channels: tuple = ()  # (N, 2N)
    memory_beyond_outputs: tuple = ()  # bytes, for N and 2N channels
    bank_engine: str = ""  # how the bank's branch sums ran
    numba_version: str = ""  # where they ran compiled

    def to_dict(self):
        return asdict(self)


def _best(make, x, cpu=None, made=None):
    """Best wall time of at least ``REPEATS`` runs, repeated until ``MIN_TIMED_S`` is spent.

    ``cpu`` (a list) receives the least process CPU time, ``made`` (a list) the last
    runner timed (to read how it ran).  A run of a millisecond or two
    (one channel of 2.4 Msps) is at the mercy of the scheduler; the best of many such runs
    is steadier, and every figure gets the same rule.
    """
    best, least = float("inf"), float("inf")
    start = time.perf_counter()
    runs = 0
    while runs < REPEATS or (time.perf_counter() - start < MIN_TIMED_S and runs < MAX_RUNS):
        runs += 1
        runner = make()
        t0, c0 = time.perf_counter(), time.process_time()
        for i in range(0, x.size, BLOCK):
            runner.process(x[i : i + BLOCK])
        best = min(best, time.perf_counter() - t0)
        least = min(least, time.process_time() - c0)
    if cpu is not None:
        cpu.append(least)
    if made is not None:
        made.append(runner)
    return best


def _memory_beyond_outputs(make, x):
    """Peak traced bytes while ``make()`` is built, and while it is fed each block of ``x`` less that block's outputs.

    The bank's work runs in this thread here, so that the figure is the same from run
    to run; each worker thread of a timed run adds its own work arrays (a fixed size).
    """
    workers = filterbank.FFT_WORKERS
    filterbank.FFT_WORKERS = 1
    tracemalloc.start()
    try:
        tracemalloc.reset_peak()
        start = tracemalloc.get_traced_memory()[0]
        runner = make()
        worst = tracemalloc.get_traced_memory()[1] - start  # making the bank
        for i in range(0, x.size, BLOCK):
            tracemalloc.reset_peak()
            outs = runner.process(x[i : i + BLOCK])
            outputs = sum(o.nbytes for o in outs)
            worst = max(worst, tracemalloc.get_traced_memory()[1] - start - outputs)
            del outs
    finally:
        tracemalloc.stop()
        filterbank.FFT_WORKERS = workers
    return max(0, worst)


def run_bank_benchmark(*, spacing, rate=2.4e6, bandwidth=None, seconds=0.5):
    """Time a raster through the bank, one channel, and one chain per channel.

    Parameters
    ----------
    spacing : float
        Raster spacing in Hz.
    rate : float
        Capture rate in Hz.
    bandwidth : float, optional
        Channel width (default 0.8 of the spacing).
    seconds : float
        Length of the synthetic input.

    Returns
    -------
    BankBenchReport
    """
    bandwidth = 0.8 * spacing if bandwidth is None else bandwidth
    if not 0 < seconds <= 60:
        raise ChannelizerError(f"seconds must be above 0 and at most 60, got {seconds!r}")
    spec = BankSpec(input_rate=rate, bandwidth=bandwidth, spacing=spacing)
    result = plan_bank(spec)
    plan = result.plan
    if not isinstance(plan, BankPlan):
        raise ChannelizerError(f"for {result.channels} channels of {spacing:g} Hz the planner chose one chain each; nothing to compare")
    chain = per_channel_chain(spec, plan.output_rate).plan
    n = int(rate * seconds)
    rng = np.random.default_rng(14)
    x = (0.1 * (rng.standard_normal(n) + 1j * rng.standard_normal(n))).astype(np.complex64)
    offsets, residuals = plan.offsets(), plan.residuals()
    centre = min(range(plan.count), key=lambda i: abs(offsets[i]))
    one = _best(lambda: SharedFrontBank([(chain.stages, offsets[centre])], fs=rate), x)
    def make_bank(count):
        return lambda: BankChannelizer(
            plan.prototype, plan.bins, plan.oversampling,
            channels=list(zip(plan.channel_bins, residuals))[:count], fine_stages=plan.stages, fs=rate,
        )

    cpu, made = [], []
    bank = _best(make_bank(plan.count), x, cpu, made)
    method = made[0].bank.method
    compiled = filterbank.compiled_kernel() if method == "compiled" else None
    half = max(1, plan.count // 2)
    memory = tuple(_memory_beyond_outputs(make_bank(c), x) for c in (half, 2 * half))
    measured = min(plan.count, PER_CHANNEL_MEASURED)
    step = max(1, plan.count // measured)
    some = [offsets[i] for i in range(0, plan.count, step)][:measured]
    per = _best(lambda: SharedFrontBank([(chain.stages, f) for f in some], fs=rate), x) * plan.count / measured
    tail = "".join(f" > {type(st).__name__.replace('Stage', '')}/{st.decimation}" for st in plan.stages)
    return BankBenchReport(
        rate=rate, spacing=spacing, bandwidth=bandwidth, channels=plan.count, seconds_of_capture=seconds,
        bank_layout=f"{plan.bins} bins, O={plan.oversampling}, {len(plan.prototype)} taps{tail}",
        chain_layout=result.alternatives[0].layout if result.alternatives else "",
        one_channel_s=one / seconds, bank_s=bank / seconds, per_channel_s=per / seconds, per_channel_measured=measured,
        bank_cpu_s=cpu[0] / seconds, memory_channels=(half, 2 * half), memory_beyond_outputs=memory,
        bank_engine=_engine(method), numba_version=compiled.version if compiled else "",
    )


def _engine(method):
    """How the bank's branch sums ran, in words."""
    if method == "compiled":
        return "branch sums compiled by numba (the fast extra)"
    how = "by FFT correlation" if method == "fft" else "by element-wise passes"
    why = filterbank.why_not_compiled()
    return f"branch sums {how} (numpy{'; compiled loops not available here: ' + why if why else ''})"


def _row(label, s_per_s):
    return f"  {label:<34} {s_per_s:9.4f} s/s {1 / s_per_s:9.1f} x real time"


def format_bank_report(r):
    """Printed figures and the two targets."""
    lines = [
        f"filter bank: {r.channels} channels of {r.bandwidth:g} Hz every {r.spacing:g} Hz of a {r.rate / 1e6:g} Msps capture "
        f"({r.seconds_of_capture:g} s of noise, best of {REPEATS} runs or more; seconds per second of capture)",
        f"  bank          {r.bank_layout}",
        f"  engine        {r.bank_engine}",
        f"  chain         {r.chain_layout}",
        "",
        _row("one channel (chain)", r.one_channel_s),
        _row(f"all {r.channels} channels, bank", r.bank_s),
        _row("  CPU time over its threads", r.bank_cpu_s),
        _row(f"all {r.channels} channels, one chain each", r.per_channel_s)
        + (f"  (timed on {r.per_channel_measured}, scaled)" if r.per_channel_measured < r.channels else ""),
        "",
        f"  {'bank / one channel':<34} {r.bank_s / r.one_channel_s:9.2f} x   (target <= {TARGET_ALL_OVER_ONE:g} x for 12.5 kHz of 2.4 Msps)",
        f"  {'one chain each / bank':<34} {r.per_channel_s / r.bank_s:9.2f} x",
        f"  {'bank speed':<34} {1 / r.bank_s:9.2f} x real time (target >= {TARGET_REAL_TIME:g} x for 200 kHz of 61.44 Msps)",
    ]
    if r.memory_beyond_outputs:
        (n1, n2), (m1, m2) = r.memory_channels, r.memory_beyond_outputs
        lines += [
            "",
            f"  {'bank memory beyond the outputs':<34} {m1 / 2**20:9.1f} MiB for {n1} channels, {m2 / 2**20:.1f} MiB for {n2}",
            f"  {f'{n2} over {n1} channels':<34} {m2 / max(m1, 1):9.2f} x   (target: flat, near 1 x)",
        ]
    return "\n".join(lines)
