"""A folder that holds exactly one run (or one export), replaced as a whole by one rename.

The new content is built in a hidden sibling folder, ``.NAME.KIND-PID-XXXXXXXX.part``
beside ``NAME``, and committed in one step:

* ``NAME`` missing or empty: ``rename(2)`` of the sibling onto it (POSIX replaces an
  empty folder atomically);
* ``NAME`` holding an earlier run: ``renameat2(2)`` with ``RENAME_EXCHANGE`` swaps the
  two folders atomically (Linux 3.15 and later, on ext4, XFS, Btrfs, tmpfs, ...); the
  sibling then holds the earlier run and is removed.  Where the exchange is not
  available, the earlier run is renamed aside (``.NAME.KIND-PID-X.old``) and the new
  one renamed into place; a process killed between the two renames leaves ``NAME``
  missing, and the next run renames the earlier run back before it starts.

So a reader of ``NAME`` sees either the earlier run or the new one, never a mix, at
every instant, including after a SIGKILL.  Hidden siblings left by a killed process
(its PID no longer runs) are removed by the next run into the same folder.
"""

import contextlib
import ctypes
import errno
import os
import re
import shutil
import tempfile

from ..errors import ChannelizerError

__all__ = ["StagedFolder", "folder_entries"]

_AT_FDCWD = -100
_RENAME_EXCHANGE = 2


def _exchange(a, b):
    """Swap folders ``a`` and ``b`` atomically; False where the system cannot."""
    try:
        fn = ctypes.CDLL(None, use_errno=True).renameat2
    except (AttributeError, OSError):
        return False
    fn.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    if fn(_AT_FDCWD, os.fsencode(a), _AT_FDCWD, os.fsencode(b), _RENAME_EXCHANGE) == 0:
        return True
    err = ctypes.get_errno()
    if err in (errno.EINVAL, errno.ENOSYS, errno.EOPNOTSUPP, errno.ENOTSUP):
        return False
    raise OSError(err, os.strerror(err), b)


def _running(pid):
    if pid == os.getpid():
        return False  # ours would have been made after the cleaning; this one is a dead namesake's
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:
        return True  # another user's process
    return True


def _sync_folder(folder):
    with contextlib.suppress(OSError):
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def folder_entries(path, *, hint=""):
    """The sorted names in output folder ``path``, or None when it is missing.

    A symbolic link, a file, or a folder that cannot be listed is refused (``hint`` is
    added to the "not a folder" message).
    """
    if not os.path.lexists(path):
        return None
    if os.path.islink(path):
        raise ChannelizerError(f"{path}: is a symbolic link; give the folder itself or another --out")
    if not os.path.isdir(path):
        raise ChannelizerError(f"{path}: exists and is not a folder{hint}")
    try:
        return sorted(os.listdir(path))
    except OSError as exc:
        raise ChannelizerError(f"{path}: cannot read the output folder ({exc.strerror})") from None


class StagedFolder:
    """Build a folder's new content beside it and commit it with one rename.

    Parameters
    ----------
    path : str
        The folder to write (created, or replaced as a whole).
    kind : str
        A short word in the hidden sibling's name (``run``, ``export``).
    check : callable
        ``check(path)`` refuses a ``path`` that may not be replaced (raising
        ``ChannelizerError``) and returns ``"missing"``, ``"empty"`` or ``"ours"``.

    Use :meth:`open` (returns the sibling folder to write into), then :meth:`commit`,
    or :meth:`abort` on failure; :meth:`public` turns the sibling's name in a message
    into the real one.
    """

    def __init__(self, path, *, kind, check):
        self.path = os.fspath(path)
        self.kind = kind
        self._check = check
        self.temp = None
        self.parent = os.path.dirname(os.path.abspath(self.path))
        self._pattern = re.compile(re.escape(f".{os.path.basename(os.path.abspath(self.path))}.{kind}-") + r"(\d+)-.*\.(part|old)\Z")

    def clean_leftovers(self):
        """Remove the hidden siblings of killed runs; put back an earlier run a kill left aside."""
        with contextlib.suppress(OSError):
            names = sorted(os.listdir(self.parent))
            for name in names:
                m = self._pattern.match(name)
                if not m or _running(int(m.group(1))):
                    continue
                leftover = os.path.join(self.parent, name)
                if m.group(2) == "old" and not os.path.lexists(self.path):
                    os.rename(leftover, self.path)  # killed between the two renames: the earlier run returns
                else:
                    shutil.rmtree(leftover, ignore_errors=True)

    def open(self):
        """Check the folder, clean leftovers, and make the hidden sibling; returns its path."""
        if os.path.isdir(self.parent):
            self.clean_leftovers()
            self.state = self._check(self.path)
        else:  # a new parent holds no leftovers
            self.state = self._check(self.path)
            try:
                os.makedirs(self.parent, exist_ok=True)
            except OSError as exc:
                raise ChannelizerError(f"{self.path}: cannot create output folder ({exc.strerror})") from None
        base = os.path.basename(os.path.abspath(self.path))
        try:
            self.temp = tempfile.mkdtemp(prefix=f".{base}.{self.kind}-{os.getpid()}-", suffix=".part", dir=self.parent)
        except OSError as exc:
            raise ChannelizerError(f"{self.path}: cannot create output folder ({exc.strerror})") from None
        mask = os.umask(0)
        os.umask(mask)
        os.chmod(self.temp, 0o777 & ~mask)  # mkdtemp makes it private; a folder gets the usual mode
        return self.temp

    def commit(self):
        """Put the new content at ``path`` in one rename (see the module notes)."""
        try:
            if self.state != "ours":
                os.rename(self.temp, self.path)
            elif _exchange(self.temp, self.path):
                shutil.rmtree(self.temp, ignore_errors=True)  # now the earlier run
            else:
                old = self.temp[: -len(".part")] + ".old"
                os.rename(self.path, old)
                os.rename(self.temp, self.path)
                shutil.rmtree(old, ignore_errors=True)
        except OSError as exc:
            self.abort()
            raise ChannelizerError(f"{self.path}: cannot finish writing: {exc.strerror or exc}") from None
        self.temp = None
        _sync_folder(self.parent)

    def abort(self):
        """Remove the hidden sibling and everything in it."""
        if self.temp is not None:
            shutil.rmtree(self.temp, ignore_errors=True)
            self.temp = None

    def public(self, exc):
        """``exc`` with the hidden sibling's name replaced by the folder's real name."""
        temp = self.temp
        if temp is None:
            return exc
        if isinstance(exc, ChannelizerError):
            return ChannelizerError(str(exc).replace(temp, self.path))
        if isinstance(exc, OSError) and exc.filename:
            name = os.fspath(exc.filename).replace(temp, self.path)
            return OSError(exc.errno, exc.strerror, name)
        return exc

    @contextlib.contextmanager
    def writing(self):
        """``with folder.writing() as tmp:`` write into ``tmp``; commit on success, else abort."""
        tmp = self.open()
        try:
            yield tmp
        except BaseException as exc:
            public = self.public(exc)
            self.abort()
            if public is exc:
                raise
            raise public from None
        self.commit()
