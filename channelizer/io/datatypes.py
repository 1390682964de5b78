"""SigMF sample datatypes: the strict grammar, and scaling to and from complex64.

A datatype string names how one sample is stored: ``c`` (complex, I then Q) or
``r`` (real), then the component type, then the byte order for types wider than
one byte. The grammar, from the SigMF specification (``core:datatype``), is::

    (c|r)(f32|f64|i32|i16|u32|u16)(_le|_be)   or   (c|r)(i8|u8)

The SigMF JSON schema accepts looser strings (``ci16`` without byte order,
``ci8_le``); :func:`parse_datatype` does not.

Scaling (common practice; the convention this tool uses everywhere):

- signed integers of ``b`` bits map to [-1, 1) by full scale: ``x / 2**(b-1)``;
- unsigned integers (offset binary) are centred on ``2**(b-1) - 0.5`` and
  divided by the same amount, so ``cu8`` becomes ``(x - 127.5) / 127.5`` and
  covers [-1, 1] symmetrically (the other convention in use, ``(x - 128) / 128``,
  is *not* the one used here);
- floating-point values are taken as they are.
"""

import dataclasses
import re

import numpy as np

from ..errors import ChannelizerError, shown

__all__ = ["Datatype", "parse_datatype", "to_complex64", "from_complex64", "DATATYPE_EXAMPLES"]

DATATYPE_EXAMPLES = ("ci16_le", "cf32_le", "ci8", "cu8", "ci32_le", "cf64_le", "rf32_be")

_GRAMMAR = re.compile(r"^(?P<cr>[cr])(?:(?P<wide>(?:f32|f64|i32|i16|u32|u16))_(?P<order>le|be)|(?P<byte>i8|u8))$")


@dataclasses.dataclass(frozen=True)
class Datatype:
    """One SigMF sample datatype.

    Attributes
    ----------
    name : str
        The datatype string, e.g. ``'ci16_le'``.
    is_complex : bool
        True for ``c`` types (two components per sample, I then Q).
    kind : str
        ``'f'`` (IEEE float), ``'i'`` (two's complement) or ``'u'`` (offset binary).
    bits : int
        Bits per component.
    byteorder : str
        ``'<'``, ``'>'``, or ``'|'`` for one-byte components.
    numpy_dtype : numpy.dtype
        The dtype of one component as stored in the file.
    itemsize : int
        Bytes per sample (both components for complex types).
    """

    name: str
    is_complex: bool
    kind: str
    bits: int
    byteorder: str
    numpy_dtype: np.dtype
    itemsize: int

    @property
    def is_integer(self):
        """True for the fixed-point kinds ``'i'`` and ``'u'``."""
        return self.kind in ("i", "u")


def parse_datatype(text):
    """Parse a SigMF datatype string under the strict grammar.

    Parameters
    ----------
    text : str
        E.g. ``'ci16_le'``, ``'cf32_le'``, ``'cu8'``.

    Returns
    -------
    Datatype

    Raises
    ------
    ChannelizerError
        When ``text`` does not follow ``(c|r)(f32|f64|i32|i16|u32|u16)(_le|_be)``
        or ``(c|r)(i8|u8)`` exactly (lower case, byte order required for types
        wider than 8 bits and forbidden for 8-bit types).

    References
    ----------
    SigMF specification, Global object, ``core:datatype``.
    """
    m = _GRAMMAR.match(text) if isinstance(text, str) else None
    if m is None and isinstance(text, str) and _GRAMMAR.match(text + "_le"):
        raise ChannelizerError(
            f"datatype {shown(text)} is not a SigMF datatype: it needs its byte order, {text}_le (little-endian,"
            f" the usual) or {text}_be; e.g. {', '.join(DATATYPE_EXAMPLES)}"
        )
    if m is None:
        raise ChannelizerError(
            f"datatype {shown(text)} is not a SigMF datatype; expected (c|r) + (f32|f64|i32|i16|u32|u16)"
            f" + (_le|_be), or (c|r) + (i8|u8), e.g. {', '.join(DATATYPE_EXAMPLES)}"
        )
    body = m.group("wide") or m.group("byte")
    kind, bits = body[0], int(body[1:])
    if m.group("byte"):
        byteorder = "|"
    else:
        byteorder = "<" if m.group("order") == "le" else ">"
    numpy_dtype = np.dtype(f"{kind}{bits // 8}").newbyteorder(byteorder if bits > 8 else "=")
    is_complex = m.group("cr") == "c"
    return Datatype(
        name=text,
        is_complex=is_complex,
        kind=kind,
        bits=bits,
        byteorder=byteorder,
        numpy_dtype=numpy_dtype,
        itemsize=(2 if is_complex else 1) * bits // 8,
    )


def _as_datatype(datatype):
    return datatype if isinstance(datatype, Datatype) else parse_datatype(datatype)


def _interleaved(raw):
    """The flat I, Q, I, Q, ... view of a (n, 2) or even-length 1-D array."""
    raw = np.asarray(raw)
    if raw.ndim == 2 and raw.shape[1] == 2:
        return np.ascontiguousarray(raw).reshape(-1)
    if raw.ndim == 1 and raw.size % 2 == 0:
        return np.ascontiguousarray(raw)
    raise ValueError(f"expected interleaved components of shape (2n,) or (n, 2), got shape {raw.shape}")


def to_complex64(raw, datatype, *, out=None):
    """Convert stored components to complex64 samples with the tool's scaling.

    Parameters
    ----------
    raw : numpy.ndarray
        Components as stored, interleaved I, Q: shape ``(2n,)`` or ``(n, 2)``, of
        the datatype's kind and width (either byte order).
    datatype : Datatype or str
        A complex datatype.
    out : numpy.ndarray, optional
        A contiguous complex64 array of ``n`` samples to write into.

    Returns
    -------
    numpy.ndarray
        ``n`` complex64 samples (``out`` when given, else a new array).

    Notes
    -----
    Signed integers are divided by ``2**(bits-1)``; unsigned ones become
    ``(x - c) / c`` with ``c = 2**(bits-1) - 0.5`` (common practice; see the
    module docstring). Components of up to 16 bits are converted straight to
    float32 (exact for the integer values, one rounding for the division), so no
    float64 temporary is made; 32-bit integers go through float64 to keep small
    values near the centre exact.
    """
    dt = _as_datatype(datatype)
    if not dt.is_complex:
        raise ChannelizerError(f"datatype {dt.name!r} is real; only complex (c...) IQ samples are processed")
    flat = _interleaved(raw)
    if flat.dtype.kind != dt.kind or flat.dtype.itemsize * 8 != dt.bits:
        raise TypeError(f"components of dtype {flat.dtype} do not match datatype {dt.name!r}")
    if out is None:
        out = np.empty(flat.size // 2, dtype=np.complex64)
    elif out.dtype != np.complex64 or out.shape != (flat.size // 2,) or not out.flags.c_contiguous:
        raise ValueError(f"out: expected a contiguous complex64 array of {flat.size // 2} samples, "
                         f"got {out.dtype} of shape {out.shape}")
    parts = out.view(np.float32)
    half = 2.0 ** (dt.bits - 1)
    if dt.kind == "f":
        with np.errstate(over="ignore"):  # f64 beyond float32 range becomes inf, caught downstream
            parts[...] = flat
    elif dt.bits <= 16:
        if dt.kind == "i":
            np.multiply(flat, np.float32(1.0 / half), out=parts)
        else:
            centre = np.float32(half - 0.5)
            np.subtract(flat, centre, out=parts)
            np.divide(parts, centre, out=parts)
    else:
        if dt.kind == "i":
            parts[...] = flat * (1.0 / half)
        else:
            centre = half - 0.5
            parts[...] = (flat - centre) / centre
    return out


def from_complex64(samples, datatype):
    """Quantize complex samples to stored components, inverse of :func:`to_complex64`.

    Parameters
    ----------
    samples : numpy.ndarray
        Complex samples, 1-D.
    datatype : Datatype or str
        A complex datatype.

    Returns
    -------
    components : numpy.ndarray
        Shape ``(2n,)``, interleaved I, Q, in the datatype's stored dtype (byte
        order included), ready for ``tobytes()``; a view of ``samples`` where they
        already are in that dtype.
    clipped : int
        Number of samples with a component outside the integer range (saturated)
        or NaN (stored as 0); always 0 for float datatypes.

    Notes
    -----
    Integers: scale by the inverse of :func:`to_complex64`, round half to even
    (``numpy.rint``), saturate to the type's range. Floats: cast.
    """
    dt = _as_datatype(datatype)
    if not dt.is_complex:
        raise ChannelizerError(f"datatype {dt.name!r} is real; only complex (c...) IQ samples are written")
    samples = np.ascontiguousarray(samples)
    if samples.ndim != 1 or samples.dtype.kind != "c":
        raise TypeError(f"expected 1-D complex samples, got {samples.dtype} of shape {samples.shape}")
    if dt.kind == "f":
        work = samples.astype(np.complex64 if dt.bits == 32 else np.complex128, copy=False)
        # no copy where the samples are already stored as asked (cf32_le from complex64 here)
        return work.view(work.real.dtype).astype(dt.numpy_dtype, copy=False), 0
    ftype = np.float32 if dt.bits <= 16 else np.float64
    source = samples.astype(np.complex64 if ftype is np.float32 else np.complex128, copy=False)
    half = 2.0 ** (dt.bits - 1)
    parts = np.empty(2 * source.size, dtype=ftype)
    if dt.kind == "i":
        np.multiply(source.view(ftype), ftype(half), out=parts)
        lo, hi = -half, half - 1
    else:
        np.multiply(source.view(ftype), ftype(half - 0.5), out=parts)
        parts += ftype(half - 0.5)
        lo, hi = 0.0, 2.0 * half - 1
    np.rint(parts, out=parts)
    clipped = 0
    if parts.size and not (parts.min() >= lo and parts.max() <= hi):  # NaN fails both tests
        bad = (parts < lo) | (parts > hi)
        nan = np.isnan(parts)
        bad |= nan
        parts[nan] = 0.0 if dt.kind == "i" else half
        clipped = int(np.count_nonzero(bad[0::2] | bad[1::2]))  # per sample: either component
        np.clip(parts, lo, hi, out=parts)
    return parts.astype(dt.numpy_dtype), clipped
