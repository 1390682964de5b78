"""Writing complex samples as a SigMF recording: ``X.sigmf-data`` then ``X.sigmf-meta``.

Samples stream into a hidden temporary file beside ``X.sigmf-data``; on success
it is renamed into place, then the metadata is written the same way, so a
``.sigmf-meta`` on disk always describes a complete data file. On an exception
inside the ``with`` block neither file is replaced and older files of the same
names are left as they were.
"""

import contextlib
import json
import math
import os
from pathlib import Path

import numpy as np

from .atomic import atomic_output, write_text_atomic
from .datatypes import Datatype, from_complex64, parse_datatype
from ..errors import ChannelizerError
from ..units import parse_frequency

__all__ = ["SigmfWriter", "write_sigmf", "SIGMF_VERSION", "WRITABLE_DATATYPES"]

#: The SigMF specification version the metadata follows (written as ``core:version``).
SIGMF_VERSION = "1.2.0"
#: Datatypes the writer produces.
WRITABLE_DATATYPES = ("cf32_le", "ci16_le")
#: Limits from the SigMF schema for ``core:sample_rate`` and ``core:frequency``.
_MAX_HZ = 1e12

_SET_BY_WRITER = ("core:datatype", "core:sample_rate", "core:version", "core:recorder")
# Fields describing a non-conforming or multi-channel dataset: wrong for what we write.
_NOT_CONFORMING = ("core:dataset", "core:metadata_only", "core:trailing_bytes", "core:num_channels")
_CAPTURE_RESERVED = ("core:sample_start", "core:frequency", "core:header_bytes")


def _plain(value, where):
    """``value`` as plain JSON types (numpy scalars and arrays converted), finite floats only."""
    if value is None or isinstance(value, (bool, str)):
        return value
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        value = float(value)
        if not math.isfinite(value):
            raise ChannelizerError(f"{where}: {value!r} is not finite; SigMF metadata is plain JSON")
        return value
    if isinstance(value, np.ndarray):
        value = value.tolist()
    if isinstance(value, (list, tuple)):
        return [_plain(v, f"{where}[{i}]") for i, v in enumerate(value)]
    if isinstance(value, dict):
        out = {}
        for key, v in value.items():
            if not isinstance(key, str):
                raise ChannelizerError(f"{where}: key {key!r} is not a string")
            out[key] = _plain(v, f"{where}.{key}")
        return out
    raise ChannelizerError(f"{where}: {type(value).__name__} value {value!r} cannot go into JSON metadata")


def _fields(mapping, where, reserved):
    """Checked copy of a mapping of extra SigMF fields."""
    if mapping is None:
        return {}
    if not isinstance(mapping, dict):
        raise ChannelizerError(f"{where}: expected a mapping of SigMF fields, got {type(mapping).__name__}")
    out = _plain(mapping, where)
    for key in out:
        ns, sep, field = key.partition(":")
        if not (ns and sep and field):
            raise ChannelizerError(f"{where}: field {key!r} is not of the SigMF form namespace:name")
        if key in reserved:
            raise ChannelizerError(f"{where}: field {key} is set by the writer or does not fit a conforming recording")
    return out


def _annotation(item, where):
    if not isinstance(item, dict):
        raise ChannelizerError(f"{where}: an annotation is a mapping, got {type(item).__name__}")
    ann = _fields(item, where, ())
    for key, required in (("core:sample_start", True), ("core:sample_count", False)):
        if key not in ann and not required:
            continue
        value = ann.get(key)
        if isinstance(value, bool) or not isinstance(value, int) or value < 0:
            raise ChannelizerError(f"{where}: {key} must be a non-negative integer, got {value!r}")
    return ann


class SigmfWriter:
    """Stream complex samples into a SigMF recording.

    Parameters
    ----------
    base_path : str or os.PathLike
        The recording's path without extension (a trailing ``.sigmf-meta`` or
        ``.sigmf-data`` is dropped); files ``base.sigmf-data`` and
        ``base.sigmf-meta`` are written.
    datatype : {'cf32_le', 'ci16_le'} or Datatype
        Stored format. ``ci16_le`` scales by 32768, rounds half to even and
        saturates to [-32768, 32767] (the inverse of the reader's full-scale
        convention); samples that saturate, or are NaN (stored as 0), are
        counted in :attr:`clipped`.
    fs : float or str
        Sample rate in Hz (``core:sample_rate``).
    center_frequency : float or str, optional
        Centre frequency in Hz (``core:frequency`` of the capture segment).
    global_extra : dict, optional
        More ``global`` fields (``core:description``, ``core:author``,
        ``core:extensions``, ...). Fields of a namespace other than ``core`` need
        that namespace declared in ``core:extensions``.
    capture_extra : dict, optional
        More fields for the single capture segment (e.g. ``core:datetime``).
    annotations : list of dict, optional
        Annotation segments, each with ``core:sample_start``; written sorted by it.
    fileset : channelizer.atomic.FileSet, optional
        When given, both files are left under temporary names at the end of the
        ``with`` block and appear only when the caller commits the set (several
        recordings that become visible together).

    Attributes
    ----------
    data_path, meta_path : pathlib.Path
    datatype : Datatype
    num_samples : int
        Samples written so far.
    clipped : int
        Samples saturated (or NaN) in integer conversion so far.

    Examples
    --------
    >>> with SigmfWriter("out/ch1", datatype="cf32_le", fs=48e3) as w:  # doctest: +SKIP
    ...     for block in blocks:
    ...         w.write(block)

    References
    ----------
    SigMF specification 1.x (sigmf.org), Global, Captures and Annotations objects.
    """

    def __init__(
        self,
        base_path,
        *,
        datatype,
        fs,
        center_frequency=None,
        global_extra=None,
        capture_extra=None,
        annotations=None,
        fileset=None,
    ):
        base = os.fspath(base_path)
        for ext in (".sigmf-meta", ".sigmf-data"):
            if base.lower().endswith(ext):
                base = base[: -len(ext)]
        self.data_path = Path(base + ".sigmf-data")
        self.meta_path = Path(base + ".sigmf-meta")

        name = datatype.name if isinstance(datatype, Datatype) else datatype
        if name not in WRITABLE_DATATYPES:
            raise ChannelizerError(
                f"{self.meta_path}: output datatype {name!r} is not supported;"
                f" use one of {', '.join(WRITABLE_DATATYPES)}"
            )
        self.datatype = parse_datatype(name)

        rate = parse_frequency(fs, name=f"{self.meta_path}: fs", allow_negative=False)
        if not 0 < rate <= _MAX_HZ:
            raise ChannelizerError(f"{self.meta_path}: fs {fs!r} must be above 0 and at most 1e12 Hz")
        glob = {
            "core:datatype": self.datatype.name,
            "core:sample_rate": rate,
            "core:version": SIGMF_VERSION,
            "core:recorder": "channelizer",
        }
        glob.update(_fields(global_extra, f"{self.meta_path}: global", _SET_BY_WRITER + _NOT_CONFORMING))

        capture = {"core:sample_start": 0}
        if center_frequency is not None:
            center = parse_frequency(center_frequency, name=f"{self.meta_path}: center_frequency")
            if abs(center) > _MAX_HZ:
                raise ChannelizerError(f"{self.meta_path}: center_frequency {center_frequency!r} beyond 1e12 Hz")
            capture["core:frequency"] = center
        capture.update(_fields(capture_extra, f"{self.meta_path}: capture", _CAPTURE_RESERVED))

        if annotations is not None and not isinstance(annotations, (list, tuple)):
            raise ChannelizerError(f"{self.meta_path}: annotations must be a list of mappings")
        self.num_samples = 0
        self.clipped = 0
        self._stack = None
        self._fh = None
        self._state = "new"
        self._global = glob
        self._capture = capture
        self._annotations = []
        self._fileset = fileset
        for i, item in enumerate(annotations or ()):
            self.add_annotation(item, _where=f"{self.meta_path}: annotations[{i}]")
        self._check_namespaces()

    def _check_namespaces(self):
        declared = {"core"}
        for ext in self._global.get("core:extensions", []) or []:
            if not isinstance(ext, dict) or not isinstance(ext.get("name"), str):
                raise ChannelizerError(f"{self.meta_path}: core:extensions entries need a 'name' string")
            declared.add(ext["name"].split(":")[0])
        for section in [self._global, self._capture, *self._annotations]:
            for key in section:
                ns = key.partition(":")[0]
                if ns not in declared:
                    raise ChannelizerError(
                        f"{self.meta_path}: field {key} uses namespace {ns!r}, which is not declared in core:extensions"
                    )

    def add_annotation(self, annotation, *, _where=None):
        """Add one annotation segment (a mapping with ``core:sample_start``)."""
        if self._state == "closed":
            raise RuntimeError("the recording is already closed")
        where = _where or f"{self.meta_path}: annotation"
        self._annotations.append(_annotation(annotation, where))
        if _where is None:
            self._check_namespaces()

    # -- streaming ------------------------------------------------------------------------------

    def __enter__(self):
        if self._state != "new":
            raise RuntimeError("a SigmfWriter is entered once")
        stack = contextlib.ExitStack()
        try:
            opener = self._fileset.output if self._fileset is not None else atomic_output
            self._fh = stack.enter_context(opener(self.data_path, "wb"))
        except OSError as exc:
            raise ChannelizerError(f"{self.data_path}: cannot write: {exc.strerror}") from None
        self._stack = stack
        self._state = "open"
        return self

    def write(self, block):
        """Append complex samples (1-D, complex64 or complex128)."""
        if self._state != "open":
            raise RuntimeError("write() is only possible inside the writer's with block")
        components, clipped = from_complex64(np.asarray(block), self.datatype)
        try:
            self._fh.write(memoryview(components).cast("B"))
        except OSError as exc:
            raise ChannelizerError(f"{self.data_path}: cannot write: {exc.strerror}") from None
        self.num_samples += components.size // 2
        self.clipped += clipped

    def metadata(self):
        """The SigMF metadata as a dict (what is written to ``.sigmf-meta``)."""
        return {
            "global": dict(self._global),
            "captures": [dict(self._capture)],
            "annotations": sorted(self._annotations, key=lambda a: a["core:sample_start"]),
        }

    def __exit__(self, exc_type, exc, tb):
        stack, self._stack = self._stack, None
        self._state = "closed"
        self._fh = None
        if exc_type is not None:
            return stack.__exit__(exc_type, exc, tb)
        try:
            text = json.dumps(self.metadata(), indent=2, allow_nan=False) + "\n"
        except BaseException as error:
            stack.__exit__(type(error), error, error.__traceback__)
            raise
        try:
            stack.close()  # data: flush, fsync, rename into place (or leave to the file set)
            if self._fileset is not None:
                self._fileset.write_text(self.meta_path, text)  # metadata after the data
            else:
                write_text_atomic(self.meta_path, text)  # metadata last
        except OSError as err:
            raise ChannelizerError(f"{self.meta_path.with_suffix('')}: cannot finish writing: {err.strerror}") from None
        return False


def write_sigmf(base_path, samples, **kwargs):
    """Write ``samples`` as one SigMF recording; keywords as for :class:`SigmfWriter`.

    Returns
    -------
    SigmfWriter
        The closed writer (``data_path``, ``meta_path``, ``num_samples``, ``clipped``).
    """
    with SigmfWriter(base_path, **kwargs) as writer:
        writer.write(samples)
    return writer
