"""The whole ``extract`` command timed from outside: start-up, plan, pass, audit, summary.

A user waits for the command, not for the pass: importing the libraries, reading
the plan, the alias audit and writing the summary all count.  The command runs in
a fresh interpreter (``python -m channelizer extract ... --no-plots --quiet``) on
the benchmark's capture, timed around the subprocess, best of a few runs; the
pass's own time is read back from the ``summary.json`` of that run, so the two
figures sit side by side.  The figures are ratios against the reference run of
the same benchmark (``scipy.signal.resample_poly``, one call per channel).

The child runs as an installed package does: with its modules' bytecode cached
(pip compiles it at install), in a folder of the benchmark's own, written by one
untimed run first; a setting that forbids bytecode files
(``PYTHONDONTWRITEBYTECODE``) would otherwise recompile every module at each
start.  The bare start-up, a fresh interpreter importing numpy and nothing
else, is timed the same way and reported beside it: no command can run faster.
"""

import json
import os
import subprocess
import sys
import time

from ..errors import ChannelizerError

__all__ = ["time_extract_command", "COMMAND_CHANNELS"]

#: Channels the command extracts (the capture's centre and its neighbour 2.5 MHz below).
COMMAND_CHANNELS = (0.0, -2_500_000.0)


def _package_root():
    """Folder holding the ``channelizer`` package this process runs (put first on the child's path)."""
    return os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))


def extract_argv(capture, plan_path, offsets, out_dir, *, extra=()):
    """``python -m channelizer extract`` arguments for ``offsets`` (Hz from the centre)."""
    argv = [sys.executable, "-m", "channelizer", "extract", capture, "--plan", plan_path, "--out", out_dir,
            "--no-plots", "--quiet"]
    argv += [f"--channel=ch{i}={off:+.0f}" for i, off in enumerate(offsets)]
    return argv + list(extra)


def _child_env(bytecode_dir):
    """This process's environment with the package first on the path and bytecode cached in ``bytecode_dir``."""
    env = dict(os.environ)
    env["PYTHONPATH"] = _package_root() + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    env["PYTHONPYCACHEPREFIX"] = bytecode_dir
    return env


def _timed_run(argv, env):
    """Wall time in seconds of one run of ``argv``, and its completed process."""
    t0 = time.perf_counter()
    done = subprocess.run(argv, capture_output=True, text=True, env=env)
    return time.perf_counter() - t0, done


def time_extract_command(capture, plan_path, out_dir, *, samples, fs, reference_one_s, repeats=3,
                         offsets=COMMAND_CHANNELS, extra=()):
    """Time the ``extract`` command in a child process; returns a dict of plain figures.

    Parameters
    ----------
    capture, plan_path, out_dir : str
        The benchmark's capture and plan, and a folder for the outputs.
    samples : int
        Input samples of the capture; ``fs`` its rate in Hz.
    reference_one_s : float
        Best time of the one-channel reference in the same benchmark; the
        reference for ``len(offsets)`` channels is that many times as long (one
        ``resample_poly`` per channel, no mixing: it favours the reference).
    repeats : int
        Timed runs (after one untimed run); the best is kept.
    extra : sequence of str
        Further command-line options (e.g. ``--workers 2``).
    """
    env = _child_env(os.path.join(os.path.dirname(os.path.abspath(out_dir)), "bytecode"))
    argv = extract_argv(capture, plan_path, offsets, out_dir, extra=extra)
    runs, passes = [], []
    for k in range(repeats + 1):
        seconds, done = _timed_run(argv, env)
        if done.returncode != 0:
            tail = (done.stderr.strip().splitlines() or ["(no message)"])[-1]
            raise ChannelizerError(f"the timed extract command failed with status {done.returncode}: {tail}")
        if k == 0:  # the untimed run that writes the bytecode
            continue
        runs.append(seconds)
        with open(os.path.join(out_dir, "summary.json"), encoding="utf-8") as fh:
            passes.append(float(json.load(fh)["seconds"]))
    floor = min(_timed_run([sys.executable, "-c", "import numpy"], env)[0] for _ in range(repeats))
    best = min(runs)
    k = runs.index(best)
    reference = reference_one_s * len(offsets)
    return {
        "argv": " ".join(["channelizer"] + argv[3:]),
        "channels": len(offsets),
        "runs_s": [round(t, 4) for t in runs],
        "best_s": round(best, 4),
        "pass_s": round(passes[k], 4),
        "outside_pass_s": round(best - passes[k], 4),
        "startup_floor_s": round(floor, 4),
        "realtime_factor": round(samples / fs / best, 4),
        "pass_realtime_factor": round(samples / fs / max(passes[k], 1e-9), 4),
        "reference_s": round(reference, 4),
        "speedup_vs_reference": round(reference / best, 4),
    }
