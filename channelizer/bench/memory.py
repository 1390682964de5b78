"""Peak memory of a job run in a child process: resident set, heap and mapped capture pages.

A fresh interpreter runs each job so that one measurement's peak does not hide the
next; the figures come from the kernel (``getrusage``, ``/proc/self/status``,
``/proc/self/smaps``) and from ``tracemalloc`` for the heap.
"""

import json
import os
import platform
import subprocess
import sys
import time

import numpy as np
import scipy
import scipy.signal

from ..io.captures import open_capture
from ..planning.plan import Plan
from ..run.processor import ChannelRequest, extract_channels, plan_identity
from .reference import _reference_pass

__all__ = []

_MB = 1e6


def _environment():
    """Versions and machine; the load average (taken at the end) says how busy the machine was."""
    try:
        load = [round(v, 2) for v in os.getloadavg()]
    except (AttributeError, OSError):
        load = None
    return {
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "python": platform.python_version(),
        "platform": platform.platform(),
        "machine": platform.machine(),
        "cpu_count": os.cpu_count(),
        "load_average": load,
        "blas_threads_env": {k: os.environ[k] for k in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")
                             if k in os.environ},
    }


def _rss_kb(ru_maxrss):
    return ru_maxrss / 1024.0 if sys.platform == "darwin" else float(ru_maxrss)


def _status_kb(key):
    """A ``kB`` field of /proc/self/status (Linux), or None."""
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith(key + ":"):
                    return float(line.split()[1])
    except OSError:
        pass
    return None


def _mapped_kb(path):
    """Resident kB of this process's memory maps of file ``path`` (Linux ``smaps``), or None."""
    target = os.path.realpath(path)
    total = 0.0
    inside = False
    try:
        with open("/proc/self/smaps") as fh:
            for line in fh:
                head = line.split(None, 5)
                if len(head) >= 5 and "-" in head[0] and not head[0].endswith(":"):
                    inside = len(head) == 6 and head[5].rstrip("\n") == target
                elif inside and head and head[0] == "Rss:":
                    total += float(head[1])
    except OSError:
        return None
    return total


def _peak_rss_kb(resource):
    """Peak resident set of this process, kB.

    ``VmHWM`` where Linux gives it: ``ru_maxrss`` of a freshly started child
    also counts the parent's resident set at the fork (Linux keeps the larger
    of the old and new address spaces' peaks across ``exec``), so it would
    charge the benchmark's own memory to the measurement.
    """
    hwm = _status_kb("VmHWM")
    return hwm if hwm is not None else _rss_kb(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)


def _child_main():
    """Entry of a measurement subprocess: a JSON job on stdin, a JSON result on stdout."""
    import resource
    import tracemalloc

    job = json.loads(sys.stdin.read())
    capture = open_capture(job["capture"])
    with open(job["plan"], "rb") as fh:
        data = fh.read()
    plan = Plan.from_yaml(data, source=job["plan"])
    taps = np.load(job["taps"]).astype(np.float32) if job["mode"] == "reference" else None
    baseline = _peak_rss_kb(resource)
    tracemalloc.start()
    t0 = time.perf_counter()
    if job["mode"] == "reference":
        n_out, _ = _reference_pass(capture, taps, int(round(plan.total_decimation)), job["block"])
        samples = [n_out]
    else:
        reqs = [
            ChannelRequest(f"ch{i}", off, plan, plan_identity(data), job["plan"])
            for i, off in enumerate(job["offsets"])
        ]
        res = extract_channels(
            capture, reqs, job["out_dir"], block_size=job["block"], spectra=False, progress=job["progress"]
        )
        samples = [c.samples for c in res.channels]
    seconds = time.perf_counter() - t0
    _, heap_peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    peak = _peak_rss_kb(resource)
    mapped = _mapped_kb(capture.data_path)
    out = {
        "seconds": seconds,
        "samples": samples,
        "peak_rss_mb": peak * 1024 / _MB,
        "baseline_rss_mb": baseline * 1024 / _MB,
        "mapped_file_mb": None if mapped is None else mapped * 1024 / _MB,
        "peak_heap_mb": heap_peak / _MB,
    }
    sys.stdout.write(json.dumps(out) + "\n")
    return 0


def _measure_in_subprocess(job, *, progress=False):
    """Run one measurement in a fresh interpreter; returns its result dict."""
    package_parent = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env = dict(os.environ)
    env["PYTHONPATH"] = package_parent + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    code = "import sys; from channelizer.bench.memory import _child_main; sys.exit(_child_main())"
    proc = subprocess.run(
        [sys.executable, "-c", code],
        input=json.dumps(job),
        stdout=subprocess.PIPE,
        stderr=None if progress else subprocess.PIPE,
        text=True,
        env=env,
        check=False,
    )
    if proc.returncode != 0:
        tail = (proc.stderr or "").strip().splitlines()[-5:]
        raise RuntimeError(f"measurement subprocess ({job['mode']}) failed with status {proc.returncode}: "
                           + " | ".join(tail))
    return json.loads(proc.stdout.strip().splitlines()[-1])
