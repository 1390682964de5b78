"""Bad and hostile inputs: one ``error:`` line naming the file or field, exit status 2,
no traceback, and nothing left in the output folder.

The cases live in ``tests/bad_inputs/``: small hand-written files, plus
``expected.yaml``, the table of every case's command and the exact stderr line
it must give. Anything large or binary (a 100 MB plan, WAV files, SigMF data
files, captures holding NaN) is made at test time in ``tmp_path`` by the
generator named in the case's ``make`` entry.

What is demanded of a refusal is the project rule (DEVELOPERS.md, "Bad input raises
ChannelizerError ... one-line message naming the file or field"); facts about the
inputs are noted at each generator (YAML 1.1 as PyYAML reads it; SigMF 1.x; WAV
layouts as scipy.io.wavfile writes them).
"""

import hashlib
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import scipy.io.wavfile
import yaml

from channelizer.cli import main
from channelizer.io.sigmf_writer import write_sigmf

BAD = Path(__file__).parent / "bad_inputs"
REPO = Path(__file__).resolve().parent.parent
TABLE = yaml.safe_load((BAD / "expected.yaml").read_text(encoding="utf-8"))
CASES = TABLE["cases"]
FS = 2.4e6
CENTER = 161.0e6
TRACEBACK_MARKS = ("Traceback", 'File "', "Error:", "Exception")


# -- valid inputs every case starts from --------------------------------------------------------


@pytest.fixture(scope="module")
def valid(tmp_path_factory):
    """A plan made by the ``plan`` command and a small SigMF capture at its input rate."""
    d = tmp_path_factory.mktemp("valid")
    plan = d / "relay.yaml"
    rc = main(["plan", "--rate", "2.4M", "--bandwidth", "12.5k", "--output-rate", "48k", "--out", str(plan)])
    assert rc == 0 and plan.is_file()
    rng = np.random.default_rng(20240611)
    n = 24_000
    x = (0.1 * (rng.standard_normal(n) + 1j * rng.standard_normal(n))).astype(np.complex64)
    write_sigmf(d / "site", x, datatype="cf32_le", fs=FS, center_frequency=CENTER)
    return {"plan": str(plan), "capture": str(d / "site.sigmf-meta")}


# -- generators for the inputs that are not kept in the repository -------------------------------


def make_huge_plan(tmp):
    """A 100 MB YAML document that starts like a plan (a 20-million-entry taps list)."""
    head = (BAD / "plan_valid_reference.yaml").read_text().split("stages:")[0]
    with open(tmp / "huge_plan.yaml", "w") as fh:
        fh.write(head + "stages:\n- kind: fir\n  decimation: 50\n  taps: [")
        chunk = "0.0, " * 1_000_000
        for _ in range(20):
            fh.write(chunk)
        fh.write("0.0]\n")
    assert (tmp / "huge_plan.yaml").stat().st_size > 100_000_000


def make_huge_channel_list(tmp):
    """A 100 MB channel list (one long comment line)."""
    with open(tmp / "huge_channels.yaml", "w") as fh:
        fh.write("# " + "x" * (100 * 2**20) + "\n- {name: a, frequency: '+0'}\n")


def make_deep_plan(tmp):
    """50 000 nested flow sequences: 100 kB that PyYAML's recursive parser cannot follow."""
    (tmp / "deep_plan.yaml").write_text("format: channelizer-plan/1\nstages: " + "[" * 50_000 + "]" * 50_000 + "\n")


def make_long_integer_plan(tmp):
    """A 5000-digit integer: Python refuses int() of more than 4300 digits (CVE-2020-10735 limit)."""
    text = (BAD / "plan_valid_reference.yaml").read_text().replace("decimation: 25", "decimation: " + "9" * 5000)
    (tmp / "long_integer_plan.yaml").write_text(text)


def make_sigmf(tmp, meta, data_bytes):
    """A copy of a corpus ``.sigmf-meta`` with a data file of ``data_bytes`` zero bytes (None: no data file)."""
    shutil.copy(BAD / meta, tmp / meta)
    if data_bytes is not None:
        (tmp / meta.replace(".sigmf-meta", ".sigmf-data")).write_bytes(bytes(data_bytes))


def make_wav(tmp, name, channels, dtype):
    """A WAV file written by scipy.io.wavfile (an outside writer), 1000 frames."""
    shape = (1000,) if channels == 1 else (1000, channels)
    scipy.io.wavfile.write(tmp / name, 2_400_000, np.zeros(shape, dtype=dtype))


def make_raw(tmp, name, samples):
    """A raw cf32_le file of zeros."""
    np.zeros(samples, dtype=np.complex64).tofile(tmp / name)


def make_nonfinite_capture(tmp, name, index, value):
    """A cf32 SigMF capture at the plan's rate with one NaN or infinite sample at ``index``."""
    rng = np.random.default_rng(7)
    x = (0.1 * (rng.standard_normal(30_000) + 1j * rng.standard_normal(30_000))).astype(np.complex64)
    x[index] = {"nan": complex(np.nan, 0.0), "inf": complex(0.0, np.inf), "-inf": complex(-np.inf, 1.0)}[value]
    write_sigmf(tmp / name, x, datatype="cf32_le", fs=FS, center_frequency=CENTER)


def make_out_file(tmp):
    """The output folder's name taken by an ordinary file."""
    (tmp / "out").write_text("not a folder\n")


# -- second round: generators named r2_* also get the valid plan and capture --------------------


def make_r2_capture_copy(tmp, folder, valid):
    """The valid capture's two files copied into ``tmp/folder``."""
    (tmp / folder).mkdir(exist_ok=True)
    for ext in (".sigmf-meta", ".sigmf-data"):
        shutil.copy(valid["capture"][: -len(".sigmf-meta")] + ext, tmp / folder / ("site" + ext))


def make_r2_plan_copy(tmp, name, valid):
    (tmp / name).parent.mkdir(exist_ok=True)
    shutil.copy(valid["plan"], tmp / name)


def make_r2_symlink(tmp, link, target, valid):
    os.symlink(target, tmp / link)


def make_r2_hard_link(tmp, link, target, valid):
    os.link(tmp / target, tmp / link)


def make_r2_file(tmp, name, text, valid):
    (tmp / name).parent.mkdir(exist_ok=True)
    (tmp / name).write_text(text)


def make_r2_folder(tmp, name, valid):
    (tmp / name).mkdir()


def make_r2_fifo(tmp, name, valid):
    os.mkfifo(tmp / name)


def make_r2_earlier_run(tmp, channel, valid, data_link=None, data_folder=False):
    """``tmp/out`` as an earlier run of one channel leaves it: its summary and recording.

    ``data_link``: the recording's data file is a hard link to that file of ``tmp``;
    ``data_folder``: a folder stands at the data file's name.
    """
    out = tmp / "out"
    out.mkdir()
    files = [f"{channel}.sigmf-data", f"{channel}.sigmf-meta"]
    summary = {"capture": "site.sigmf-meta", "channels": [{"name": channel, "files": files}]}
    (out / "summary.json").write_text(json.dumps(summary))
    (out / files[1]).write_text("{}")
    if data_link:
        os.link(tmp / data_link, out / files[0])
    elif data_folder:
        (out / files[0]).mkdir()
        (out / files[0] / "inside.txt").write_text("kept\n")
    else:
        (out / files[0]).write_bytes(bytes(64))


def make_r2_scaled_capture(tmp, name, scale, valid):
    """A constant ``scale (1 + 1j)``: at 3.4e38, float32's largest value (IEEE 754), the filters'
    overshoot cannot be held in float32."""
    x = np.full(24_000, scale * (1 + 1j), dtype=np.complex64)
    write_sigmf(tmp / name, x, datatype="cf32_le", fs=FS, center_frequency=CENTER)


GENERATORS = {
    "huge_plan": make_huge_plan,
    "huge_channel_list": make_huge_channel_list,
    "deep_plan": make_deep_plan,
    "long_integer_plan": make_long_integer_plan,
    "sigmf": make_sigmf,
    "wav": make_wav,
    "raw": make_raw,
    "nonfinite_capture": make_nonfinite_capture,
    "out_file": make_out_file,
    **{name[len("make_"):]: f for name, f in globals().items() if name.startswith("make_r2_")},
}


# -- running a case -----------------------------------------------------------------------------


def _substitute(text, places):
    for key, value in places.items():
        text = text.replace("{" + key + "}", value)
    return text


def _prepare(name, tmp, valid):
    case = CASES[name]
    for gen, kwargs in (case.get("make") or {}).items():
        extra = {"valid": valid} if gen.startswith("r2_") else {}
        GENERATORS[gen](tmp, **(kwargs or {}), **extra)
    places = {"bad": str(BAD), "tmp": str(tmp), "out": str(tmp / "out"), **valid}
    args = [_substitute(a, places) for a in case["args"]]
    return args, _substitute(case["stderr"], places)


def _snapshot(folder):
    """Every file under ``folder`` with its bytes (the output folder, or a file standing in its place)."""
    if folder.is_file():
        return {".": folder.read_bytes()}
    if not folder.exists():
        return {}
    return {str(p.relative_to(folder)): p.read_bytes() for p in folder.rglob("*") if p.is_file()}


def _tree(folder):
    """Every entry under ``folder`` (links not followed, FIFOs not opened): kind and content."""
    found = {}
    for root, dirs, files in os.walk(folder):
        for name in dirs + files:
            p = Path(root) / name
            rel = str(p.relative_to(folder))
            if p.is_symlink():
                found[rel] = ("link", os.readlink(p))
            elif p.is_dir():
                found[rel] = ("folder",)
            elif p.is_file():
                found[rel] = ("file", hashlib.sha256(p.read_bytes()).hexdigest())
            else:
                found[rel] = ("other",)
    return found


def _assert_refused(rc, out, err, expected, tmp, before):
    assert rc == 2
    assert err == expected + "\n", f"stderr was {err!r}"
    assert not any(mark in err for mark in TRACEBACK_MARKS)
    assert out == ""
    # nothing was written where output goes, not even a temporary file
    assert _snapshot(tmp / "out") == before[0]
    # second round: nothing under the test's folder changed, inputs included, no hidden leftover
    assert before[1] is None or _tree(tmp) == before[1]


def _before(name, tmp):
    return _snapshot(tmp / "out"), (_tree(tmp) if name.startswith("r2_") else None)


@pytest.mark.parametrize("name", sorted(CASES))
def test_refused_in_process(name, tmp_path, valid, capsys):
    args, expected = _prepare(name, tmp_path, valid)
    before = _before(name, tmp_path)
    capsys.readouterr()
    rc = main(args)
    captured = capsys.readouterr()
    _assert_refused(rc, captured.out, captured.err, expected, tmp_path, before)


@pytest.mark.parametrize("name", sorted(n for n, c in CASES.items() if c.get("subprocess")))
def test_refused_in_a_fresh_interpreter(name, tmp_path, valid):
    """``python -m channelizer`` as a user runs it: exit status 2 and only the one line."""
    args, expected = _prepare(name, tmp_path, valid)
    before = _before(name, tmp_path)
    env = dict(os.environ, PYTHONPATH=str(REPO))
    proc = subprocess.run(
        [sys.executable, "-m", "channelizer", *args],
        capture_output=True,
        text=True,
        cwd=tmp_path,
        env=env,
        timeout=120,
    )
    _assert_refused(proc.returncode, proc.stdout, proc.stderr, expected, tmp_path, before)


def test_every_corpus_file_is_used():
    """Each file in the corpus is named by some case (so none is kept without a check)."""
    text = (BAD / "expected.yaml").read_text() + Path(__file__).read_text()
    unused = [p.name for p in BAD.iterdir() if p.name != "expected.yaml" and p.name not in text]
    assert unused == []


def test_yaml_object_tag_is_never_constructed(tmp_path, valid, capsys):
    """The ``!!python/object/apply:os.system`` plan must not run its command (safe_load only)."""
    marker = Path("/tmp/channelizer-pwned")
    marker.unlink(missing_ok=True)
    assert main(["show", str(BAD / "plan_python_object_tag.yaml")]) == 2
    assert not marker.exists()


def test_reference_plan_of_the_corpus_is_valid(capsys):
    """The corpus's bad plans are each one edit away from this one, which loads and shows."""
    assert main(["show", str(BAD / "plan_valid_reference.yaml")]) == 0
    assert "Chain: 2.4 Msps -> 48 ksps" in capsys.readouterr().out
