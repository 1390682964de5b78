"""Coefficient quantisation: FIR taps as integers with a binary point.

Choosing a coefficient width and rounding the taps to it is part of planning a chain
for hardware; the integer stages in :mod:`channelizer.dsp.fixedpoint` run what this
module produces.
"""

from dataclasses import dataclass
import math

import numpy as np

from ..errors import ChannelizerError
from .hogenauer import _checked_int as _int

__all__ = ["QuantizedTaps", "quantize_taps"]


def _read_only(a):
    a = np.array(a, dtype=np.int64, copy=True)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, eq=False)
class QuantizedTaps:
    """FIR coefficients as integers with a binary point.

    The real coefficient ``k`` is ``integers[k] / 2**frac_bits``; every integer
    fits ``bits``-bit two's complement.

    Attributes
    ----------
    integers : ndarray of int64
        Read-only.
    frac_bits : int
    bits : int
    """

    integers: np.ndarray
    frac_bits: int
    bits: int

    def __post_init__(self):
        object.__setattr__(self, "integers", _read_only(self.integers))

    @property
    def values(self):
        """The coefficients the integers stand for, as float64."""
        return self.integers / 2.0**self.frac_bits


def quantize_taps(taps, bits):
    """Round FIR coefficients to ``bits``-bit integers with the most fraction bits.

    Parameters
    ----------
    taps : array_like of float
        Real coefficients, not all zero.
    bits : int
        Two's-complement width of each coefficient, 2 to 32.

    Returns
    -------
    QuantizedTaps
        ``frac_bits`` is the largest value for which every ``round(h * 2**frac_bits)``
        lies in ``[-2**(bits-1), 2**(bits-1) - 1]``.

    Notes
    -----
    Rounding is to nearest, ties to even (``numpy.rint``), which is odd-symmetric,
    so a coefficient and its negative round to negatives.  A filter whose taps are
    symmetric (or antisymmetric) to within a few ulps is made exactly so before
    rounding, so the integer taps keep the linear phase exactly.
    """
    bits = _int(bits, "coefficient bits", low=2, high=32)
    h = np.asarray(taps)
    if h.ndim != 1 or h.size == 0:
        raise ChannelizerError(f"taps must be a non-empty 1-D array, got shape {h.shape}")
    if not np.issubdtype(h.dtype, np.floating) and not np.issubdtype(h.dtype, np.integer):
        raise ChannelizerError(f"taps must be real numbers, got dtype {h.dtype}")
    h = h.astype(np.float64)
    if not np.all(np.isfinite(h)):
        raise ChannelizerError("taps contain a NaN or infinite value")
    peak = float(np.max(np.abs(h)))
    if peak == 0.0:
        raise ChannelizerError("taps are all zero")
    tol = 16 * np.finfo(np.float64).eps * peak
    rev = h[::-1]
    if np.all(np.abs(h - rev) <= tol):
        h = (h + rev) / 2  # IEEE addition commutes: the result is exactly symmetric
    elif np.all(np.abs(h + rev) <= tol):
        h = (h - rev) / 2  # and a - b == -(b - a): exactly antisymmetric
    hi, lo = 2 ** (bits - 1) - 1, -(2 ** (bits - 1))

    def fits(f):
        q = np.rint(np.ldexp(h, f))
        return q.max() <= hi and q.min() >= lo

    f = bits - math.frexp(peak)[1] + 1  # peak * 2**f >= 2**(bits-1): one too many
    while not fits(f):
        f -= 1
    if f < 0:
        raise ChannelizerError(
            f"taps up to {peak:g} do not fit {bits}-bit integers without negative fraction bits"
        )
    return QuantizedTaps(np.rint(np.ldexp(h, f)).astype(np.int64), f, bits)
