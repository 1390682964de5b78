"""Faults during a run: a full disk, a killed process, NaN and infinite samples.

The rule under test (DEVELOPERS.md): no partial output left looking complete. A
recording is complete when its ``.sigmf-meta`` exists (written last, SigMF 1.x pairs
metadata with data); a run is complete when ``summary.json`` is written. Temporary
files are hidden ``.NAME.*.part`` files (channelizer.io.atomic).
"""

import errno
import json
import math
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

import channelizer.io.atomic
import channelizer.io.sigmf_writer
from channelizer.cli import main
from channelizer.io.sigmf_writer import write_sigmf
from conftest import noise as _noise

FS = 2.4e6
CENTER = 161.0e6
REPO = Path(__file__).resolve().parent.parent
ENOSPC = OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))


@pytest.fixture(scope="module")
def big_capture(tmp_path_factory):
    """48 MB: 6 million cf32 samples, long enough to be interrupted on the way."""
    base = tmp_path_factory.mktemp("big") / "long"
    write_sigmf(base, _noise(6_000_000, 2), datatype="cf32_le", fs=FS, center_frequency=CENTER)
    return str(base) + ".sigmf-meta"


def _files(folder):
    """name -> bytes of every file in ``folder``."""
    return {p.name: p.read_bytes() for p in Path(folder).iterdir() if p.is_file()} if Path(folder).exists() else {}


def _extract(capture, plan, out, *channels, extra=()):
    args = ["extract", capture, "--plan", plan, "--out", str(out), "--no-plots", "--quiet", *extra]
    for c in channels:
        args += ["--channel", c]
    return args


# -- a write that fails part way -------------------------------------------------------------------


def _failing_after(monkeypatch, writes):
    """Make every SigMF data file refuse writes with ENOSPC after ``writes`` successful writes in all."""
    real = channelizer.io.sigmf_writer.atomic_output
    budget = [writes]

    class Filling:
        def __init__(self, fh):
            self._fh = fh

        def write(self, data):
            if budget[0] <= 0:
                raise ENOSPC
            budget[0] -= 1
            return self._fh.write(data)

        def __getattr__(self, name):
            return getattr(self._fh, name)

    import contextlib

    @contextlib.contextmanager
    def atomic_output(path, mode="wb"):
        with real(path, mode) as fh:
            yield Filling(fh)

    monkeypatch.setattr(channelizer.io.sigmf_writer, "atomic_output", atomic_output)
    # a run's recordings go through a FileSet (they appear together); fill that too
    real_output = channelizer.io.atomic.FileSet.output

    @contextlib.contextmanager
    def fileset_output(self, path, mode="wb"):
        with real_output(self, path, mode) as fh:
            yield Filling(fh) if str(path).endswith(".sigmf-data") else fh

    monkeypatch.setattr(channelizer.io.atomic.FileSet, "output", fileset_output)


def test_disk_full_mid_run_keeps_the_previous_run(tmp_path, plan_path, small_capture, capsys, monkeypatch):
    out = tmp_path / "out"
    assert main(_extract(small_capture, plan_path, out, "a=+0", "b=+100k")) == 0
    before = _files(out)
    assert sorted(before) == ["a.sigmf-data", "a.sigmf-meta", "b.sigmf-data", "b.sigmf-meta", "summary.json"]
    capsys.readouterr()

    # the same names, other channels: any file replaced would differ from the first run's
    _failing_after(monkeypatch, 5)  # a, b, a, b, a written; the sixth write (b) fails
    rc = main(_extract(small_capture, plan_path, out, "a=+50k", "b=-50k", extra=["--block-size", "2048"]))
    err = capsys.readouterr().err
    assert rc == 2
    assert err == f"error: {out}/b.sigmf-data: cannot write: No space left on device\n"
    assert _files(out) == before  # same names, same bytes, no temporary file left

    monkeypatch.undo()  # space again: the same command now succeeds
    assert main(_extract(small_capture, plan_path, out, "a=+50k", "b=-50k", extra=["--block-size", "2048"])) == 0
    after = _files(out)
    assert sorted(after) == sorted(before)
    assert after["a.sigmf-data"] != before["a.sigmf-data"]
    assert [c["offset_hz"] for c in json.loads(after["summary.json"])["channels"]] == [50e3, -50e3]


def _replace_failing_on(monkeypatch, call):
    real = os.replace
    calls = [0]

    def replace(src, dst, **kw):
        calls[0] += 1
        if calls[0] == call:
            raise ENOSPC
        return real(src, dst, **kw)

    monkeypatch.setattr(os, "replace", replace)


def _rename_fault(tmp_path, plan_path, small_capture, capsys, monkeypatch, call):
    out = tmp_path / "out"
    assert main(_extract(small_capture, plan_path, out, "a=+0", "b=+100k")) == 0
    before = _files(out)
    capsys.readouterr()
    _replace_failing_on(monkeypatch, call)
    rc = main(_extract(small_capture, plan_path, out, "a=+50k", "b=-50k"))
    err = capsys.readouterr().err
    return out, before, rc, err


def test_failed_rename_of_the_first_file_keeps_the_previous_run(tmp_path, plan_path, small_capture, capsys, monkeypatch):
    out, before, rc, err = _rename_fault(tmp_path, plan_path, small_capture, capsys, monkeypatch, 1)
    assert rc == 2
    # the last channel's writer finishes first (the writers are closed in reverse order), and
    # the run's files are renamed together at the end: the first rename names its file
    assert err == f"error: {out}/b.sigmf-data: cannot finish writing: No space left on device\n"
    assert _files(out) == before


def test_failed_rename_of_a_later_channel_keeps_the_previous_run(tmp_path, plan_path, small_capture, capsys, monkeypatch):
    # a run's files are committed together (channelizer.io.atomic.FileSet): when a later rename
    # fails, the ones already renamed are put back, so the previous run stays whole
    out, before, rc, err = _rename_fault(tmp_path, plan_path, small_capture, capsys, monkeypatch, 3)
    assert rc == 2 and err.count("\n") == 1
    assert _files(out) == before


# -- a killed process ------------------------------------------------------------------------------


def _cli(*args):
    return [sys.executable, "-m", "channelizer", *args]


def test_killed_run_leaves_nothing_that_looks_complete(tmp_path, plan_path, big_capture):
    out = tmp_path / "out"
    args = _extract(big_capture, plan_path, out, "a=+0", "b=+100k", extra=["--block-size", "1024"])
    env = dict(os.environ, PYTHONPATH=str(REPO))
    proc = subprocess.Popen(_cli(*args), env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and proc.poll() is None:
            # the run is built in a hidden sibling folder (channelizer.io.run_folder)
            parts = list(tmp_path.glob(".out.run-*.part/.*.part"))
            if any(p.stat().st_size > 0 for p in parts):
                break  # samples are being written: kill it now
            time.sleep(0.002)
        assert proc.poll() is None, "the run ended before it could be killed"
        proc.send_signal(signal.SIGKILL)
    finally:
        proc.kill()
        proc.wait()
    assert proc.returncode == -signal.SIGKILL
    assert not out.exists()  # nothing under the output's name
    (stage,) = tmp_path.glob(".out.run-*.part")
    left = sorted(p.name for p in stage.iterdir())
    assert left, "a killed run leaves its temporary files"
    # only hidden temporary files: no .sigmf-meta, no .sigmf-data under its own name, no summary
    assert all(re.fullmatch(r"\.[ab]\.sigmf-data\.[^/]+\.part", n) for n in left), left

    # the same command again succeeds and writes complete recordings
    done = subprocess.run(_cli(*args), env=env, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    import sigmf

    for name in ("a", "b"):
        rec = sigmf.sigmffile.fromfile(str(out / f"{name}.sigmf-meta"))
        rec.validate()  # the reference library's schema check
        # 6e6 samples / 25 (CIC) / 2 (FIR): floor(N/M) per stage (Oppenheim & Schafer 4.6)
        assert rec.read_samples().shape == (6_000_000 // 50,)
    assert (out / "summary.json").is_file()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]  # the killed run's leftovers were cleaned


# -- a real full disk: a 2 MiB tmpfs ---------------------------------------------------------------


@pytest.fixture
def small_disk(tmp_path):
    mnt = tmp_path / "disk"
    mnt.mkdir()
    try:
        done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=2m", "tmpfs", str(mnt)], capture_output=True, timeout=20)
    except (OSError, subprocess.TimeoutExpired):
        done = None
    if done is None or done.returncode != 0:
        pytest.skip("cannot mount a tmpfs here (needs root)")
    try:
        yield mnt
    finally:
        subprocess.run(["umount", str(mnt)], capture_output=True, timeout=20)


def test_full_tmpfs_gives_one_line_and_leaves_nothing(small_disk, plan_path, big_capture, capsys):
    out = small_disk / "out"
    # 4 channels x 120 000 cf32 samples = 3.84 MB: more than the 2 MiB there is
    rc = main(_extract(big_capture, plan_path, out, "a=+0", "b=+100k", "c=-200k", "d=+300k"))
    err = capsys.readouterr().err
    assert rc == 2
    assert re.fullmatch(re.escape(f"error: {out}/") + r"[abcd]\.sigmf-data: cannot write: No space left on device\n", err), err
    assert sorted(os.listdir(small_disk)) == []  # the temporary files were removed: the space is free again
    # two channels (1.92 MB) fit: the space the failed run used was given back
    assert main(_extract(big_capture, plan_path, out, "a=+0", "b=+100k")) == 0
    assert sorted(os.listdir(out)) == ["a.sigmf-data", "a.sigmf-meta", "b.sigmf-data", "b.sigmf-meta", "summary.json"]


# -- NaN and infinite samples ----------------------------------------------------------------------


def _capture_with(tmp_path, name, bad):
    x = _noise(20_000, 3)
    for i, v in bad.items():
        x[i] = v
    base = tmp_path / name
    write_sigmf(base, x, datatype="cf32_le", fs=FS, center_frequency=CENTER)
    return str(base) + ".sigmf-meta", x


@pytest.mark.parametrize("block", [1000, 4095, 4096, 4097, 1 << 20])
def test_nonfinite_sample_is_named_by_its_index(tmp_path, plan_path, capsys, block):
    # index 4096: first sample of the second block of 4096, last of the first block of 4097
    cap, _ = _capture_with(tmp_path, "bad", {4096: complex(np.nan, 0.0), 9000: complex(np.inf, 0.0)})
    out = tmp_path / "out"
    rc = main(_extract(cap, plan_path, out, "a=+0", extra=["--block-size", str(block)]))
    assert rc == 2
    assert capsys.readouterr().err == (
        f"error: {cap}: sample 4096 is NaN or infinite (replace such samples by 0 with --zero-nonfinite)\n"
    )
    assert _files(out) == {}


def test_zero_nonfinite_equals_zeroing_by_hand(tmp_path, plan_path, capsys):
    bad = {0: complex(np.nan, 1.0), 777: complex(0.0, -np.inf), 12_345: complex(np.inf, np.nan)}
    cap, x = _capture_with(tmp_path, "bad", bad)
    clean = x.copy()
    clean[list(bad)] = 0
    base = tmp_path / "clean"
    write_sigmf(base, clean, datatype="cf32_le", fs=FS, center_frequency=CENTER)
    assert np.isfinite(clean.view(np.float32)).all()

    rc = main(_extract(cap, plan_path, tmp_path / "zeroed", "a=+25k", extra=["--zero-nonfinite", "--block-size", "5000"]))
    err = capsys.readouterr().err
    assert rc == 0
    assert err == "warning: 3 non-finite samples were replaced by zero\n"
    assert main(_extract(str(base) + ".sigmf-meta", plan_path, tmp_path / "byhand", "a=+25k", extra=["--block-size", "5000"])) == 0
    zeroed = np.fromfile(tmp_path / "zeroed" / "a.sigmf-data", dtype=np.complex64)
    by_hand = np.fromfile(tmp_path / "byhand" / "a.sigmf-data", dtype=np.complex64)
    assert zeroed.size == 20_000 // 50 and np.isfinite(zeroed.view(np.float32)).all()
    np.testing.assert_array_equal(zeroed, by_hand)
    summary = json.loads((tmp_path / "zeroed" / "summary.json").read_text())
    assert math.isfinite(summary["channels"][0]["mean_power_dbfs"])
