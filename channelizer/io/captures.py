"""Reading IQ captures: SigMF recordings, two-channel WAV files and raw files.

:func:`open_capture` looks at the file name, reads and checks the metadata, and
returns a :class:`Capture`, which reads samples with bounds-checked reads (no
memory map, see :mod:`channelizer.io.sample_reader`), block by block, as complex64
(float path) or as stored integers (bit-true path).

- ``X.sigmf-meta``, ``X.sigmf-data`` or ``X.sigmf``: a SigMF recording (the pair
  ``X.sigmf-meta`` + ``X.sigmf-data``; archives are not read, unpack them first).
- ``X.wav``: I in the left channel, Q in the right (common practice), 16-bit PCM
  or 32-bit IEEE float, RIFF or RF64.
- anything else: raw interleaved samples; the datatype (``input_format``) and
  the sample rate (``rate``) must be given.

Inputs are never opened for writing.
"""

import dataclasses
import json
import math
import operator
import os
from pathlib import Path
from typing import Literal, get_args

import numpy as np

from .datatypes import Datatype, parse_datatype, to_complex64
from ..errors import shown
from ..errors import ChannelizerError
from .sample_reader import SampleFile
from ..units import check_rate_range, format_hz, parse_frequency

__all__ = ["Capture", "open_capture", "NonfiniteMode"]

NonfiniteMode = Literal["error", "zero"]

_META_EXT = ".sigmf-meta"
_DATA_EXT = ".sigmf-data"
_ARCHIVE_EXT = ".sigmf"

#: Samples read and converted at a time within a block (512 KiB of ci16, 1 MiB as complex64).
#: Reading a whole block of 2**20 ci16 samples first and converting it after runs the stored
#: components out of the core's cache and back; in pieces they stay in it.  Measured on 4 s
#: of 61.44 Msps, two channels, 2-core x86: the pass on one thread 0-3 % quicker, two
#: processes side by side (the dask split) about 10 % quicker, pieces of 2**16 or 2**17 alike.
CONVERT_PIECE = 1 << 17


def _check_mode(nonfinite):
    if nonfinite not in get_args(NonfiniteMode):
        raise ValueError(f"nonfinite={nonfinite!r}; expected one of {', '.join(map(repr, get_args(NonfiniteMode)))}")


@dataclasses.dataclass(eq=False)
class Capture:
    """An opened IQ capture.

    Attributes
    ----------
    path : pathlib.Path
        The path the capture was opened by.
    data_path : pathlib.Path
        The file holding the samples.
    sample_rate : float
        Samples per second.
    center_frequency : float or None
        Centre frequency in Hz, when known.
    datatype : Datatype
        How samples are stored (always complex).
    num_samples : int
        Number of complex samples.
    data_offset : int
        Byte offset of the first sample in ``data_path``.
    metadata : dict
        The SigMF ``global`` object, or ``{}`` for WAV and raw files.
    container : str
        ``'sigmf'``, ``'wav'`` or ``'raw'``.
    nonfinite_count : int
        Samples replaced by 0 so far under ``nonfinite='zero'``.
    """

    path: Path
    data_path: Path
    sample_rate: float
    center_frequency: float | None
    datatype: Datatype
    num_samples: int
    data_offset: int
    metadata: dict = dataclasses.field(default_factory=dict)
    container: str = "raw"
    nonfinite_count: int = 0
    #: ``core:datetime`` of the first capture segment (time of sample 0), when stated.
    start_datetime: str | None = None
    _map: np.ndarray | None = dataclasses.field(default=None, init=False, repr=False)

    def __post_init__(self):
        # e.g. core:sample_rate 5e-324: positive and finite, but every later quotient overflows
        try:
            check_rate_range(self.sample_rate, "sample rate")
        except ChannelizerError as exc:
            raise ChannelizerError(f"{self.path}: {exc}") from None

    @property
    def duration(self):
        """Length of the capture in seconds."""
        return self.num_samples / self.sample_rate

    # -- access -----------------------------------------------------------------------------------

    def _components(self):
        """The stored components, sliceable like an array of shape (num_samples, 2)."""
        if self._map is None:
            expected = self.data_offset + self.num_samples * self.datatype.itemsize
            try:
                size = os.stat(self.data_path).st_size
            except OSError as exc:
                raise ChannelizerError(f"{self.data_path}: cannot read: {exc.strerror}") from None
            if size < expected:
                raise ChannelizerError(
                    f"{self.data_path}: the file is {size} bytes, {expected} expected; it changed after opening"
                )
            # read with bounds checks, not a memory map: a file truncated by another program
            # during the run gives an error line, not SIGBUS (channelizer.io.sample_reader)
            self._map = SampleFile(self.data_path, self.datatype.numpy_dtype, self.data_offset, self.num_samples)
        return self._map

    def close(self):
        """Close the sample file (it is opened again on the next read)."""
        if self._map is not None:
            self._map.close()
        self._map = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def _span(self, start, stop):
        start = operator.index(start)
        stop = self.num_samples if stop is None else operator.index(stop)
        if not 0 <= start <= stop <= self.num_samples:
            raise ChannelizerError(
                f"{self.path}: sample range {start}..{stop} is outside the capture (0..{self.num_samples})"
            )
        return start, stop

    def check_finite(self, block, offset, *, nonfinite="error"):
        """Check a block of complex samples for NaN or infinity.

        Parameters
        ----------
        block : numpy.ndarray
            Complex samples; modified in place under ``nonfinite='zero'``.
        offset : int
            Index in the capture of ``block[0]``, for the message.
        nonfinite : {'error', 'zero'}
            Raise on the first non-finite sample, or replace each by 0 and add
            their number to :attr:`nonfinite_count`.

        Returns
        -------
        numpy.ndarray
            ``block``.
        """
        _check_mode(nonfinite)
        if block.dtype.kind == "c" and block.flags.c_contiguous:
            parts = block.view(block.real.dtype)  # one pass over the float components is fastest
        else:
            parts = block
        if np.isfinite(parts).all():
            return block
        bad = ~np.isfinite(block)
        if nonfinite == "error":
            first = int(offset) + int(np.argmax(bad))
            raise ChannelizerError(
                f"{self.path}: sample {first} is NaN or infinite (replace such samples by 0 with --zero-nonfinite)"
            )
        block[bad] = 0
        self.nonfinite_count += int(np.count_nonzero(bad))
        return block

    def blocks(self, block_size, *, start=0, stop=None, nonfinite="error"):
        """Iterate over the samples as complex64 blocks.

        Parameters
        ----------
        block_size : int
            Samples per block; every block has exactly this many except the last.
        start, stop : int
            Sample range (``stop=None``: to the end).
        nonfinite : {'error', 'zero'}
            What to do with NaN or infinite samples (see :meth:`check_finite`).

        Yields
        ------
        numpy.ndarray
            complex64 blocks, freshly allocated (read from the file, never written).
        """
        size = operator.index(block_size)
        if size < 1:
            raise ValueError(f"block_size={block_size!r}; expected a positive integer")
        start, stop = self._span(start, stop)
        _check_mode(nonfinite)
        return self._iter_blocks(self._components(), size, start, stop, nonfinite)

    def _iter_blocks(self, comps, size, start, stop, nonfinite):
        check = not self.datatype.is_integer
        for first in range(start, stop, size):
            last = min(first + size, stop)
            block = np.empty(last - first, dtype=np.complex64)
            # read and convert a piece at a time: the stored piece stays in the core's cache
            for a in range(first, last, CONVERT_PIECE):
                b = min(a + CONVERT_PIECE, last)
                to_complex64(comps[a:b], self.datatype, out=block[a - first : b - first])
            if check:
                self.check_finite(block, first, nonfinite=nonfinite)
            yield block

    def raw_blocks(self, block_size, *, start=0, stop=None):
        """Iterate over the stored integer components, for the bit-true path.

        Parameters
        ----------
        block_size : int
            Samples per block; every block has exactly this many except the last.
        start, stop : int
            Sample range (``stop=None``: to the end).

        Yields
        ------
        numpy.ndarray
            Shape ``(n, 2)`` (I, Q), the file's integer type in native byte order
            (e.g. int16 for ``ci16_be``, uint8 for ``cu8``), values as stored.

        Raises
        ------
        ChannelizerError
            When the capture holds floating-point samples.
        """
        if not self.datatype.is_integer:
            raise ChannelizerError(
                f"{self.path}: holds {self.datatype.name} floating-point samples; "
                "integer blocks need an integer datatype (ci8, cu8, ci16_le, ...)"
            )
        size = operator.index(block_size)
        if size < 1:
            raise ValueError(f"block_size={block_size!r}; expected a positive integer")
        start, stop = self._span(start, stop)
        comps = self._components()
        native = self.datatype.numpy_dtype.newbyteorder("=")

        def iterate():
            for first in range(start, stop, size):
                last = min(first + size, stop)
                block = np.array(comps[first:last], dtype=native)
                yield block

        return iterate()

    def read(self, start, count, *, nonfinite="error"):
        """Read ``count`` samples from ``start`` as complex64."""
        start = operator.index(start)
        count = operator.index(count)
        if count < 0:
            raise ChannelizerError(f"{self.path}: cannot read {count} samples")
        start, stop = self._span(start, start + count)
        _check_mode(nonfinite)
        block = to_complex64(self._components()[start:stop], self.datatype)
        if not self.datatype.is_integer:
            self.check_finite(block, start, nonfinite=nonfinite)
        return block


# -- opening ----------------------------------------------------------------------------------------


def open_capture(path, *, input_format=None, rate=None, center=None):
    """Open an IQ capture for reading.

    Parameters
    ----------
    path : str or os.PathLike
        ``X.sigmf-meta``, ``X.sigmf-data`` or ``X.sigmf`` (SigMF recording),
        ``X.wav`` (two-channel WAV), or a raw file of interleaved samples.
    input_format : str, optional
        SigMF datatype string (strict grammar). Required for raw files; for
        SigMF and WAV files it must agree with the file.
    rate : float or str, optional
        Sample rate in Hz (``'61.44M'`` accepted). Required for raw files; for
        SigMF and WAV files it must agree with the file, or supplies it when a
        SigMF recording has no ``core:sample_rate``.
    center : float or str, optional
        Centre frequency in Hz; must agree with a SigMF recording's
        ``core:frequency`` when that is present.

    Returns
    -------
    Capture

    Raises
    ------
    ChannelizerError
        One line naming the file and the problem: malformed metadata, unknown
        datatype, missing data file, a truncated last sample, no samples, an
        unsupported WAV layout, a missing option, an option contradicting the file.

    References
    ----------
    SigMF specification 1.x (sigmf.org): ``core:datatype``, ``core:sample_rate``,
    ``core:frequency``, Non-Conforming Datasets (``core:dataset``,
    ``core:header_bytes``, ``core:trailing_bytes``).
    Microsoft WAVEFORMATEX / WAVEFORMATEXTENSIBLE; EBU Tech 3306 (RF64).
    """
    path = Path(os.fspath(path))
    datatype = None
    if input_format is not None:
        try:
            datatype = parse_datatype(input_format)
        except ChannelizerError as exc:
            raise ChannelizerError(f"--input-format: {exc}") from None
    if rate is not None:
        rate = parse_frequency(rate, name="--rate", allow_negative=False)
        if rate <= 0:
            raise ChannelizerError(f"--rate: {rate!r} must be positive")
    if center is not None:
        center = parse_frequency(center, name="--center")
    options = (datatype, rate, center)

    lower = path.name.lower()
    for ext in (_META_EXT, _DATA_EXT):
        if lower.endswith(ext):
            return _open_sigmf(path, path.with_name(path.name[: -len(ext)]), *options)
    if lower.endswith(_ARCHIVE_EXT):
        base = path.with_name(path.name[: -len(_ARCHIVE_EXT)])
        if path.is_file() and not base.with_name(base.name + _META_EXT).is_file():
            raise ChannelizerError(
                f"{path}: SigMF archives are not read directly; unpack it (tar -xf) and open the .sigmf-meta file"
            )
        return _open_sigmf(path, base, *options)
    if lower.endswith(".wav"):
        from .wav import _open_wav  # wav builds on this module's Capture

        return _open_wav(path, *options)
    if not path.exists() and path.with_name(path.name + _META_EXT).is_file():
        return _open_sigmf(path, path, *options)
    return _open_raw(path, *options)


def _agree(file, what, option, option_value, file_value):
    """The file's value, checked against an option given for the same thing."""
    if option_value is None:
        return file_value
    if file_value is None:
        return option_value
    if math.isclose(option_value, file_value, rel_tol=1e-9, abs_tol=1e-6):
        return file_value
    raise ChannelizerError(
        f"{file}: {option} {format_hz(option_value, digits=12)} disagrees with the file's {what}"
        f" {format_hz(file_value, digits=12)}; leave {option} out or correct it"
    )


def _agree_datatype(file, option, found):
    if option is not None and option.name != found.name:
        raise ChannelizerError(
            f"{file}: --input-format {option.name} disagrees with the file's datatype {found.name};"
            " leave --input-format out or correct it"
        )


def _require_complex(file, datatype):
    if not datatype.is_complex:
        raise ChannelizerError(
            f"{file}: datatype {datatype.name} holds real samples; only complex IQ (c...) captures are processed"
        )


def _sample_count(data_path, payload, datatype, what="the data"):
    """Whole samples in ``payload`` bytes, or an error for nothing or a truncated last sample."""
    if payload <= 0:
        raise ChannelizerError(f"{data_path}: {what} holds no samples (zero length)")
    count, left = divmod(payload, datatype.itemsize)
    if left:
        raise ChannelizerError(
            f"{data_path}: {what} is {payload} bytes, not a whole number of {datatype.itemsize}-byte"
            f" {datatype.name} samples; the last sample is truncated ({left} bytes left over)"
        )
    return count


def _file_size(path, what="data file"):
    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise ChannelizerError(f"{path}: {what} not found") from None
    except OSError as exc:
        raise ChannelizerError(f"{path}: cannot read {what}: {exc.strerror}") from None
    if not os.path.isfile(path):
        raise ChannelizerError(f"{path}: {what} is not a regular file")
    return st.st_size


# -- SigMF ------------------------------------------------------------------------------------------


def _number(value):
    """``float(value)`` for a JSON number that is finite, else None."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    try:
        value = float(value)
    except OverflowError:
        return None
    return value if math.isfinite(value) else None


def _count(value):
    """A JSON non-negative integer, else None."""
    if isinstance(value, bool) or not isinstance(value, int) or value < 0:
        return None
    return value


def _load_json(meta_path):
    try:
        with open(meta_path, "rb") as fh:
            raw = fh.read()
    except OSError as exc:
        raise ChannelizerError(f"{meta_path}: cannot read metadata: {exc.strerror}") from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ChannelizerError(f"{meta_path}: metadata is not UTF-8 text (byte {exc.start})") from None
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        raise ChannelizerError(
            f"{meta_path}: metadata is not JSON ({exc.msg} at line {exc.lineno} column {exc.colno})"
        ) from None
    except (ValueError, RecursionError) as exc:
        reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise ChannelizerError(f"{meta_path}: metadata is not usable JSON ({reason})") from None


def _open_sigmf(given, base, opt_datatype, opt_rate, opt_center):
    meta_path = base.with_name(base.name + _META_EXT)
    if not meta_path.is_file():
        raise ChannelizerError(f"{given}: SigMF metadata file {meta_path.name} not found")
    doc = _load_json(meta_path)
    if not isinstance(doc, dict):
        raise ChannelizerError(f"{meta_path}: metadata is a JSON {type(doc).__name__}, not an object")
    glob = doc.get("global")
    if not isinstance(glob, dict):
        raise ChannelizerError(f"{meta_path}: metadata has no 'global' object")
    captures = doc.get("captures", [])
    if not isinstance(captures, list) or not all(isinstance(c, dict) for c in captures):
        raise ChannelizerError(f"{meta_path}: 'captures' is not a list of objects")

    if "core:datatype" not in glob:
        raise ChannelizerError(f"{meta_path}: global has no core:datatype")
    try:
        datatype = parse_datatype(glob["core:datatype"])
    except ChannelizerError as exc:
        raise ChannelizerError(f"{meta_path}: core:datatype: {exc}") from None
    _require_complex(meta_path, datatype)
    _agree_datatype(meta_path, opt_datatype, datatype)

    if "core:sample_rate" in glob:
        file_rate = _number(glob["core:sample_rate"])
        if file_rate is None or file_rate <= 0:
            raise ChannelizerError(
                f"{meta_path}: core:sample_rate {shown(glob['core:sample_rate'])} is not a positive finite number"
            )
    elif opt_rate is None:
        raise ChannelizerError(f"{meta_path}: global has no core:sample_rate (give the rate with --rate)")
    else:
        file_rate = None
    sample_rate = _agree(meta_path, "core:sample_rate", "--rate", opt_rate, file_rate)

    first = captures[0] if captures else {}
    file_center = None
    if "core:frequency" in first:
        file_center = _number(first["core:frequency"])
        if file_center is None:
            raise ChannelizerError(
                f"{meta_path}: core:frequency {shown(first['core:frequency'])} is not a finite number"
            )
    center = _agree(meta_path, "core:frequency", "--center", opt_center, file_center)

    channels = glob.get("core:num_channels", 1)
    if channels != 1 or isinstance(channels, bool):
        raise ChannelizerError(
            f"{meta_path}: core:num_channels is {shown(channels)}; only single-channel recordings are read"
        )
    if glob.get("core:metadata_only", False) is not False:
        raise ChannelizerError(f"{meta_path}: core:metadata_only is set; the recording has no samples")

    header = _count(first.get("core:header_bytes", 0))
    if header is None:
        raise ChannelizerError(f"{meta_path}: core:header_bytes {shown(first['core:header_bytes'])} is not a count")
    if any(c.get("core:header_bytes", 0) != 0 for c in captures[1:]):
        raise ChannelizerError(
            f"{meta_path}: core:header_bytes in a later capture segment (headers between samples) is not supported"
        )
    trailing = _count(glob.get("core:trailing_bytes", 0))
    if trailing is None:
        raise ChannelizerError(f"{meta_path}: core:trailing_bytes {shown(glob['core:trailing_bytes'])} is not a count")

    dataset = glob.get("core:dataset")
    if dataset is None:
        data_path = base.with_name(base.name + _DATA_EXT)
    elif isinstance(dataset, str) and dataset and os.path.basename(dataset) == dataset and dataset not in (".", ".."):
        data_path = meta_path.with_name(dataset)
    else:
        raise ChannelizerError(
            f"{meta_path}: core:dataset {shown(dataset)} must be a file name in the metadata file's folder"
        )
    size = _file_size(data_path, "SigMF data file")
    num_samples = _sample_count(data_path, size - header - trailing, datatype)
    return Capture(
        path=given,
        data_path=data_path,
        sample_rate=sample_rate,
        center_frequency=center,
        datatype=datatype,
        num_samples=num_samples,
        data_offset=header,
        metadata=glob,
        container="sigmf",
        start_datetime=first.get("core:datetime") if isinstance(first.get("core:datetime"), str) else None,
    )


# -- WAV --------------------------------------------------------------------------------------------


# -- raw --------------------------------------------------------------------------------------------


def _open_raw(path, opt_datatype, opt_rate, opt_center):
    size = _file_size(path, "capture file")
    missing = [opt for opt, value in (("--input-format", opt_datatype), ("--rate", opt_rate)) if value is None]
    if missing:
        raise ChannelizerError(
            f"{path}: not a SigMF or WAV file, so it is read as raw samples, which needs {' and '.join(missing)}"
            " (the SigMF datatype, e.g. ci16_le, and the sample rate in Hz)"
        )
    _require_complex(path, opt_datatype)
    num_samples = _sample_count(path, size, opt_datatype)
    return Capture(
        path=path,
        data_path=path,
        sample_rate=opt_rate,
        center_frequency=opt_center,
        datatype=opt_datatype,
        num_samples=num_samples,
        data_offset=0,
        metadata={},
        container="raw",
    )
