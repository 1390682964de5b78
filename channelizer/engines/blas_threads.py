"""OpenBLAS's thread count around the float engine's block products.

The float engine cuts its matrix products by whether OpenBLAS runs them on one
thread (:mod:`channelizer.engines.streaming`): large pieces on one thread, small
ones otherwise, because OpenBLAS's own threads stalled the many products of a pass
on a busy 2-core machine.  OpenBLAS reads ``OPENBLAS_NUM_THREADS`` once, when numpy
loads it, so ``import channelizer`` sets it to 1 before numpy where it comes first.

Where numpy came first (a notebook, a program that uses numpy itself), OpenBLAS
already chose its count.  Then each product runs with the count set to one for its
duration, through OpenBLAS's ``openblas_set_num_threads_local`` (it returns the count
it replaces, which is put back after), found in the OpenBLAS library the process
has loaded; the products are then cut as on one thread.  Where that function is not
found (another BLAS, or an OpenBLAS without it) the products are cut small, as on
several threads.

``import channelizer`` records which case holds in ``CHANNELIZER_BLAS_THREADS``
(``each-product`` or ``several``; unset when OpenBLAS started on one thread), so that
the processes a distributed run starts cut their products as the parent does and
their outputs equal one process's bit for bit.

References
----------
OpenBLAS documentation, "Runtime variables" and the ``openblas_set_num_threads``
family of the extension API (from memory).
"""

import os
import threading

__all__ = ["MARK", "EACH_PRODUCT", "SEVERAL", "find_thread_setter", "mark_numpy_came_first", "OneThread"]

#: Environment variable carrying the case to child processes.
MARK = "CHANNELIZER_BLAS_THREADS"
#: numpy came first; each product sets OpenBLAS to one thread while it runs.
EACH_PRODUCT = "each-product"
#: numpy came first and the count cannot be set: products cut as on several threads.
SEVERAL = "several"

_FOUND = []  # [setter or None], once looked up


def _loaded_libraries():
    """Paths of the shared libraries this process has mapped (Linux), or None where that cannot be read."""
    try:
        with open("/proc/self/maps", encoding="utf-8", errors="replace") as fh:
            lines = fh.readlines()
    except OSError:
        return None
    paths = []
    for line in lines:
        parts = line.split(None, 5)
        if len(parts) == 6 and parts[5].strip().startswith("/"):
            paths.append(parts[5].strip())
    return list(dict.fromkeys(paths))


def find_thread_setter():
    """OpenBLAS's ``openblas_set_num_threads_local`` as a ctypes function, or None.

    Looked up in the OpenBLAS libraries the process has loaded, numpy's own first
    (scipy's wheels load another copy); where the process's libraries cannot be
    listed, in those numpy's wheel ships beside it.  The result is kept for the life
    of the process.
    """
    if _FOUND:
        return _FOUND[0]
    import ctypes  # only where numpy came first: the usual start-up does without it
    import glob

    paths = _loaded_libraries()
    if paths is None:
        import numpy as np

        pkg = os.path.dirname(np.__file__)
        paths = sorted(glob.glob(os.path.join(pkg, "..", "numpy.libs", "*openblas*"))
                       + glob.glob(os.path.join(pkg, ".dylibs", "*openblas*")))
    paths = [p for p in paths if "openblas" in os.path.basename(p).lower()]
    # numpy's own copy first (scipy's wheels carry another one, which our products never use)
    paths.sort(key=lambda p: "numpy" not in p)
    setter = None
    for path in paths:
        try:
            fn = ctypes.CDLL(path).openblas_set_num_threads_local
        except (OSError, AttributeError):
            continue
        fn.restype, fn.argtypes = ctypes.c_int, [ctypes.c_int]
        setter = fn
        break
    _FOUND.append(setter)
    return setter


def mark_numpy_came_first():
    """Record in ``CHANNELIZER_BLAS_THREADS`` how the engines run, numpy having loaded OpenBLAS first."""
    os.environ[MARK] = EACH_PRODUCT if find_thread_setter() is not None else SEVERAL


class OneThread:
    """Context: OpenBLAS on one thread inside, its count put back after the last one leaves.

    A no-op when ``setter`` is None.  Nested and concurrent uses share one saved count
    (the first to enter saves it, the last to leave restores it).
    """

    def __init__(self, setter):
        self._set = setter
        self._lock = threading.Lock()
        self._depth = 0
        self._saved = None

    def __enter__(self):
        if self._set is not None:
            with self._lock:
                if self._depth == 0:
                    self._saved = self._set(1)
                self._depth += 1
        return self

    def __exit__(self, *exc):
        if self._set is not None:
            with self._lock:
                self._depth -= 1
                if self._depth == 0:
                    self._set(self._saved)
        return False
