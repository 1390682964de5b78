"""Output paths checked against the run's inputs, and input files read safely.

Every command that writes calls :func:`check_outputs` before it writes anything:
an output may never be, or hold, one of the files the command reads.  "The same
file" is decided twice, by the resolved path (``os.path.realpath``, which follows
symbolic links) and by ``(st_dev, st_ino)`` (which also catches hard links and a
case-insensitive file system's other spelling of a name).

:func:`read_regular_file` reads a small input (a plan, a channel list) only when
it is a regular file, opening it without blocking (a FIFO would wait for a writer
forever) and reading at most a bounded number of bytes (a link to ``/dev/zero``
never ends).
"""

import os
import stat

from ..errors import ChannelizerError

__all__ = ["check_outputs", "read_regular_file", "figure_format", "FIGURE_FORMATS"]

#: Figure formats the plots are written in, chosen by the file name's extension.
FIGURE_FORMATS = ("png", "svg", "pdf")
_MAX_ENTRIES = 100_000


def _identity(path):
    """``(st_dev, st_ino)`` of ``path`` after links, or None when it does not exist."""
    try:
        st = os.stat(path)
    except OSError:
        return None
    return (st.st_dev, st.st_ino)


def _same_file(a, b):
    if os.path.realpath(a) == os.path.realpath(b):
        return True
    ia = _identity(a)
    return ia is not None and ia == _identity(b)


def _inside(folder, path):
    """True when ``path`` resolves to a file under ``folder`` (by path or by inode)."""
    real_folder = os.path.realpath(folder)
    if os.path.realpath(path).startswith(real_folder.rstrip(os.sep) + os.sep):
        return True
    want = _identity(path)
    if want is None or not os.path.isdir(folder):
        return False
    # a hard link of the input anywhere a run or an export writes (two levels: vectors/);
    # a deeper or larger folder is no earlier output of ours and is refused as such anyway
    seen = 0
    for root, dirs, files in os.walk(folder):
        if root[len(folder):].count(os.sep) >= 2:
            dirs[:] = []
        for name in files + dirs:
            seen += 1
            if seen > _MAX_ENTRIES or _identity(os.path.join(root, name)) == want:
                return seen <= _MAX_ENTRIES
    return False


def check_outputs(files=(), *, folders=(), inputs=()):
    """Refuse outputs that would overwrite, or replace the folder of, an input.

    Parameters
    ----------
    files : iterable of str
        Output files (None entries are skipped).  Each must not be an input, must
        not be an existing folder, must lie in an existing folder, and no two may
        be the same file.
    folders : iterable of str
        Output folders the command replaces as a whole: none may be, or hold, an input.
    inputs : iterable of str
        Every file the command reads (capture data and metadata, plans, channel lists).

    Raises
    ------
    ChannelizerError
        Naming the output, and the input it would destroy.
    """
    inputs = [os.fspath(p) for p in inputs if p is not None]
    seen = []
    for out in (os.fspath(p) for p in files if p is not None):
        folder = os.path.dirname(os.path.abspath(out))
        if not os.path.isdir(folder):
            raise ChannelizerError(f"{out}: folder {folder} does not exist")
        if os.path.isdir(out):
            raise ChannelizerError(f"{out}: is a folder, expected a file name")
        for inp in inputs:
            if _same_file(out, inp):
                raise ChannelizerError(f"{out}: is the input {inp}; an output never replaces an input")
        for other in seen:
            if _same_file(out, other):
                raise ChannelizerError(f"{out}: named twice as an output (also as {other})")
        seen.append(out)
    for out in (os.fspath(p) for p in folders if p is not None):
        for inp in inputs:
            if _same_file(out, inp) or _inside(out, inp):
                raise ChannelizerError(
                    f"{out}: holds the input {inp}; the output folder is replaced as a whole, so it must not hold an input"
                )


def read_regular_file(path, *, what, limit):
    """The first ``limit + 1`` bytes of ``path``, a regular file.

    The file is opened without blocking and checked before anything is read: a
    FIFO, a device or a folder is refused.  At most ``limit + 1`` bytes are read,
    whatever the file claims, so the caller sees a file longer than ``limit``
    without reading it all.
    """
    path = os.fspath(path)
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except OSError as exc:
        raise ChannelizerError(f"{path}: cannot read {what} ({exc.strerror})") from None
    try:
        if not stat.S_ISREG(os.fstat(fd).st_mode):
            raise ChannelizerError(f"{path}: not a regular file; a {what} is read from a regular file only")
        chunks, size = [], 0
        while size <= limit:
            chunk = os.read(fd, min(1 << 20, limit + 1 - size))
            if not chunk:
                break
            chunks.append(chunk)
            size += len(chunk)
    except OSError as exc:
        raise ChannelizerError(f"{path}: cannot read {what} ({exc.strerror})") from None
    finally:
        os.close(fd)
    return b"".join(chunks)


def figure_format(path):
    """The figure format ``path``'s extension names (png, svg or pdf); others are refused."""
    ext = os.path.splitext(os.fspath(path))[1].lower().lstrip(".")
    if ext not in FIGURE_FORMATS:
        what = f"not '.{ext}'" if ext else "and the name has none"
        raise ChannelizerError(f"{path}: a figure is written as .png, .svg or .pdf (by its extension), {what}")
    return ext
