"""Faults of the second reliability round: a run's folder as one unit, killed commits,
plots inside the run, a capture truncated during the run, silent and very loud captures,
figure formats.

The rules under test are the project's (DEVELOPERS.md: "no partial output left looking
complete", "never modify an input"); outside facts are named where they are used.
"""

import errno
import json
import math
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest

import channelizer.views.plots
from channelizer.cli import main
from channelizer.errors import ChannelizerError
from channelizer.io.atomic import FileSet
from channelizer.io.run_folder import StagedFolder
from channelizer.io.sigmf_writer import write_sigmf
from channelizer.run.output_folder import check_run_folder
from conftest import noise as _noise

FS = 2.4e6
CENTER = 161.0e6
REPO = Path(__file__).resolve().parent.parent
ENV = dict(os.environ, PYTHONPATH=str(REPO))


def _files(folder):
    """name -> bytes in ``folder``, or None when there is no folder."""
    folder = Path(folder)
    return {p.name: p.read_bytes() for p in folder.iterdir()} if folder.exists() else None


def _extract(capture, plan, out, *channels, extra=()):
    args = ["extract", capture, "--plan", plan, "--out", str(out), "--quiet", *extra]
    for c in channels:
        args += ["--channel", c]
    return args


# -- a run's folder holds exactly that run ----------------------------------------------------------


def test_second_run_replaces_the_first_as_a_whole(tmp_path, plan_path, small_capture, capsys):
    out = tmp_path / "out"
    assert main(_extract(small_capture, plan_path, out, "a=+0", "b=+100k")) == 0
    assert sorted(os.listdir(out)) == [
        "a.png", "a.sigmf-data", "a.sigmf-meta", "b.png", "b.sigmf-data", "b.sigmf-meta", "overview.png", "summary.json"
    ]
    assert main(_extract(small_capture, plan_path, out, "c=-50k", extra=["--no-plots"])) == 0
    # nothing of the first run is left beside the second one's summary
    assert sorted(os.listdir(out)) == ["c.sigmf-data", "c.sigmf-meta", "summary.json"]
    assert [c["name"] for c in json.loads((out / "summary.json").read_text())["channels"]] == ["c"]
    assert sorted(os.listdir(tmp_path)) == ["out"]  # no hidden sibling left


def test_a_failed_plot_keeps_the_previous_run_and_names_the_real_file(tmp_path, plan_path, small_capture, capsys, monkeypatch):
    out = tmp_path / "out"
    assert main(_extract(small_capture, plan_path, out, "a=+0", "b=+100k")) == 0
    before = _files(out)
    capsys.readouterr()

    real = channelizer.views.plots.save_figure

    def full_disk(fig, path):
        if str(path).endswith("b.png"):
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(path))
        return real(fig, path)

    monkeypatch.setattr(channelizer.views.plots, "save_figure", full_disk)
    rc = main(_extract(small_capture, plan_path, out, "a=+25k", "b=-25k"))
    assert rc == 2
    # the file that could not be written, under its real name, never the hidden folder's
    assert capsys.readouterr().err == f"error: {out}/b.png: No space left on device\n"
    assert _files(out) == before  # recordings, summary and plots: all of the previous run
    assert sorted(os.listdir(tmp_path)) == ["out"]


def test_an_interrupt_while_plotting_keeps_the_previous_run(tmp_path, plan_path, small_capture, capsys, monkeypatch):
    out = tmp_path / "out"
    assert main(_extract(small_capture, plan_path, out, "a=+0")) == 0
    before = _files(out)

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(channelizer.views.plots, "plot_channel", interrupted)
    assert main(_extract(small_capture, plan_path, out, "a=+25k")) == 130
    assert "no output was completed" in capsys.readouterr().err
    assert _files(out) == before
    assert sorted(os.listdir(tmp_path)) == ["out"]


def test_a_folder_at_an_output_name_is_refused_not_moved_aside(tmp_path):
    folder = tmp_path / "result.txt"
    folder.mkdir()
    (folder / "kept").write_text("mine\n")
    files = FileSet()
    with pytest.raises(ChannelizerError, match="is a folder; an output file never replaces a folder"):
        files.write_text(folder, "text")
    # a folder that appears between writing and the commit is refused too
    later = tmp_path / "later.txt"
    files.write_text(later, "text")
    later.mkdir()
    with pytest.raises(ChannelizerError, match="later.txt: is a folder"):
        files.commit()
    assert (folder / "kept").read_text() == "mine\n" and later.is_dir()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["later.txt", "result.txt"]


# -- a SIGKILL at every point of the commit ----------------------------------------------------------

_CHILD = textwrap.dedent(
    """
    import os, signal, sys
    from channelizer.io import run_folder
    from channelizer.run.output_folder import check_run_folder

    kill_at, exchange, out = int(sys.argv[1]), sys.argv[2] == "exchange", sys.argv[3]
    calls = [0]

    def counted(fn):
        def step(*args, **kwargs):
            calls[0] += 1
            if calls[0] == kill_at:
                os.kill(os.getpid(), signal.SIGKILL)
            return fn(*args, **kwargs)
        return step

    folder = run_folder.StagedFolder(out, kind="run", check=check_run_folder)
    stage = folder.open()
    for name in ("a.sigmf-data", "a.sigmf-meta"):
        with open(os.path.join(stage, name), "w") as fh:
            fh.write("new " + name)
    with open(os.path.join(stage, "summary.json"), "w") as fh:
        fh.write('{"channels": [{"name": "a", "files": ["a.sigmf-data", "a.sigmf-meta"]}]}')
    # every file-system step of the commit counts as one point
    for name in ("rename", "replace", "unlink", "rmdir"):
        setattr(os, name, counted(getattr(os, name)))
    run_folder._exchange = counted(run_folder._exchange if exchange else (lambda a, b: False))
    folder.commit()
    print(calls[0])
    """
)


def _old_run(out):
    out.mkdir()
    names = ["a.sigmf-data", "a.sigmf-meta", "b.sigmf-data", "b.sigmf-meta", "b.png"]
    for name in names:
        (out / name).write_text("old " + name)
    channels = [{"name": "a", "files": names[:2]}, {"name": "b", "files": names[2:4]}]
    (out / "summary.json").write_text(json.dumps({"channels": channels}))
    return _files(out)


def _child(kill_at, mode, out):
    return subprocess.run(
        [sys.executable, "-c", _CHILD, str(kill_at), mode, str(out)], env=ENV, capture_output=True, text=True, timeout=60
    )


@pytest.mark.parametrize("mode", ["exchange", "two-renames"])
def test_sigkill_at_every_point_of_the_commit_leaves_the_old_or_the_new_run(tmp_path, mode):
    if mode == "exchange":
        probe = tmp_path / "probe"
        probe.mkdir()
        (tmp_path / "probe2").mkdir()
        from channelizer.io.run_folder import _exchange

        if not _exchange(str(probe), str(tmp_path / "probe2")):
            pytest.skip("renameat2(RENAME_EXCHANGE) is not available on this file system")
        (tmp_path / "probe").rmdir(), (tmp_path / "probe2").rmdir()
    out = tmp_path / "out"
    old = _old_run(out)
    done = _child(0, mode, out)  # no kill: count the points
    assert done.returncode == 0, done.stderr
    points = int(done.stdout)
    new = _files(out)
    assert sorted(new) == ["a.sigmf-data", "a.sigmf-meta", "summary.json"]
    assert points >= 2
    seen = set()
    for kill_at in range(1, points + 1):
        for p in tmp_path.iterdir():  # start from the old run again
            subprocess.run(["rm", "-rf", str(p)], check=True)
        _old_run(out)
        proc = _child(kill_at, mode, out)
        assert proc.returncode == -signal.SIGKILL, (kill_at, proc.stderr)
        now = _files(out)
        if now is None:
            # two renames only: killed between them, the folder is missing for that moment;
            # the next run puts the earlier run back before it starts (channelizer.io.run_folder)
            assert mode == "two-renames"
        else:
            assert now in (old, new), (kill_at, sorted(now))
        StagedFolder(out, kind="run", check=check_run_folder).clean_leftovers()
        after = _files(out)
        assert after in (old, new), kill_at
        assert sorted(os.listdir(tmp_path)) == ["out"], kill_at  # the killed run's leftovers are gone
        seen.add("old" if after == old else "new")
    assert seen == {"old", "new"}  # the kills fell both before and after the commit point


# -- a capture truncated by another program during the run ------------------------------------------


def test_capture_truncated_during_the_run_gives_one_line(tmp_path, plan_path):
    base = tmp_path / "cap" / "long"
    base.parent.mkdir()
    write_sigmf(base, _noise(6_000_000, 2), datatype="cf32_le", fs=FS, center_frequency=CENTER)
    data = Path(str(base) + ".sigmf-data")
    out = tmp_path / "out"
    args = _extract(str(base) + ".sigmf-meta", plan_path, out, "a=+0", extra=["--block-size", "4096", "--no-plots"])
    proc = subprocess.Popen([sys.executable, "-m", "channelizer", *args], env=ENV, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and proc.poll() is None:
            if any(p.stat().st_size > 0 for p in tmp_path.glob(".out.run-*.part/.*.part")):
                break  # samples are being written: cut the capture to a tenth now
            time.sleep(0.002)
        assert proc.poll() is None, "the run ended before the capture could be cut"
        os.truncate(data, data.stat().st_size // 10)
        err = proc.communicate(timeout=120)[1]
    finally:
        proc.kill()
        proc.wait()
    # a memory map would end in SIGBUS (POSIX mmap(2): access beyond the end of the file)
    assert proc.returncode == 2, err
    assert err.count("\n") == 1 and err.startswith(f"error: {data}: the file ended at byte "), err
    assert err.endswith("another program truncated it during the run\n")
    assert not out.exists() and sorted(os.listdir(tmp_path)) == ["cap"]


# -- silent and very loud captures ------------------------------------------------------------------


def test_all_zero_capture_is_valid_input(tmp_path, plan_path, capsys):
    base = tmp_path / "silent"
    write_sigmf(base, np.zeros(48_000, np.complex64), datatype="cf32_le", fs=FS, center_frequency=CENTER)
    cap = str(base) + ".sigmf-meta"
    assert main(["survey", cap, "--quiet"]) == 0
    text = capsys.readouterr().out
    # 10 log10(0) is -inf (IEEE 754): no noise floor, no signal
    assert "every sample is zero (no signal)" in text and "(no signal above the threshold)" in text
    assert main(_extract(cap, plan_path, tmp_path / "out", "a=+0")) == 0
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["channels"][0]["mean_power_dbfs"] is None
    assert not np.fromfile(tmp_path / "out" / "a.sigmf-data", dtype=np.complex64).any()


def test_loud_capture_reports_its_true_power(tmp_path, plan_path, capsys):
    base = tmp_path / "loud"
    write_sigmf(base, _noise(48_000, 5) * np.float32(3e38), datatype="cf32_le", fs=FS, center_frequency=CENTER)
    out = tmp_path / "out"
    assert main(_extract(str(base) + ".sigmf-meta", plan_path, out, "a=+0", extra=["--no-plots"])) == 0
    y = np.fromfile(out / "a.sigmf-data", dtype=np.complex64).astype(np.complex128)
    # mean power in dB of full scale, summed in float64 (float32 squares overflow above 1.8e19)
    channel = json.loads((out / "summary.json").read_text())["channels"][0]
    expected = 10 * math.log10(np.mean(np.abs(y[channel["power_from_sample"]:]) ** 2))  # the settled power
    got = channel["mean_power_dbfs"]
    assert got == pytest.approx(expected, abs=1e-3)
    assert expected > 700  # components of rms 3e37: about 750 dB above full scale


# -- figures in the format the name asks for --------------------------------------------------------


@pytest.mark.parametrize("ext, magic", [("svg", b"<?xml"), ("pdf", b"%PDF-"), ("png", b"\x89PNG\r\n\x1a\n")])
def test_plot_is_written_in_the_format_its_extension_names(tmp_path, plan_path, capsys, ext, magic):
    # file signatures: SVG 1.1 is XML (W3C); PDF 1.x starts "%PDF-" (ISO 32000); PNG's 8-byte signature (RFC 2083)
    path = tmp_path / f"response.{ext.upper()}"
    assert main(["show", plan_path, "--plot", str(path)]) == 0
    assert path.read_bytes().startswith(magic)
