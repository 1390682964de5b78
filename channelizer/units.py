"""Parsing and formatting of rates and frequencies with SI suffixes."""

import math
import re

from .errors import ChannelizerError

__all__ = ["parse_frequency", "format_hz", "resolution_step", "check_rate_range", "MIN_HZ", "MAX_HZ"]

#: Rates and frequencies the tool works with: far inside float64, so that the products
#: and quotients of rates in a chain neither underflow to 0 nor overflow.
MIN_HZ = 1e-3
MAX_HZ = 1e13


def check_rate_range(value, name):
    """Refuse a rate outside ``MIN_HZ`` to ``MAX_HZ`` (``name`` says which), e.g. 5e-324 Hz."""
    if not MIN_HZ <= value <= MAX_HZ:
        raise ChannelizerError(f"{name} {value:g} Hz is outside the {MIN_HZ:g} to {MAX_HZ:g} Hz this tool works in")
    return value

_SUFFIX = {"": 1.0, "k": 1e3, "K": 1e3, "M": 1e6, "G": 1e9}
_NUMBER = re.compile(
    r"^\s*(?P<num>[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*(?P<suf>[kKMG]?)\s*(?:Hz|hz|sps|SPS)?\s*$"
)


def parse_frequency(text, *, name="frequency", allow_negative=True):
    """Read a rate or frequency in Hz: ``61.44M``, ``200k``, ``1.5e6``, ``-25k``.

    Parameters
    ----------
    text : str or float
        The value; a suffix k, M or G multiplies by 1e3, 1e6 or 1e9.
    name : str
        What the value is, for the error message.
    allow_negative : bool
        Whether a value below zero is accepted.

    Returns
    -------
    float
        The value in Hz.

    Raises
    ------
    ChannelizerError
        When the text is not a finite number with an optional suffix.
    """
    if isinstance(text, bool):
        raise ChannelizerError(f"{name}: expected a number, got {text!r}")
    if isinstance(text, (int, float)):
        value = float(text)
    else:
        m = _NUMBER.match(str(text))
        if not m:
            raise ChannelizerError(
                f"{name}: {text!r} is not a number (examples: 61.44M, 200k, 1.5e6)"
            )
        value = float(m.group("num")) * _SUFFIX[m.group("suf")]
    if not math.isfinite(value):
        raise ChannelizerError(f"{name}: {text!r} is not finite")
    if not allow_negative and value < 0:
        raise ChannelizerError(f"{name}: {text!r} must not be negative")
    return value


def resolution_step(resolution):
    """The power of ten at or below ``resolution`` Hz: the last digit a measurement at
    that resolution can state (``resolution_step(293.0) == 100.0``)."""
    resolution = float(resolution)
    if not (resolution > 0 and math.isfinite(resolution)):
        raise ChannelizerError(f"resolution: {resolution!r} must be a positive finite number of Hz")
    return 10.0 ** math.floor(math.log10(resolution))


def format_hz(value, unit="Hz", digits=6, *, resolution=None, signed=False):
    """Format a value in Hz with an SI prefix: ``format_hz(61.44e6) == '61.44 MHz'``.

    With ``resolution`` (Hz), the value is printed to the digit that resolution
    gives (see :func:`resolution_step`), trailing zeros kept:
    ``format_hz(161.1625e6, resolution=293) == '161.1625 MHz'``.  With ``signed``,
    a positive value gets a ``+`` (offsets: ``'+100 kHz'``).
    """
    value = float(value)
    mag = abs(value)
    scale, prefix = next(((s, p) for s, p in ((1e9, "G"), (1e6, "M"), (1e3, "k")) if mag >= s), (1.0, ""))
    sign = "+" if signed else ""
    if resolution is not None:
        decimals = max(0, round(math.log10(scale / resolution_step(resolution))))
        return f"{value / scale:{sign}.{decimals}f} {prefix}{unit}"
    return f"{value / scale:{sign}.{digits}g} {prefix}{unit}"
