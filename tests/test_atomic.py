"""Outputs appear whole or not at all (temporary name, then rename: common practice)."""

import os

import pytest

from channelizer.io.atomic import FileSet, atomic_output, write_text_atomic
from channelizer.errors import ChannelizerError


def _listing(d):
    return {n: open(os.path.join(d, n)).read() for n in sorted(os.listdir(d))}


def test_single_file_replaced_only_on_success(tmp_path):
    p = tmp_path / "f.txt"
    write_text_atomic(p, "one")
    with pytest.raises(RuntimeError):
        with atomic_output(p, "w") as fh:
            fh.write("two")
            raise RuntimeError("interrupted")
    assert _listing(tmp_path) == {"f.txt": "one"}
    write_text_atomic(p, "three")
    assert _listing(tmp_path) == {"f.txt": "three"}


@pytest.mark.parametrize("failing_call", [1, 2, 3])
def test_file_set_rolls_back_every_file_when_a_rename_fails(tmp_path, monkeypatch, failing_call):
    for n in "abc":
        (tmp_path / n).write_text("old " + n)
    files = FileSet()
    for n in "abc":
        files.write_text(tmp_path / n, "new " + n)
    real, calls = os.replace, [0]

    def replace(src, dst):
        calls[0] += 1
        if calls[0] == failing_call:
            raise OSError(28, "No space left on device")
        return real(src, dst)

    monkeypatch.setattr(os, "replace", replace)
    with pytest.raises(ChannelizerError, match="cannot finish writing: No space left"):
        files.commit()
    assert _listing(tmp_path) == {n: "old " + n for n in "abc"}


def test_file_set_commit_and_abort(tmp_path):
    files = FileSet()
    files.write_text(tmp_path / "a", "1")
    files.write_text(tmp_path / "b", "2")
    assert [n for n in os.listdir(tmp_path) if not n.startswith(".")] == []
    files.commit()
    assert _listing(tmp_path) == {"a": "1", "b": "2"}
    again = FileSet()
    again.write_text(tmp_path / "a", "x")
    again.abort()
    assert _listing(tmp_path) == {"a": "1", "b": "2"}
