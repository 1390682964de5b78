"""Standard output that a reader may close early (``channelizer plan ... | head -1``).

A closed pipe must not stop a command half-way: the files it was asked to write
matter more than the lines nobody reads.  Writes after the pipe closed are
dropped, and the descriptor is pointed at the null device so that the final
flush at exit cannot fail either (the recipe of the Python documentation,
``signal`` module, "Note on SIGPIPE").
"""

import io
import os

__all__ = ["ClosedPipeTolerant"]


class ClosedPipeTolerant(io.TextIOBase):
    """Wrap a text stream; after a ``BrokenPipeError`` every further write is dropped.

    ``broken`` tells whether the reader went away.
    """

    def __init__(self, stream):
        self.stream = stream
        self.broken = False

    def _drop(self):
        self.broken = True
        try:
            fd = self.stream.fileno()
        except (OSError, ValueError, io.UnsupportedOperation):
            return
        null = os.open(os.devnull, os.O_WRONLY)
        os.dup2(null, fd)
        os.close(null)

    def write(self, text):
        if not self.broken:
            try:
                self.stream.write(text)
            except BrokenPipeError:
                self._drop()
        return len(text)

    def flush(self):
        if not self.broken:
            try:
                self.stream.flush()
            except BrokenPipeError:
                self._drop()

    def isatty(self):
        return not self.broken and self.stream.isatty()

    def fileno(self):
        return self.stream.fileno()
