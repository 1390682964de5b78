"""Reading a capture's stored samples with bounds checks against the file's current size.

A memory map of a file that another program truncates while we read it ends the
process with SIGBUS (the kernel has no page to give); Python cannot catch that.
:class:`SampleFile` reads with ``pread`` instead: a read that comes back short,
because the file shrank after it was opened, becomes one error line naming the file.
Slicing ``samples[a:b]`` gives a fresh ``(b - a, 2)`` array of the stored
components, as slicing the memory map did.
"""

import os

import numpy as np

from ..errors import ChannelizerError

__all__ = ["SampleFile"]


class SampleFile:
    """The ``(count, 2)`` stored components of ``path`` from byte ``offset``, read on demand.

    Parameters
    ----------
    path : str or os.PathLike
    dtype : numpy.dtype
        One component (e.g. ``<i2`` for ``ci16_le``).
    offset : int
        Byte offset of the first sample.
    count : int
        Number of complex samples.
    """

    def __init__(self, path, dtype, offset, count):
        self.path = path
        self.dtype = np.dtype(dtype)
        self.offset = int(offset)
        self.shape = (int(count), 2)
        try:
            self._fd = os.open(path, os.O_RDONLY)
        except OSError as exc:
            raise ChannelizerError(f"{path}: cannot read: {exc.strerror}") from None

    def __getstate__(self):
        # a copy in another process opens the file itself (a file descriptor does not travel)
        return (self.path, self.dtype, self.offset, self.shape[0])

    def __setstate__(self, state):
        self.__init__(*state)

    def __len__(self):
        return self.shape[0]

    def __getitem__(self, key):
        if not isinstance(key, slice):
            raise TypeError("SampleFile takes slices only")
        start, stop, step = key.indices(self.shape[0])
        if step != 1:
            raise TypeError("SampleFile takes contiguous slices only")
        n = max(stop - start, 0)
        out = np.empty((n, 2), dtype=self.dtype)
        view = memoryview(out).cast("B")
        want = view.nbytes
        pos = self.offset + start * 2 * self.dtype.itemsize
        done = 0
        while done < want:
            try:
                got = os.preadv(self._fd, [view[done:]], pos + done)
            except OSError as exc:
                raise ChannelizerError(f"{self.path}: cannot read: {exc.strerror}") from None
            if got == 0:
                raise ChannelizerError(
                    f"{self.path}: the file ended at byte {pos + done} while samples up to byte {pos + want} were "
                    "being read; another program truncated it during the run"
                )
            done += got
        return out

    def close(self):
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None

    def __del__(self):
        try:
            self.close()
        except (OSError, AttributeError):  # interpreter shutdown, or a failed open
            pass
