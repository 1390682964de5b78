"""A one-line progress bar on stderr, shown only on a terminal."""

import sys
import time

__all__ = ["ProgressBar"]


class ProgressBar:
    """A one-line progress bar on stderr, shown only on a terminal."""

    def __init__(self, total, *, enabled=None, label="", stream=None):
        self.stream = stream or sys.stderr
        self.enabled = (self.stream.isatty() if enabled is None else enabled) and total > 0
        self.total = total
        self.label = label
        self.start = time.monotonic()
        self.last = 0.0

    def update(self, done):
        if not self.enabled:
            return
        now = time.monotonic()
        if now - self.last < 0.2 and done < self.total:
            return
        self.last = now
        frac = min(done / self.total, 1.0)
        rate = done / max(now - self.start, 1e-9)
        bar = "#" * int(frac * 30)
        self.stream.write(f"\r{self.label} [{bar:<30}] {frac * 100:5.1f}% {rate / 1e6:7.2f} Msps")
        self.stream.flush()

    def close(self):
        if self.enabled:
            self.stream.write("\n")
            self.stream.flush()
