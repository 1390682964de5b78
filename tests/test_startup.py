"""Start-up: each command imports only what it needs (checked by module, never by time).

``scipy.signal``'s import costs about a second (its docstring machinery), ``scipy.stats``
about as much and matplotlib a few tenths: a command that does not use them must not
import them.  Each case runs in a fresh interpreter and lists the heavy modules loaded.
"""

import json
import os
import subprocess
import sys

import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
HEAVY = ("numpy", "numpy.ma", "scipy", "scipy.signal", "scipy.stats", "scipy.optimize", "matplotlib", "yaml", "dask", "distributed", "numba")

_PROBE = """
import contextlib, io, json, sys
from channelizer.cli import main
out = io.StringIO()
with contextlib.redirect_stdout(out), contextlib.redirect_stderr(io.StringIO()):
    try:
        status = main(sys.argv[1:])
    except SystemExit as exc:
        status = exc.code
heavy = {h: h in sys.modules for h in %r}
print(json.dumps({"status": status, "heavy": heavy, "out": out.getvalue()}))
""" % (HEAVY,)


def _loaded(*argv):
    env = dict(os.environ, PYTHONPATH=ROOT + os.pathsep + os.environ.get("PYTHONPATH", ""))
    run = subprocess.run([sys.executable, "-c", _PROBE, *argv], capture_output=True, text=True, env=env, cwd=ROOT, timeout=300)
    assert run.returncode == 0, run.stderr
    return json.loads(run.stdout.strip().splitlines()[-1])


@pytest.mark.parametrize("argv", [["--help"], ["--version"], ["extract", "--help"], ["plan", "--help"]])
def test_help_and_version_import_nothing_heavy(argv):
    got = _loaded(*argv)
    assert got["status"] == 0
    assert not any(got["heavy"].values()), got["heavy"]


def test_version_names_the_package_version():
    from channelizer import __version__

    assert _loaded("--version")["out"].split() == ["channelizer", __version__]


def test_extract_without_plots_skips_scipy_and_matplotlib(tmp_path):
    # the float chain, the spectra and the alias audit (chi-square quantiles included)
    # run on numpy alone; scipy and matplotlib stay unloaded, and so does numpy.ma
    # (numpy.median loads it on first use: about 25 ms)
    cap = os.path.join(ROOT, "captures", "ridge7-relay.sigmf-meta")
    plan = os.path.join(ROOT, "plans", "relay-voice-2m4-to-48k.yaml")
    got = _loaded("extract", cap, "--plan", plan, "--channel", "a=+0", "--out", str(tmp_path / "o"), "--no-plots", "--quiet")
    assert got["status"] == 0
    assert got["heavy"]["numpy"]
    for name in ("scipy", "matplotlib", "dask", "numpy.ma", "numba"):
        assert not got["heavy"][name], name


def test_plan_without_plot_skips_matplotlib():
    got = _loaded("plan", "--rate", "2.4M", "--bandwidth", "12.5k", "--output-rate", "48k")
    assert got["status"] == 0
    assert not got["heavy"]["matplotlib"] and not got["heavy"]["dask"]


def test_planning_a_bank_skips_numba():
    # numba (the fast extra) compiles the bank's loops when a bank runs; planning one never loads it
    got = _loaded("plan", "--rate", "2.4M", "--bandwidth", "10k", "--spacing", "12.5k")
    assert got["status"] == 0
    assert not got["heavy"]["numba"] and not got["heavy"]["matplotlib"], got["heavy"]


@pytest.mark.parametrize("argv", [
    ["--rate", "2.4M", "--bandwidth", "10k"],
    ["--rate", "61.44M", "--bandwidth", "200k"],
    ["--rate", "1.024M", "--bandwidth", "100k", "--rejection-db", "60", "--ripple-db", "0.5"],
    ["--rate", "2.4M", "--bandwidth", "15k", "--output-rate", "44.1k"],
])
def test_plan_designs_without_scipy_signal_or_optimize(argv):
    # the planner's filter design runs on numpy alone (Remez exchange, Kaiser formulas,
    # the compensator's fit): a plan command never pays for importing these
    got = _loaded("plan", *argv)
    assert got["status"] == 0
    assert not got["heavy"]["scipy.signal"] and not got["heavy"]["scipy.optimize"], got["heavy"]


def test_fir_response_matches_freqz():
    # scipy.signal.freqz at an array of frequencies (the reference) against our numpy
    # evaluation, on both of its paths (few and many frequencies per tap); the bound is
    # float64 rounding of a sum of n terms, relative to sum |h| (common practice)
    import numpy as np
    import scipy.signal

    from channelizer.planning.stages import fir_response

    rng = np.random.default_rng(5)
    for n in (1, 2, 5, 97, 1000, 4001):
        h = rng.standard_normal(n)
        for f in (np.array([1234.5]), rng.uniform(-3e7, 3e7, 3), rng.uniform(-3e7, 3e7, 4097)):
            _, ref = scipy.signal.freqz(h, worN=f, fs=61.44e6)
            got = fir_response(h, f, fs=61.44e6)
            assert got.shape == f.shape
            assert np.max(np.abs(got - ref)) <= 1e-12 * np.sum(np.abs(h)), (n, f.size)
    assert fir_response([0.25, 0.5, 0.25], 0.0, fs=1.0).shape == ()
