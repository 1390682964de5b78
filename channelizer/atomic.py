"""Writing files so that a partial result never looks complete.

Everything the tool writes goes to a hidden temporary name in the target folder
and is renamed over the final name only once it is complete (``os.replace`` is
atomic on one file system).
"""

import contextlib
import os
import tempfile

__all__ = ["atomic_output", "write_text_atomic", "write_bytes_atomic"]


@contextlib.contextmanager
def atomic_output(path, mode="wb"):
    """Open a temporary file beside ``path``; rename it to ``path`` on success.

    On any exception the temporary file is removed and ``path`` is untouched.
    """
    path = os.fspath(path)
    folder = os.path.dirname(os.path.abspath(path))
    fd, tmp = tempfile.mkstemp(prefix="." + os.path.basename(path) + ".", suffix=".part", dir=folder)
    try:
        # mkstemp makes the file private; give it the usual permissions of a new file
        umask = os.umask(0)
        os.umask(umask)
        os.fchmod(fd, 0o666 & ~umask)
        with os.fdopen(fd, mode) as fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise


def write_text_atomic(path, text):
    """Write ``text`` (UTF-8) to ``path`` via a temporary name."""
    with atomic_output(path, "w") as fh:
        fh.write(text)


def write_bytes_atomic(path, data):
    """Write ``data`` to ``path`` via a temporary name."""
    with atomic_output(path, "wb") as fh:
        fh.write(data)
