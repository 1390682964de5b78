"""The README's filter-bank examples, re-run: their printed lines must match the README's.

Source of truth for the check: the README text itself (each example block starts with
``$ channelizer ...``); timing figures are left out of the comparison.
"""

import os
import re
import shlex
from pathlib import Path


from channelizer.cli import main

ROOT = Path(__file__).resolve().parents[1]
SECTION = "### A whole raster at once: the filter bank"


def _examples():
    text = (ROOT / "README.md").read_text()
    part = text[text.index(SECTION) :]
    part = part[: part.index("\n### ", 1)]
    blocks = re.findall(r"```\n(.*?)```", part, flags=re.S)
    out = []
    for block in blocks:
        lines = block.replace("\\\n      ", "").splitlines()
        cmd, expect = None, []
        for line in lines:
            if line.startswith("$ channelizer "):
                if cmd:
                    out.append((cmd, expect))
                cmd, expect = line[2:], []
            elif cmd:
                expect.append(line)
        if cmd:
            out.append((cmd, expect))
    return out


def _timeless(lines):
    return [l for l in lines if not re.search(r"\d+\.\d+ s \(", l)]


def test_readme_examples_run_as_shown(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    os.symlink(ROOT / "captures", tmp_path / "captures")
    examples = [(c, e) for c, e in _examples() if not c.startswith("channelizer bench")]
    assert len(examples) == 4
    for cmd, expect in examples:
        status = main(shlex.split(cmd)[1:])
        got = capsys.readouterr()
        lines = (got.out + got.err).splitlines()
        assert status == (2 if "bad" in cmd else 0), cmd
        assert _timeless(lines) == _timeless(expect), cmd
