"""Cutting a capture into chunks in time whose outputs equal the single pass's.

A chunk's outputs are exactly the samples one pass gives for its span when
(common practice for block-parallel FIR filtering; see methods.md, "Chunked
parallel filtering"):

* the chunk starts at a multiple of the chain's *period*: the least input count
  ``P`` that brings every stage's input to a multiple of that stage's own period
  (``D`` for a decimator, ``M / gcd(L, M)`` for a resampler ``L/M``), so the
  chunk's output grid is the pass's grid at every stage;
* the chunk is preceded by a *pre-roll* of at least the chain's memory, the sum
  over stages of ``len(h) - 1`` scaled to the input rate, rounded up to a
  multiple of ``P``: the outputs of the pre-roll are computed on zero history and
  thrown away, those of the chunk see the same inputs as in the pass;
* the mixer's phase at the chunk's first input ``n0`` is ``2 pi f n0 / fs``
  computed exactly from the integer index (the float runners' ``start_index``,
  the integer NCO's phase word ``n0 w mod 2**B``), never accumulated.

Overlap costs ``pre-roll / chunk length`` of extra work per chunk.
"""

from dataclasses import dataclass
from fractions import Fraction
import math

from ..errors import ChannelizerError
from ..planning.stages import CicStage, ResamplerStage

__all__ = ["ChunkLayout", "aligned_block_size", "balanced_chunk_blocks", "chain_memory", "chain_period", "chunk_layout",
           "output_ratio"]


def _stage_period(st):
    if isinstance(st, ResamplerStage):
        return st.decimation // math.gcd(st.interpolation, st.decimation)
    return st.decimation


def _stage_memory(st):
    """Input samples of the stage's memory (``len(h) - 1``, at its input rate)."""
    if isinstance(st, CicStage):
        return st.order * (st.decimation * st.differential_delay - 1)
    if isinstance(st, ResamplerStage):
        return Fraction(len(st.taps) - 1, st.interpolation)
    return len(st.taps) - 1


def output_ratio(stages):
    """Output rate over input rate of a chain, exact."""
    r = Fraction(1)
    for st in stages:
        r *= Fraction(st.interpolation, st.decimation)
    return r


def chain_period(stages):
    """Least input count ``P`` after which every stage is back on its own grid.

    ``N r_i / p_i`` must be whole for every stage ``i`` (``r_i`` its input rate
    over the chain's, ``p_i`` its period), so ``P`` is the least common multiple
    of the denominators of ``r_i / p_i``.

    Examples
    --------
    A length-12 sequence decimated by 2 then 3 gives 2 samples; the chain's
    period is 6 (common practice).
    """
    period, r = 1, Fraction(1)
    for st in stages:
        period = math.lcm(period, (r / _stage_period(st)).denominator)
        r *= Fraction(st.interpolation, st.decimation)
    return period


def chain_memory(stages):
    """Input samples before an output that it depends on: ``sum_i (len(h_i) - 1) / r_i``, rounded up."""
    total, r = Fraction(0), Fraction(1)
    for st in stages:
        total += _stage_memory(st) / r
        r *= Fraction(st.interpolation, st.decimation)
    return math.ceil(total)


def aligned_block_size(chains, block_size):
    """``block_size`` rounded down to a multiple of every chain's period (at least one period).

    A pass in such blocks can be cut into chunks of whole blocks (see
    :func:`chunk_layout`) whose outputs are the pass's bit for bit.
    """
    period = math.lcm(*(chain_period(tuple(c)) for c in chains))
    return max(period, block_size // period * period)


@dataclass(frozen=True)
class ChunkLayout:
    """Chunks of one capture for a set of chains.

    Attributes
    ----------
    period : int
        Common period of every channel's chain (chunk starts are multiples of it).
    preroll : int
        Input samples fed before each chunk (a multiple of ``period``).
    chunks : tuple of (int, int)
        ``(start, stop)`` input ranges; together they cover the capture once.
    on_block_grid : bool
        The chunks and the pre-roll are whole blocks of the single pass: every
        runner then sees, from the chunk's start on, the very calls of the
        pass, and the float outputs are the pass's bit for bit.
    """

    period: int
    preroll: int
    chunks: tuple
    on_block_grid: bool = False

    @property
    def overlap_cost(self):
        """Extra input processed over the capture's: every chunk but the first reads a pre-roll
        (about ``preroll / chunk length``)."""
        return self.preroll * (len(self.chunks) - 1) / max(1, self.chunks[-1][1])


def chunk_layout(chains, total, *, chunk_samples, block_size=None):
    """Chunks of ``total`` input samples for every chain of ``chains`` (stage sequences).

    With ``block_size`` (the single pass's block) a multiple of the period and at
    least the chains' memory, chunks are whole blocks and the pre-roll is one
    block, so that each runner's calls coincide with the pass's (float rounding
    included); otherwise ``chunk_samples`` is rounded up to a multiple of the
    period and the pre-roll is the memory rounded up to one.  The last chunk
    ends at ``total`` (its outputs then follow the emission rule of the single
    pass, ``floor(N L / M)``).
    """
    chains = [tuple(c) for c in chains]
    if not chains or total < 0:
        raise ChannelizerError(f"chunk layout needs chains and a non-negative length, got {len(chains)} and {total}")
    if isinstance(chunk_samples, bool) or not isinstance(chunk_samples, int) or chunk_samples < 1:
        raise ChannelizerError(f"chunk_samples must be a positive whole number, got {chunk_samples!r}")
    period = math.lcm(*(chain_period(c) for c in chains))
    memory = max(chain_memory(c) for c in chains)
    grid = block_size is not None and block_size % period == 0 and block_size >= memory
    unit = block_size if grid else period
    preroll = block_size if grid else -(-memory // period) * period
    size = -(-chunk_samples // unit) * unit
    chunks = tuple((s, min(total, s + size)) for s in range(0, max(total, 1), size))
    return ChunkLayout(period=period, preroll=preroll, chunks=chunks, on_block_grid=bool(grid))


def balanced_chunk_blocks(total_blocks, *, workers, max_blocks=64):
    """Blocks per chunk that finish a capture of ``total_blocks`` soonest on ``workers``.

    Every chunk but the first also runs a pre-roll of one block (see
    :func:`chunk_layout`), and chunks go to the workers in rounds, so with ``c``
    blocks per chunk the busiest worker runs about ``ceil(ceil(B / c) / W)``
    chunks of ``c + 1`` blocks.  The smallest ``c`` up to ``max_blocks`` that
    minimises that span is returned: fewer, longer chunks spend less on
    pre-rolls, and a chunk count that is a multiple of the workers keeps them
    all busy to the end.  ``max_blocks`` keeps chunks short enough that a
    retried chunk or a slow worker costs little.

    Examples
    --------
    235 blocks on 2 workers: 16-block chunks make 15 chunks, 8 on one worker
    (136 blocks with pre-rolls); 59-block chunks make 4, two on each (120).
    """
    for name, v in (("total_blocks", total_blocks), ("workers", workers), ("max_blocks", max_blocks)):
        if isinstance(v, bool) or not isinstance(v, int) or v < (0 if name == "total_blocks" else 1):
            raise ChannelizerError(f"{name} must be a whole number{' >= 1' if name != 'total_blocks' else ''}, got {v!r}")
    if total_blocks <= 1:
        return 1

    def span(c):
        chunks = -(-total_blocks // c)
        return -(-chunks // workers) * (c + 1)

    return min(range(1, min(max_blocks, total_blocks) + 1), key=lambda c: (span(c), c))
