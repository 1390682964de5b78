"""WAV captures: the RIFF/RF64 chunk walk and the two-channel IQ formats we read.

I is the first (left) channel, Q the second (common practice).  PCM16 and 32-bit
float, plain or WAVE_FORMAT_EXTENSIBLE, RIFF or RF64.
"""

import struct


from .datatypes import parse_datatype
from ..errors import ChannelizerError
from .captures import Capture, _agree, _agree_datatype, _file_size, _sample_count


_PCM, _IEEE_FLOAT, _EXTENSIBLE = 1, 3, 0xFFFE


# KSDATAFORMAT_SUBTYPE_* GUIDs: the format tag in the first two bytes, then this fixed tail.
_GUID_TAIL = b"\x00\x00\x00\x00\x10\x00\x80\x00\x00\xaa\x00\x38\x9b\x71"


_WAV_TYPES = {(_PCM, 16): "ci16_le", (_IEEE_FLOAT, 32): "cf32_le"}


def _wav_format(path, body):
    """The datatype name and sample rate from a ``fmt `` chunk body."""
    if len(body) < 16:
        raise ChannelizerError(f"{path}: WAV fmt chunk is {len(body)} bytes, at least 16 expected")
    tag, channels, rate, _, block_align, bits = struct.unpack("<HHIIHH", body[:16])
    if tag == _EXTENSIBLE:
        if len(body) < 40:
            raise ChannelizerError(f"{path}: WAV extensible fmt chunk is {len(body)} bytes, 40 expected")
        valid_bits = struct.unpack("<H", body[18:20])[0]
        subformat = body[24:40]
        if subformat[2:] != _GUID_TAIL or valid_bits not in (0, bits):
            raise ChannelizerError(
                f"{path}: WAV sub-format is not plain PCM or IEEE float; IQ WAV files must be"
                " 16-bit PCM or 32-bit IEEE float"
            )
        tag = struct.unpack("<H", subformat[:2])[0]
    if channels != 2:
        raise ChannelizerError(f"{path}: WAV file has {channels} channel(s); IQ needs two (I left, Q right)")
    name = _WAV_TYPES.get((tag, bits))
    if name is None:
        kind = {_PCM: "PCM", _IEEE_FLOAT: "IEEE float"}.get(tag, f"format tag {tag}")
        raise ChannelizerError(
            f"{path}: WAV samples are {bits}-bit {kind}; IQ WAV files must be 16-bit PCM or 32-bit IEEE float"
        )
    if block_align != bits // 4:
        raise ChannelizerError(f"{path}: WAV block align is {block_align}, {bits // 4} expected for two channels")
    if rate == 0:
        raise ChannelizerError(f"{path}: WAV sample rate is 0")
    return name, float(rate)


def _wav_layout(path, fh, size):
    """(datatype name, rate, data offset, data bytes) from the RIFF/RF64 chunks."""
    head = fh.read(12)
    if len(head) < 12 or head[8:12] != b"WAVE" or head[:4] not in (b"RIFF", b"RF64"):
        if head[:4] == b"RIFX":
            raise ChannelizerError(f"{path}: big-endian (RIFX) WAV files are not supported")
        raise ChannelizerError(f"{path}: not a WAV file (no RIFF/WAVE header)")
    rf64 = head[:4] == b"RF64"
    ds64_data = None
    fmt = None
    pos = 12
    while True:
        fh.seek(pos)
        chunk = fh.read(8)
        if len(chunk) < 8:
            missing = "fmt and data chunks" if fmt is None else "data chunk"
            raise ChannelizerError(f"{path}: WAV file has no {missing}")
        cid, csize = chunk[:4], struct.unpack("<I", chunk[4:])[0]
        body = pos + 8
        if cid == b"ds64" and rf64:
            ds = fh.read(28)
            if len(ds) < 28:
                raise ChannelizerError(f"{path}: RF64 ds64 chunk is truncated")
            ds64_data = struct.unpack("<Q", ds[8:16])[0]
        elif cid == b"fmt ":
            fmt = _wav_format(path, fh.read(min(csize, 64)))
        elif cid == b"data":
            if fmt is None:
                raise ChannelizerError(f"{path}: WAV data chunk comes before the fmt chunk")
            if rf64 and csize == 0xFFFFFFFF:
                if ds64_data is None:
                    raise ChannelizerError(f"{path}: RF64 file has no ds64 chunk giving the data size")
                csize = ds64_data
            if body + csize > size:
                raise ChannelizerError(
                    f"{path}: WAV data chunk declares {csize} bytes but only {size - body} follow;"
                    " the file is truncated"
                )
            more = _later_data_chunks(fh, body + csize + (csize & 1), size)
            if more:
                raise ChannelizerError(
                    f"{path}: WAV file holds {more + 1} data chunks; only one would be read, so the file is "
                    "refused: join its data chunks into one first"
                )
            return fmt[0], fmt[1], body, csize
        pos = body + csize + (csize & 1)


def _later_data_chunks(fh, pos, size):
    """How many further ``data`` chunks follow ``pos`` (a walk over the chunk headers)."""
    count = 0
    while pos + 8 <= size:
        fh.seek(pos)
        chunk = fh.read(8)
        if len(chunk) < 8:
            break
        csize = struct.unpack("<I", chunk[4:])[0]
        count += chunk[:4] == b"data"
        pos += 8 + csize + (csize & 1)
    return count


def _open_wav(path, opt_datatype, opt_rate, opt_center):
    size = _file_size(path, "WAV file")
    try:
        with open(path, "rb") as fh:
            name, file_rate, offset, nbytes = _wav_layout(path, fh, size)
    except OSError as exc:
        raise ChannelizerError(f"{path}: cannot read WAV file: {exc.strerror}") from None
    datatype = parse_datatype(name)
    _agree_datatype(path, opt_datatype, datatype)
    sample_rate = _agree(path, "sample rate", "--rate", opt_rate, file_rate)
    num_samples = _sample_count(path, nbytes, datatype, what="the WAV data chunk")
    return Capture(
        path=path,
        data_path=path,
        sample_rate=sample_rate,
        center_frequency=opt_center,
        datatype=datatype,
        num_samples=num_samples,
        data_offset=offset,
        metadata={},
        container="wav",
    )
