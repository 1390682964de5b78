"""Which folders an extraction run may replace: missing, empty, or an earlier run of ours.

A run's folder holds exactly one run.  It is recognised by its ``summary.json`` (a
JSON object with a ``channels`` list) and must hold nothing but the files that
summary accounts for: each channel's recording and figure, the summary and the
overview, and hidden temporary files of ours.  Anything else (a capture, notes,
another program's files) makes the folder foreign and the run is refused, so a
run never deletes a file it did not write.
"""

import json
import os
import re

from ..errors import ChannelizerError
from ..io.paths import read_regular_file
from ..io.run_folder import folder_entries
from .processor import CHANNEL_SUFFIXES, RUN_FILES

__all__ = ["check_run_folder"]

_OUR_TEMPORARY = re.compile(r"\..+\.(part|old)\Z")
_MAX_SUMMARY_BYTES = 64 * 2**20


def _summary_files(path):
    """The files an earlier run's summary lists, or None when there is no summary of ours."""
    summary = os.path.join(path, "summary.json")
    if not os.path.isfile(summary) or os.path.islink(summary):
        return None
    try:
        doc = json.loads(read_regular_file(summary, what="run summary", limit=_MAX_SUMMARY_BYTES))
    except (ChannelizerError, ValueError):
        return None
    if not isinstance(doc, dict) or not isinstance(doc.get("channels"), list):
        return None
    files = set(RUN_FILES)
    for ch in doc["channels"]:
        if not isinstance(ch, dict):
            continue
        files.update(f for f in ch.get("files", []) if isinstance(f, str))
        if isinstance(ch.get("name"), str):
            files.update(ch["name"] + s for s in CHANNEL_SUFFIXES)
    return files


def check_run_folder(path):
    """Refuse an output folder a run may not replace; return ``missing``, ``empty`` or ``ours``."""
    entries = folder_entries(path)
    if entries is None:
        return "missing"
    if not entries:
        return "empty"
    ours = _summary_files(path)
    if ours is None:
        raise ChannelizerError(
            f"{path}: folder is not empty and holds no earlier run (no summary.json of ours); "
            "choose another --out or empty it"
        )
    for name in entries:
        full = os.path.join(path, name)
        plain_file = os.path.isfile(full) and not os.path.islink(full)
        if plain_file and (name in ours or _OUR_TEMPORARY.match(name)):
            continue
        raise ChannelizerError(
            f"{path}: holds {name!r}, which the earlier run there did not write; move it or choose another --out"
        )
    return "ours"
