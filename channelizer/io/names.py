"""Checking names that become output file names (one per channel)."""

import re

from ..errors import ChannelizerError

__all__ = ["safe_output_name", "MAX_NAME_LENGTH"]

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
