"""Writing files so that a partial result never looks complete.

Everything the tool writes goes to a hidden temporary name in the target folder
and is renamed over the final name only once it is complete (``os.replace`` is
atomic on one file system).
"""

import contextlib
import os
import tempfile

from ..errors import ChannelizerError

__all__ = ["atomic_output", "write_text_atomic", "write_bytes_atomic", "FileSet"]


def _temp_beside(path):
    """A hidden temporary file in ``path``'s folder, with a new file's usual permissions."""
    folder = os.path.dirname(os.path.abspath(path))
    fd, tmp = tempfile.mkstemp(prefix="." + os.path.basename(path) + ".", suffix=".part", dir=folder)
    try:
        # mkstemp makes the file private; give it the usual permissions of a new file
        umask = os.umask(0)
        os.umask(umask)
        os.fchmod(fd, 0o666 & ~umask)
    except BaseException:
        os.close(fd)
        os.unlink(tmp)
        raise
    return fd, tmp


def _refuse_folder(path):
    """An existing folder (or a link to one) at an output's name is never moved aside."""
    if os.path.isdir(path):
        raise ChannelizerError(f"{path}: is a folder; an output file never replaces a folder")


@contextlib.contextmanager
def atomic_output(path, mode="wb"):
    """Open a temporary file beside ``path``; rename it to ``path`` on success.

    On any exception the temporary file is removed and ``path`` is untouched.
    """
    files = FileSet()
    with files.output(path, mode) as fh:
        yield fh
    files.commit()


def write_text_atomic(path, text):
    """Write ``text`` (UTF-8) to ``path`` via a temporary name."""
    with atomic_output(path, "w") as fh:
        fh.write(text)


def write_bytes_atomic(path, data):
    """Write ``data`` to ``path`` via a temporary name."""
    with atomic_output(path, "wb") as fh:
        fh.write(data)


class FileSet:
    """Several output files that become visible together, or not at all.

    Each file is written under a temporary name (:meth:`output`,
    :meth:`write_text`); :meth:`commit` renames them all into place, first
    moving any older file of the same name aside, and puts the older files back
    if a rename fails, so a run either replaces every output or none.
    :meth:`abort` removes the temporary files.
    """

    def __init__(self):
        self._pending = []  # (temporary path, final path)

    @contextlib.contextmanager
    def output(self, path, mode="wb"):
        """Like :func:`atomic_output`, but the rename waits for :meth:`commit`."""
        path = os.fspath(path)
        _refuse_folder(path)
        fd, tmp = _temp_beside(path)
        try:
            with os.fdopen(fd, mode) as fh:
                yield fh
                fh.flush()
                os.fsync(fh.fileno())
        except BaseException:
            with contextlib.suppress(OSError):
                os.unlink(tmp)
            raise
        self._pending.append((tmp, path))

    def write_text(self, path, text):
        with self.output(path, "w") as fh:
            fh.write(text)

    def commit(self):
        """Rename every file into place; on failure restore what was there before."""
        done = []  # (final, backup or None)
        final = None
        try:
            for tmp, final in self._pending:
                backup = None
                _refuse_folder(final)
                if os.path.lexists(final):
                    # keep the older file under a second name; a hard link leaves ``final``
                    # in place, so a lone file is replaced in one atomic rename
                    backup = tempfile.mktemp(prefix="." + os.path.basename(final) + ".", suffix=".old", dir=os.path.dirname(os.path.abspath(final)))
                    try:
                        os.link(final, backup)
                    except OSError:
                        os.replace(final, backup)
                done.append((final, backup))
                os.replace(tmp, final)
        except BaseException as exc:
            for done_final, backup in reversed(done):
                with contextlib.suppress(OSError):
                    if backup is not None and os.path.lexists(done_final) and os.path.samefile(backup, done_final):
                        os.unlink(backup)  # never replaced (renaming a link onto itself does nothing)
                    elif backup is not None:
                        os.replace(backup, done_final)
                    elif os.path.lexists(done_final):
                        os.unlink(done_final)
            self.abort()
            if isinstance(exc, OSError):
                raise ChannelizerError(f"{final}: cannot finish writing: {exc.strerror or exc}") from None
            raise
        for _, backup in done:
            if backup is not None:
                with contextlib.suppress(OSError):
                    os.unlink(backup)
        self._pending = []

    def abort(self):
        """Remove every temporary file not yet committed."""
        for tmp, _ in self._pending:
            with contextlib.suppress(OSError):
                os.unlink(tmp)
        self._pending = []
