"""Blocks read one ahead of their consumer, on a second thread.

A pass over a capture spends its time in two kinds of work: reading and
converting the next block (and, for the alias audit, transforming a few
segments of it), and running every channel's chain on the current one.  Both
are numpy calls that release the interpreter lock for most of their time (file
reads, dtype conversion, ``numpy.fft``, BLAS products), so the first can run on
a second core while the second runs on the first.  Running whole chains on
several threads did not pay (see :class:`channelizer.engines.float_chain.ChannelBank`):
their stages hold the lock in many short steps.  Reading ahead splits the work
at one seam only, once per block.

The blocks come out in order and unchanged, and ``side`` sees every block in
order, once, before the consumer gets it; so the results do not depend on the
thread (the tests compare with a pass that reads in line).
"""

from concurrent.futures import ThreadPoolExecutor

import numpy as np

__all__ = ["read_ahead"]


def read_ahead(blocks, side=None):
    """Yield the items of ``blocks``, each fetched (and passed to ``side``) on a second thread.

    Parameters
    ----------
    blocks : iterable
        Blocks to read; iterated on the second thread only, one step at a time.
    side : callable, optional
        Called with each block on the second thread, in order, before the block
        is yielded (e.g. an accumulator of the input spectrum).  It must not
        modify the block.

    Yields
    ------
    object
        The items of ``blocks``, in order.  At most two are alive at a time: the
        one yielded and the one being read.

    Notes
    -----
    An exception raised while reading or in ``side`` is raised here, at the
    block it concerns; a consumer that stops early leaves nothing running.
    The second thread follows numpy's floating-point error settings in force
    where iteration starts (:func:`numpy.errstate` holds for one thread only).
    """
    it = iter(blocks)
    done = object()
    errors = np.geterr()

    def fetch():
        with np.errstate(**errors):
            block = next(it, done)
            if block is not done and side is not None:
                side(block)
        return block

    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="channelizer-read") as pool:
        pending = pool.submit(fetch)
        while True:
            block = pending.result()
            if block is done:
                return
            pending = pool.submit(fetch)
            yield block
