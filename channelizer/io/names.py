"""Checking names that become output file names (one per channel), and that they map one-to-one to files."""

import re

from ..errors import ChannelizerError

__all__ = ["safe_output_name", "check_output_names", "MAX_NAME_LENGTH", "SIGMF_EXTENSIONS"]

MAX_NAME_LENGTH = 100
_ALLOWED = re.compile(r"[A-Za-z0-9_.-]+")
_RULE = "use ASCII letters, digits, '-', '_' and '.' (not first), at most 100 characters"


def safe_output_name(name):
    """Return ``name`` unchanged if it is safe as a file name in the output folder.

    A safe name is 1 to 100 characters of ASCII letters, digits, ``-``, ``_``
    and ``.``, does not start with ``.`` and does not contain ``..``. So it
    cannot name another folder (no separators, no absolute path, no ``..``), a
    hidden file, or hold control characters. Nothing is rewritten: a name that
    breaks the rule is refused.

    Raises
    ------
    ChannelizerError
        Naming the bad name, what is wrong, and what is allowed.
    """
    if not isinstance(name, str):
        raise ChannelizerError(f"output name {name!r} is not a string; {_RULE}")
    if not name:
        problem = "is empty"
    elif len(name) > MAX_NAME_LENGTH:
        problem = f"is {len(name)} characters long"
    elif "/" in name or "\\" in name:
        problem = "contains a path separator"
    elif name.startswith("."):
        problem = "starts with '.'"
    elif ".." in name:
        problem = "contains '..'"
    elif any(ord(c) < 32 or ord(c) == 127 for c in name):
        problem = "contains a control character"
    elif not _ALLOWED.fullmatch(name):
        bad = next(c for c in name if not _ALLOWED.fullmatch(c))
        problem = f"contains {bad!r}"
    else:
        return name
    raise ChannelizerError(f"output name {name!r} {problem}; {_RULE}")


#: Extensions of SigMF files (SigMF 1.x: recording, archive, collection); a name ending in one
#: would lose it to the writer (``a.sigmf-meta`` writes ``a.sigmf-data``/``a.sigmf-meta``).
SIGMF_EXTENSIONS = (".sigmf-data", ".sigmf-meta", ".sigmf-collection", ".sigmf")


def check_output_names(names, *, suffixes, reserved=()):
    """Refuse names whose files are not one-to-one with the names.

    Parameters
    ----------
    names : list of str
        Names already checked by :func:`safe_output_name`; name ``N`` writes the
        files ``N + s`` for each ``s`` in ``suffixes``.
    suffixes : iterable of str
        The extensions every name gets, e.g. ``.sigmf-data``, ``.sigmf-meta``, ``.png``.
    reserved : iterable of str
        File names the run writes for itself (e.g. ``summary.json``); no name's file may be one.

    Raises
    ------
    ChannelizerError
        For a repeated name, names that differ only in letter case (a
        case-insensitive file system holds one file for both), a name ending in
        a SigMF extension, or a name whose file is one of ``reserved``.
    """
    repeated = sorted({n for n in names if names.count(n) > 1})
    if repeated:
        raise ChannelizerError(f"channel names must be unique; repeated: {', '.join(repeated)}")
    for n in names:
        ext = next((e for e in SIGMF_EXTENSIONS if n.lower().endswith(e)), None)
        if ext is not None:
            raise ChannelizerError(
                f"output name {n!r} ends in {ext!r}, a SigMF extension; its recording would be "
                f"{n[: -len(ext)]}.sigmf-data/-meta (choose a name without it)"
            )
    owner = {r.lower(): None for r in reserved}
    for n in names:
        for s in suffixes:
            key = (n + s).lower()
            if key not in owner:
                owner[key] = n
            elif owner[key] is None:
                raise ChannelizerError(f"output name {n!r} would write {n + s}, a file the run writes for itself; choose another name")
            else:
                raise ChannelizerError(
                    f"channel names {owner[key]!r} and {n!r} write the same file {n + s} on a file system that "
                    "ignores letter case; make them differ in more than case"
                )
