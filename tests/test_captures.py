"""Tests for the datatype grammar and scaling, and for the capture readers.

Outside sources: the SigMF specification (datatype grammar, metadata fields,
Non-Conforming Datasets), the `sigmf` reference library (files it writes, its
own sample decoding), scipy.io.wavfile (WAV files it writes and its decoding),
EBU Tech 3306 (RF64 layout), Microsoft WAVEFORMATEXTENSIBLE (sub-format GUIDs),
and common practice for fixed-point scaling.
"""

import dataclasses
import hashlib
import json
import os
import struct
import warnings

import numpy as np
import pytest
import scipy.io.wavfile
import sigmf
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from channelizer.io.captures import Capture, open_capture
from channelizer.io.datatypes import from_complex64, parse_datatype, to_complex64
from channelizer.errors import ChannelizerError


@pytest.fixture
def rng():
    return np.random.default_rng(20240611)


# Every complex datatype of the SigMF grammar, with the numpy dtype of one component
# written out by hand here (SigMF specification, core:datatype: I then Q, le/be byte order).
COMPLEX_TYPES = {
    "cf64_le": "<f8", "cf64_be": ">f8",
    "cf32_le": "<f4", "cf32_be": ">f4",
    "ci32_le": "<i4", "ci32_be": ">i4",
    "ci16_le": "<i2", "ci16_be": ">i2",
    "cu32_le": "<u4", "cu32_be": ">u4",
    "cu16_le": "<u2", "cu16_be": ">u2",
    "ci8": "i1", "cu8": "u1",
}  # fmt: skip
REAL_TYPES = ["r" + name[1:] for name in COMPLEX_TYPES]


def random_components(rng, numpy_dtype, n):
    """2n components covering the type's whole range, extremes included."""
    dt = np.dtype(numpy_dtype)
    if dt.kind == "f":
        values = rng.standard_normal(2 * n) * 0.5
    else:
        info = np.iinfo(dt)
        values = rng.integers(info.min, info.max, size=2 * n, endpoint=True)
        values[:4] = [info.min, info.max, 0, info.max // 2 + 1]
    return values.astype(dt)


def reference_complex(components, numpy_dtype):
    """Independent scaling in float64 (common practice, as the task states it):
    signed / 2**(bits-1); unsigned (x - (2**(bits-1) - 0.5)) / (2**(bits-1) - 0.5);
    floats as they are."""
    dt = np.dtype(numpy_dtype)
    v = components.astype(np.float64)
    bits = 8 * dt.itemsize
    if dt.kind == "i":
        v = v / 2.0 ** (bits - 1)
    elif dt.kind == "u":
        c = 2.0 ** (bits - 1) - 0.5
        v = (v - c) / c
    return v[0::2] + 1j * v[1::2]


def assert_scaled(got, components, numpy_dtype):
    expected = reference_complex(components, numpy_dtype)
    assert got.dtype == np.complex64
    if np.dtype(numpy_dtype).kind == "u":
        # one float32 rounding of values in [-1, 1]: at most 2**-24 away; allow 2**-23
        np.testing.assert_allclose(got, expected, rtol=0, atol=2.0**-23)
    else:
        # power-of-two scaling and float casts round once: equal to the float64 value cast
        np.testing.assert_array_equal(got, expected.astype(np.complex64))


def write_meta(path, global_fields=None, captures=None, raw_text=None):
    if raw_text is None:
        glob = {"core:version": "1.2.0", **(global_fields or {})}
        doc = {"global": glob, "captures": captures or [], "annotations": []}
        raw_text = json.dumps(doc)
    path.write_text(raw_text) if isinstance(raw_text, str) else path.write_bytes(raw_text)


# -- datatype grammar (SigMF specification, core:datatype) -----------------------------------------


@pytest.mark.parametrize("name", list(COMPLEX_TYPES) + REAL_TYPES)
def test_parse_datatype_fields(name):
    dt = parse_datatype(name)
    expected = np.dtype(COMPLEX_TYPES["c" + name[1:]])
    assert dt.name == name
    assert dt.is_complex == name.startswith("c")
    assert dt.kind == expected.kind
    assert dt.bits == 8 * expected.itemsize
    assert dt.numpy_dtype == expected
    assert dt.byteorder == {"le": "<", "be": ">"}.get(name[-2:], "|")
    assert dt.itemsize == expected.itemsize * (2 if dt.is_complex else 1)


@pytest.mark.parametrize(
    "bad",
    ["ci16", "cf16_le", "CI16_LE", "ci8_le", "cu8_be", "cf32", "ci16_LE", "ci16_le ", " ci16_le",
     "xi16_le", "ci24_le", "ci16-le", "ci16_le_le", "", "cf32_ne", "c", "ci64_le"],
)  # fmt: skip
def test_parse_datatype_refuses_loose_strings(bad):
    # the SigMF schema's own pattern accepts e.g. "ci16" and "ci8_le"; the specification's grammar does not
    with pytest.raises(ChannelizerError) as info:
        parse_datatype(bad)
    assert repr(bad) in str(info.value)
    assert "ci16_le" in str(info.value) and "cf32_le" in str(info.value)


@pytest.mark.parametrize("bad", [None, 16, b"ci16_le"])
def test_parse_datatype_refuses_non_strings(bad):
    with pytest.raises(ChannelizerError):
        parse_datatype(bad)


# -- scaling (common practice) ---------------------------------------------------------------------


@pytest.mark.parametrize("name", list(COMPLEX_TYPES))
def test_to_complex64_against_reference(rng, name):
    comps = random_components(rng, COMPLEX_TYPES[name], 257)
    assert_scaled(to_complex64(comps, name), comps, COMPLEX_TYPES[name])
    assert_scaled(to_complex64(comps.reshape(-1, 2), parse_datatype(name)), comps, COMPLEX_TYPES[name])


def test_scaling_known_values():
    # common practice: int16 full scale 32768 -> -32768 is exactly -1, 32767 just below 1
    got = to_complex64(np.array([-32768, 32767, 16384, 0], np.int16), "ci16_le")
    assert got[0] == -1 + 32767 / 32768 * 1j
    assert got[1] == 0.5 + 0j
    # cu8 centred on 127.5 (stated in the task; the other convention, (x-128)/128, would give 0 and -1)
    got = to_complex64(np.array([128, 0, 255, 127], np.uint8), "cu8")
    np.testing.assert_allclose(got, [0.5 / 127.5 - 1j, 1 - 0.5j / 127.5], rtol=1e-7)


def test_to_complex64_refuses_real_and_mismatch():
    with pytest.raises(ChannelizerError):
        to_complex64(np.zeros(4, np.float32), "rf32_le")
    with pytest.raises(TypeError):
        to_complex64(np.zeros(4, np.int16), "ci8")
    with pytest.raises(ValueError):
        to_complex64(np.zeros(3, np.int16), "ci16_le")


# (32-bit integers are left out: complex64 holds 24-bit mantissas, so they cannot come back exactly)
@pytest.mark.parametrize("name", ["ci16_le", "ci16_be", "ci8", "cu8", "cu16_le", "cf32_le", "cf64_be"])
def test_from_complex64_inverts_to_complex64(rng, name):
    comps = random_components(rng, COMPLEX_TYPES[name], 300)
    samples = to_complex64(comps, name)
    back, clipped = from_complex64(samples, name)
    assert clipped == 0
    assert back.dtype == np.dtype(COMPLEX_TYPES[name])
    if name.startswith("cf64"):
        np.testing.assert_array_equal(back, comps.astype(np.float32))  # complex64 path holds float32 values
    else:
        np.testing.assert_array_equal(back, comps)


def test_from_complex64_saturates_and_counts():
    x = np.array([1.0, -1.0 - 1.5j, 0.99999 + 2j, np.nan, 0.25j], np.complex64)
    comps, clipped = from_complex64(x, "ci16_le")
    # common practice: round to nearest, saturate to [-32768, 32767]; NaN stored as 0 and counted
    np.testing.assert_array_equal(comps, [32767, 0, -32768, -32768, 32767, 32767, 0, 0, 0, 8192])
    assert clipped == 4


# -- raw files -------------------------------------------------------------------------------------


@pytest.mark.parametrize("name", list(COMPLEX_TYPES))
def test_raw_round_trip_every_datatype(tmp_path, rng, name):
    comps = random_components(rng, COMPLEX_TYPES[name], 1001)
    path = tmp_path / "capture.bin"
    comps.tofile(path)
    cap = open_capture(path, input_format=name, rate="2.5M", center=433.92e6)
    assert cap.container == "raw"
    assert cap.num_samples == 1001 and cap.sample_rate == 2.5e6 and cap.center_frequency == 433.92e6
    assert cap.datatype.name == name and cap.data_offset == 0 and cap.metadata == {}
    assert_scaled(cap.read(0, 1001), comps, COMPLEX_TYPES[name])


@pytest.mark.parametrize("name", list(COMPLEX_TYPES))
def test_sigmf_round_trip_every_datatype(tmp_path, rng, name):
    comps = random_components(rng, COMPLEX_TYPES[name], 513)
    comps.tofile(tmp_path / "rec.sigmf-data")
    write_meta(
        tmp_path / "rec.sigmf-meta",
        {"core:datatype": name, "core:sample_rate": 1e6},
        [{"core:sample_start": 0, "core:frequency": 915e6}],
    )
    for opener in ("rec.sigmf-meta", "rec.sigmf-data", "rec.sigmf", "rec"):
        cap = open_capture(tmp_path / opener)
        assert cap.container == "sigmf" and cap.data_path == tmp_path / "rec.sigmf-data"
        assert cap.sample_rate == 1e6 and cap.center_frequency == 915e6 and cap.num_samples == 513
        assert cap.metadata["core:datatype"] == name
        assert_scaled(cap.read(0, 513), comps, COMPLEX_TYPES[name])


@pytest.mark.parametrize("name", REAL_TYPES[:3] + ["ri8"])
def test_real_datatypes_refused_by_reader(tmp_path, name):
    path = tmp_path / "real.bin"
    path.write_bytes(bytes(64))
    with pytest.raises(ChannelizerError, match="real.bin.*real samples"):
        open_capture(path, input_format=name, rate=1e6)
    (tmp_path / "r.sigmf-data").write_bytes(bytes(64))
    write_meta(tmp_path / "r.sigmf-meta", {"core:datatype": name, "core:sample_rate": 1e6})
    with pytest.raises(ChannelizerError, match=r"r\.sigmf-meta.*real samples"):
        open_capture(tmp_path / "r.sigmf-meta")


# -- the sigmf reference library -------------------------------------------------------------------


@pytest.mark.parametrize("name", ["ci16_le", "ci16_be", "ci8", "cf32_le", "cf32_be", "ci32_le", "cf64_le"])
def test_reads_files_written_by_sigmf_library_signed(tmp_path, rng, name):
    comps = random_components(rng, COMPLEX_TYPES[name], 777)
    data = tmp_path / "lib.sigmf-data"
    comps.tofile(data)
    meta = sigmf.SigMFFile(
        data_file=data,
        global_info={sigmf.DATATYPE_KEY: name, sigmf.SAMPLE_RATE_KEY: 3.2e6, sigmf.DESCRIPTION_KEY: "test tone"},
    )
    meta.add_capture(0, metadata={sigmf.FREQUENCY_KEY: 2.4e9})
    meta.tofile(tmp_path / "lib.sigmf-meta")
    cap = open_capture(tmp_path / "lib.sigmf-meta")
    assert cap.sample_rate == 3.2e6 and cap.center_frequency == 2.4e9 and cap.num_samples == 777
    # the library scales signed integers by 2**-(bits-1) too (sigmffile._read_datafile), so it must agree
    theirs = sigmf.sigmffile.fromfile(tmp_path / "lib.sigmf-meta").read_samples()
    if name.startswith("cf64"):
        theirs = theirs.astype(np.complex64)
    np.testing.assert_array_equal(cap.read(0, 777), theirs)


@pytest.mark.parametrize("name", ["cu8", "cu16_le", "cu16_be"])
def test_reads_files_written_by_sigmf_library_unsigned(tmp_path, rng, name):
    comps = random_components(rng, COMPLEX_TYPES[name], 300)
    data = tmp_path / "u.sigmf-data"
    comps.tofile(data)
    meta = sigmf.SigMFFile(data_file=data, global_info={sigmf.DATATYPE_KEY: name, sigmf.SAMPLE_RATE_KEY: 2e6})
    meta.tofile(tmp_path / "u.sigmf-meta")
    # the library scales unsigned data as (x - 2**(bits-1)) / 2**(bits-1); we use the 127.5 centre, so
    # compare with its unscaled decoding (autoscale=False) put through the common-practice formula
    raw = sigmf.sigmffile.fromfile(tmp_path / "u.sigmf-meta", autoscale=False).read_samples()
    raw_comps = np.stack([raw.real, raw.imag], axis=1).reshape(-1).astype(np.int64)
    np.testing.assert_array_equal(raw_comps, comps)
    assert_scaled(open_capture(tmp_path / "u.sigmf-data").read(0, 300), raw_comps, COMPLEX_TYPES[name])


def test_reads_sigmf_library_fromarray_recording(tmp_path, rng):
    x = (rng.standard_normal(400) + 1j * rng.standard_normal(400)).astype(np.complex64)
    meta = sigmf.fromarray(x)
    meta.set_global_field(sigmf.SAMPLE_RATE_KEY, 48000)  # an integer rate in JSON
    meta.tofile(tmp_path / "arr")
    cap = open_capture(tmp_path / "arr.sigmf-meta")
    assert cap.sample_rate == 48000.0 and isinstance(cap.sample_rate, float)
    assert cap.center_frequency is None
    np.testing.assert_array_equal(cap.read(0, 400), x)


def test_non_conforming_dataset_with_header_and_trailing_bytes(tmp_path, rng):
    # SigMF specification, Non-Conforming Datasets: core:dataset, core:header_bytes, core:trailing_bytes
    comps = random_components(rng, "<i2", 100)
    (tmp_path / "radio.dat").write_bytes(b"H" * 36 + comps.tobytes() + b"T" * 12)
    write_meta(
        tmp_path / "ncd.sigmf-meta",
        {"core:datatype": "ci16_le", "core:sample_rate": 1e6, "core:dataset": "radio.dat", "core:trailing_bytes": 12},
        [{"core:sample_start": 0, "core:header_bytes": 36}],
    )
    cap = open_capture(tmp_path / "ncd.sigmf-meta")
    assert cap.data_path == tmp_path / "radio.dat" and cap.data_offset == 36 and cap.num_samples == 100
    assert_scaled(cap.read(0, 100), comps, "<i2")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        theirs = sigmf.sigmffile.fromfile(tmp_path / "ncd.sigmf-meta", skip_checksum=True).read_samples()
    np.testing.assert_array_equal(cap.read(0, 100), theirs)


# -- WAV (scipy.io.wavfile; Microsoft WAVEFORMATEX; EBU Tech 3306) ---------------------------------


@pytest.mark.parametrize("dtype", [np.int16, np.float32])
def test_wav_written_by_scipy(tmp_path, rng, dtype):
    n = 999
    if dtype is np.int16:
        iq = rng.integers(-32768, 32768, size=(n, 2)).astype(np.int16)
    else:
        iq = (rng.standard_normal((n, 2)) * 0.3).astype(np.float32)
    path = tmp_path / "iq.wav"
    scipy.io.wavfile.write(path, 192000, iq)
    cap = open_capture(path)
    assert cap.container == "wav" and cap.num_samples == n and cap.sample_rate == 192000.0
    assert cap.datatype.name == ("ci16_le" if dtype is np.int16 else "cf32_le")
    fs, theirs = scipy.io.wavfile.read(path)
    assert fs == 192000
    # I = left channel, Q = right channel (common practice); int16 by full scale 32768
    expected = theirs[:, 0].astype(np.float64) + 1j * theirs[:, 1]
    if dtype is np.int16:
        expected /= 32768.0
    np.testing.assert_array_equal(cap.read(0, n), expected.astype(np.complex64))
    # options that agree with the file are fine
    open_capture(path, input_format=cap.datatype.name, rate="192k", center=1e6)


def _fmt_extensible(tag, bits, channels=2, rate=96000, valid_bits=None):
    # WAVEFORMATEXTENSIBLE: WAVEFORMATEX (cbSize 22), valid bits, channel mask, sub-format GUID
    # {0000tttt-0000-0010-8000-00AA00389B71} (Microsoft, mmreg.h / ksmedia.h)
    align = channels * bits // 8
    guid = struct.pack("<H", tag) + b"\x00\x00\x00\x00\x10\x00\x80\x00\x00\xaa\x00\x38\x9b\x71"
    return struct.pack(
        "<HHIIHHHHI", 0xFFFE, channels, rate, rate * align, align, bits, 22, valid_bits or bits, 3
    ) + guid


def _riff(chunks, form=b"RIFF"):
    body = b"WAVE" + b"".join(
        cid + struct.pack("<I", len(data)) + data + b"\0" * (len(data) & 1) for cid, data in chunks
    )
    return form + struct.pack("<I", len(body)) + body


def test_wav_extensible_matches_scipy(tmp_path, rng):
    iq = rng.integers(-32768, 32768, size=(50, 2)).astype("<i2")
    path = tmp_path / "ext.wav"
    # an odd-sized extra chunk before the data tests the RIFF pad byte
    path.write_bytes(_riff([(b"fmt ", _fmt_extensible(1, 16)), (b"LIST", b"abc"), (b"data", iq.tobytes())]))
    fs, theirs = scipy.io.wavfile.read(path)
    cap = open_capture(path)
    assert cap.sample_rate == fs == 96000
    np.testing.assert_array_equal(cap.read(0, 50), ((theirs[:, 0] + 1j * theirs[:, 1]) / 32768).astype(np.complex64))


def test_wav_rf64_matches_scipy(tmp_path, rng):
    iq = (rng.standard_normal((40, 2))).astype("<f4")
    fmt = struct.pack("<HHIIHH", 3, 2, 8000, 8000 * 8, 8, 32)
    data = iq.tobytes()
    # EBU Tech 3306: 'RF64', size -1, 'WAVE', ds64 (riff size, data size, sample count, table length)
    riff_size = 4 + (8 + 28) + (8 + 16) + (8 + len(data))  # everything after the first 8 bytes
    ds64 = struct.pack("<QQQI", riff_size, len(data), 40, 0)
    body = (b"WAVE" + b"ds64" + struct.pack("<I", 28) + ds64 + b"fmt " + struct.pack("<I", 16) + fmt
            + b"data" + struct.pack("<I", 0xFFFFFFFF) + data)  # fmt: skip
    assert len(body) == riff_size
    path = tmp_path / "big.wav"
    path.write_bytes(b"RF64" + struct.pack("<I", 0xFFFFFFFF) + body)
    fs, theirs = scipy.io.wavfile.read(path)
    cap = open_capture(path)
    assert cap.sample_rate == fs == 8000 and cap.num_samples == 40
    np.testing.assert_array_equal(cap.read(0, 40), (theirs[:, 0] + 1j * theirs[:, 1]).astype(np.complex64))


@pytest.mark.parametrize(
    "iq, match",
    [
        (np.zeros((10, 1), np.int16), "1 channel"),
        (np.zeros((10, 3), np.int16), "3 channel"),
        (np.zeros((10, 2), np.uint8), "8-bit PCM"),
        (np.zeros((10, 2), np.int32), "32-bit PCM"),
        (np.zeros((10, 2), np.float64), "64-bit IEEE float"),
        (np.zeros((0, 2), np.int16), "no samples"),
    ],
)
def test_wav_layouts_refused(tmp_path, iq, match):
    path = tmp_path / "bad.wav"
    scipy.io.wavfile.write(path, 48000, iq)
    with pytest.raises(ChannelizerError, match=r"bad\.wav.*" + match):
        open_capture(path)


def test_wav_damaged_files_refused(tmp_path):
    good = tmp_path / "good.wav"
    scipy.io.wavfile.write(good, 48000, np.zeros((10, 2), np.int16))
    raw = good.read_bytes()
    cases = {
        "short.wav": (raw[:-3], "truncated"),
        "nohdr.wav": (b"ID3" + raw, "not a WAV"),
        "rifx.wav": (b"RIFX" + raw[4:], "big-endian"),
        "empty.wav": (b"", "not a WAV"),
        "nodata.wav": (_riff([(b"fmt ", raw[20:36])]), "no data chunk"),
        "nofmt.wav": (_riff([(b"data", bytes(40))]), "before the fmt"),
        "odd.wav": (_riff([(b"fmt ", raw[20:36]), (b"data", bytes(41))]), "1 bytes left over"),
        "ext24.wav": (_riff([(b"fmt ", _fmt_extensible(1, 32, valid_bits=24)), (b"data", bytes(16))]), "sub-format"),
        "extmono.wav": (_riff([(b"fmt ", _fmt_extensible(3, 32, channels=1)), (b"data", bytes(16))]), "1 channel"),
    }
    for name, (content, match) in cases.items():
        (tmp_path / name).write_bytes(content)
        with pytest.raises(ChannelizerError, match=name.replace(".", r"\.") + ".*" + match):
            open_capture(tmp_path / name)


def test_wav_options_must_agree(tmp_path):
    path = tmp_path / "iq.wav"
    scipy.io.wavfile.write(path, 48000, np.zeros((10, 2), np.int16))
    with pytest.raises(ChannelizerError, match=r"iq\.wav.*--rate"):
        open_capture(path, rate=96000)
    with pytest.raises(ChannelizerError, match=r"iq\.wav.*--input-format cf32_le"):
        open_capture(path, input_format="cf32_le")
    assert open_capture(path, center="7.1M").center_frequency == 7.1e6  # nothing in the file to contradict


# -- blocks ----------------------------------------------------------------------------------------


@pytest.fixture
def ci16_capture(tmp_path, rng):
    comps = random_components(rng, "<i2", 10007)
    comps.tofile(tmp_path / "blocks.ci16")
    return open_capture(tmp_path / "blocks.ci16", input_format="ci16_le", rate=1e6), comps


@pytest.mark.parametrize("block_size", [1, 7, 333, 4096, 10006, 10007, 50000])
def test_blocks_equal_one_read(ci16_capture, block_size):
    cap, _ = ci16_capture
    whole = cap.read(0, cap.num_samples)
    blocks = list(cap.blocks(block_size))
    assert all(len(b) == block_size for b in blocks[:-1]) and 0 < len(blocks[-1]) <= block_size
    assert all(b.dtype == np.complex64 for b in blocks)
    np.testing.assert_array_equal(np.concatenate(blocks), whole)


def test_blocks_random_spans(ci16_capture, rng):
    cap, comps = ci16_capture
    for _ in range(20):
        start, stop = sorted(rng.integers(0, cap.num_samples + 1, size=2))
        size = int(rng.integers(1, 3000))
        got = list(cap.blocks(size, start=start, stop=stop))
        joined = np.concatenate(got) if got else np.zeros(0, np.complex64)
        assert len(got) == -(-(stop - start) // size)
        assert_scaled(joined, comps[2 * start : 2 * stop], "<i2")


@pytest.mark.parametrize("piece", [1, 100, 4096])
def test_blocks_read_a_piece_at_a_time_hold_the_stored_samples(ci16_capture, monkeypatch, piece):
    # a block is read and converted in pieces (CONVERT_PIECE); the joined blocks are still the
    # file's samples scaled by 2**-15 (common practice), whatever the piece and block lengths
    from channelizer.io import captures

    monkeypatch.setattr(captures, "CONVERT_PIECE", piece)
    cap, comps = ci16_capture
    for size in (1, 99, 4096, 5000, 10007):
        blocks = list(cap.blocks(size, start=3, stop=cap.num_samples))
        assert all(len(b) == size for b in blocks[:-1])
        assert_scaled(np.concatenate(blocks), comps[6:], "<i2")


def test_nonfinite_samples_found_across_pieces(tmp_path, monkeypatch):
    # NaN and both infinities are the non-finite values of IEEE 754 (from memory); they sit at
    # the end of one piece, the start of the next, and inside a later block
    from channelizer.io import captures

    monkeypatch.setattr(captures, "CONVERT_PIECE", 64)
    x = np.ones(1000, np.complex64)
    x[[63, 64, 700]] = [np.nan, complex(np.inf, 0), complex(0, -np.inf)]
    x.tofile(tmp_path / "nan.cf32")
    cap = open_capture(tmp_path / "nan.cf32", input_format="cf32_le", rate=1e6)
    with pytest.raises(ChannelizerError, match=r"nan\.cf32: sample 63 "):
        list(cap.blocks(500))
    joined = np.concatenate(list(cap.blocks(500, nonfinite="zero")))
    assert cap.nonfinite_count == 3 and np.count_nonzero(joined == 0) == 3 and joined[700] == 0


def test_to_complex64_into_an_array(rng):
    # the same samples as a new array gives: signed 16-bit / 2**15 (common practice, reference_complex)
    comps = random_components(rng, "<i2", 50)
    out = np.full(50, 7 + 7j, np.complex64)
    assert to_complex64(comps, "ci16_le", out=out) is out
    assert_scaled(out, comps, "<i2")
    with pytest.raises(ValueError, match="out: expected a contiguous complex64 array of 50 samples"):
        to_complex64(comps, "ci16_le", out=np.zeros(49, np.complex64))
    with pytest.raises(ValueError, match="complex128"):
        to_complex64(comps, "ci16_le", out=np.zeros(50, np.complex128))


def test_raw_blocks_are_stored_integers(ci16_capture):
    cap, comps = ci16_capture
    blocks = list(cap.raw_blocks(1000, start=5, stop=2500))
    assert [b.shape for b in blocks] == [(1000, 2), (1000, 2), (495, 2)]
    assert all(b.dtype == np.int16 for b in blocks)
    np.testing.assert_array_equal(np.concatenate(blocks), comps[10:5000].reshape(-1, 2))


def test_raw_blocks_big_endian_and_float(tmp_path, rng):
    comps = random_components(rng, ">i2", 64)
    comps.tofile(tmp_path / "be.bin")
    cap = open_capture(tmp_path / "be.bin", input_format="ci16_be", rate=1)
    (block,) = cap.raw_blocks(100)
    assert block.dtype == np.dtype(np.int16)  # native order, values as stored
    np.testing.assert_array_equal(block.reshape(-1), comps)
    np.zeros(8, np.float32).tofile(tmp_path / "f.bin")
    cap = open_capture(tmp_path / "f.bin", input_format="cf32_le", rate=1)
    with pytest.raises(ChannelizerError, match=r"f\.bin.*cf32_le"):
        cap.raw_blocks(10)


def test_block_arguments_checked(ci16_capture):
    cap, _ = ci16_capture
    with pytest.raises(ValueError):
        cap.blocks(0)
    with pytest.raises(ChannelizerError, match="blocks.ci16"):
        cap.blocks(10, start=5, stop=4)
    with pytest.raises(ChannelizerError, match="blocks.ci16"):
        cap.read(10000, 8)
    with pytest.raises(ValueError):
        cap.blocks(10, nonfinite="ignore")


def test_inputs_are_not_modified_and_are_opened_read_only(ci16_capture):
    cap, _ = ci16_capture
    before = (os.stat(cap.data_path).st_mtime_ns, hashlib.sha256(cap.data_path.read_bytes()).hexdigest())
    for block in cap.blocks(999):
        block *= 2  # blocks are the caller's own memory
    # the samples are read through a file opened read-only (O_RDONLY, POSIX open(2))
    import fcntl

    assert fcntl.fcntl(cap._components()._fd, fcntl.F_GETFL) & os.O_ACCMODE == os.O_RDONLY
    after = (os.stat(cap.data_path).st_mtime_ns, hashlib.sha256(cap.data_path.read_bytes()).hexdigest())
    assert before == after


# -- non-finite samples ----------------------------------------------------------------------------


def test_nonfinite_error_names_first_sample(tmp_path, rng):
    x = (rng.standard_normal(5000) + 1j * rng.standard_normal(5000)).astype(np.complex64)
    x[3210] = complex(0, np.inf)
    x[4000] = np.nan
    x.tofile(tmp_path / "nan.cf32")
    cap = open_capture(tmp_path / "nan.cf32", input_format="cf32_le", rate=1e6)
    with pytest.raises(ChannelizerError, match=r"nan\.cf32: sample 3210 "):
        list(cap.blocks(1000))
    with pytest.raises(ChannelizerError, match="sample 4000 "):
        cap.read(3500, 1000)
    blocks = list(cap.blocks(777, nonfinite="zero"))
    assert cap.nonfinite_count == 2
    joined = np.concatenate(blocks)
    assert joined[3210] == 0 and joined[4000] == 0
    np.testing.assert_array_equal(np.delete(joined, [3210, 4000]), np.delete(x, [3210, 4000]))


# -- options ---------------------------------------------------------------------------------------


def test_raw_needs_options(tmp_path):
    path = tmp_path / "x.iq"
    path.write_bytes(bytes(16))
    with pytest.raises(ChannelizerError, match=r"x\.iq.*--input-format and --rate"):
        open_capture(path)
    with pytest.raises(ChannelizerError, match=r"x\.iq.*needs --rate"):
        open_capture(path, input_format="ci16_le")
    with pytest.raises(ChannelizerError, match=r"x\.iq.*needs --input-format"):
        open_capture(path, rate=1e6)
    with pytest.raises(ChannelizerError, match=r"--input-format.*'ci16'"):
        open_capture(path, input_format="ci16", rate=1e6)
    for bad_rate in (0, -5, "fast", float("nan")):
        with pytest.raises(ChannelizerError, match="--rate"):
            open_capture(path, input_format="ci16_le", rate=bad_rate)


def test_sigmf_options_agree_or_fail(tmp_path):
    (tmp_path / "o.sigmf-data").write_bytes(bytes(40))
    write_meta(
        tmp_path / "o.sigmf-meta",
        {"core:datatype": "ci16_le", "core:sample_rate": 61.44e6},
        [{"core:sample_start": 0, "core:frequency": 2.45e9}],
    )
    path = tmp_path / "o.sigmf-meta"
    cap = open_capture(path, input_format="ci16_le", rate="61.44M", center="2.45G")
    assert (cap.sample_rate, cap.center_frequency) == (61.44e6, 2.45e9)
    with pytest.raises(ChannelizerError, match=r"o\.sigmf-meta.*--rate"):
        open_capture(path, rate=30.72e6)
    with pytest.raises(ChannelizerError, match=r"o\.sigmf-meta.*--center"):
        open_capture(path, center=2.4e9)
    with pytest.raises(ChannelizerError, match=r"o\.sigmf-meta.*--input-format"):
        open_capture(path, input_format="ci16_be")


def test_sigmf_missing_rate_supplied_by_option(tmp_path):
    (tmp_path / "n.sigmf-data").write_bytes(bytes(40))
    write_meta(tmp_path / "n.sigmf-meta", {"core:datatype": "ci16_le"})
    with pytest.raises(ChannelizerError, match=r"n\.sigmf-meta.*core:sample_rate"):
        open_capture(tmp_path / "n.sigmf-meta")
    assert open_capture(tmp_path / "n.sigmf-meta", rate=1e6).sample_rate == 1e6


# -- bad SigMF input (SigMF specification: required global fields, types) ---------------------------

GOOD = {"core:datatype": "ci16_le", "core:sample_rate": 1e6}


@pytest.mark.parametrize(
    "meta, data, match",
    [
        (b"{not json", bytes(8), "not JSON"),
        (b"\xff\xfe{}", bytes(8), "not UTF-8"),
        (b"[1, 2]", bytes(8), "list, not an object"),
        (b'"text"', bytes(8), "str, not an object"),
        (b'{"captures": []}', bytes(8), "no 'global'"),
        (b'{"global": []}', bytes(8), "no 'global'"),
        ({"core:sample_rate": 1e6}, bytes(8), "no core:datatype"),
        ({"core:datatype": "ci16_le"}, bytes(8), "no core:sample_rate"),
        ({**GOOD, "core:sample_rate": 0}, bytes(8), "core:sample_rate 0 "),
        ({**GOOD, "core:sample_rate": -1e6}, bytes(8), "core:sample_rate"),
        ({**GOOD, "core:sample_rate": "1e6"}, bytes(8), "core:sample_rate '1e6'"),
        ({**GOOD, "core:sample_rate": True}, bytes(8), "core:sample_rate True"),
        (b'{"global": {"core:datatype": "ci16_le", "core:sample_rate": NaN}}', bytes(8), "sample_rate nan"),
        (b'{"global": {"core:datatype": "ci16_le", "core:sample_rate": 1e999}}', bytes(8), "sample_rate inf"),
        ({**GOOD, "core:datatype": "ci16"}, bytes(8), "core:datatype.*'ci16'"),
        ({**GOOD, "core:datatype": 16}, bytes(8), "core:datatype"),
        (GOOD, bytes(9), "truncated \\(1 bytes left over\\)"),
        (GOOD, bytes(11), "3 bytes left over"),
        (GOOD, b"", "no samples"),
        (GOOD, None, "data file not found"),
        ({**GOOD, "core:num_channels": 2}, bytes(8), "num_channels"),
        ({**GOOD, "core:metadata_only": True}, bytes(8), "metadata_only"),
        ({**GOOD, "core:dataset": "../elsewhere.bin"}, bytes(8), "core:dataset"),
        ({**GOOD, "core:trailing_bytes": -1}, bytes(8), "trailing_bytes"),
    ],
)
def test_bad_sigmf_inputs(tmp_path, meta, data, match):
    meta_path = tmp_path / "bad.sigmf-meta"
    if isinstance(meta, bytes):
        meta_path.write_bytes(meta)
    else:
        write_meta(meta_path, meta)
    if data is not None:
        (tmp_path / "bad.sigmf-data").write_bytes(data)
    with pytest.raises(ChannelizerError, match=r"bad\.sigmf-(meta|data).*" + match) as info:
        open_capture(meta_path)
    assert "\n" not in str(info.value)


def test_bad_capture_segments(tmp_path):
    (tmp_path / "c.sigmf-data").write_bytes(bytes(8))
    for captures, match in [
        ({"core:sample_start": 0}, "captures"),
        ([{"core:sample_start": 0, "core:frequency": "915M"}], "core:frequency"),
        ([{"core:sample_start": 0, "core:header_bytes": 1.5}], "header_bytes"),
        ([{"core:sample_start": 0}, {"core:sample_start": 1, "core:header_bytes": 4}], "later capture"),
    ]:
        write_meta(tmp_path / "c.sigmf-meta", raw_text=json.dumps({"global": GOOD, "captures": captures}))
        with pytest.raises(ChannelizerError, match=r"c\.sigmf-meta.*" + match):
            open_capture(tmp_path / "c.sigmf-meta")


def test_missing_files_named(tmp_path):
    (tmp_path / "only.sigmf-data").write_bytes(bytes(8))
    with pytest.raises(ChannelizerError, match=r"only\.sigmf-meta not found"):
        open_capture(tmp_path / "only.sigmf-data")
    with pytest.raises(ChannelizerError, match=r"nothere\.bin: capture file not found"):
        open_capture(tmp_path / "nothere.bin", input_format="ci16_le", rate=1)
    with pytest.raises(ChannelizerError, match=r"gone\.wav: WAV file not found"):
        open_capture(tmp_path / "gone.wav")
    with pytest.raises(ChannelizerError, match="not a regular file"):
        open_capture(tmp_path, input_format="ci16_le", rate=1)
    # a SigMF archive (a tar file) is refused with advice, not misread
    (tmp_path / "arch.sigmf").write_bytes(bytes(1024))
    with pytest.raises(ChannelizerError, match=r"arch\.sigmf: SigMF archives"):
        open_capture(tmp_path / "arch.sigmf")


def test_capture_is_a_dataclass_with_the_listed_fields():
    names = [f.name for f in dataclasses.fields(Capture) if not f.name.startswith("_")]
    for field in ("path", "data_path", "sample_rate", "center_frequency", "datatype", "num_samples",
                  "data_offset", "metadata", "nonfinite_count"):  # fmt: skip
        assert field in names


# -- property: random bytes never raise anything but ChannelizerError -------------------------------

json_values = st.recursive(
    st.none() | st.booleans() | st.floats(allow_nan=True) | st.integers() | st.text(max_size=8),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=12), inner, max_size=4),
    max_leaves=12,
)
field_values = (
    st.sampled_from(["ci16_le", "cf32_le", "cf64_be", "cu8", "ri8", "ci16", "radio.dat", "."])
    | st.floats(allow_nan=True)
    | st.integers(-10, 10**30)
    | json_values
)
# mostly well-formed metadata with odd values here and there, so the deeper checks are reached
sigmf_like = st.fixed_dictionaries(
    {
        "global": st.fixed_dictionaries(
            {
                "core:datatype": st.sampled_from(["ci16_le", "cf32_le", "cf64_be", "cu8", "ci8"]) | field_values,
                "core:sample_rate": st.floats(min_value=1, max_value=1e9) | field_values,
            },
            optional={key: field_values for key in ["core:num_channels", "core:dataset", "core:trailing_bytes",
                                                    "core:metadata_only"]},
        )
    },
    optional={
        "captures": st.lists(
            st.dictionaries(st.sampled_from(["core:sample_start", "core:frequency", "core:header_bytes"]),
                            st.integers(-5, 50) | st.floats() | json_values),
            max_size=3,
        )
        | json_values,
    },
)  # fmt: skip


def _exercise(tmp_path, meta_bytes, data_bytes):
    (tmp_path / "fz.sigmf-meta").write_bytes(meta_bytes)
    (tmp_path / "fz.sigmf-data").write_bytes(data_bytes)
    (tmp_path / "radio.dat").write_bytes(data_bytes)
    try:
        cap = open_capture(tmp_path / "fz.sigmf-meta")
        for _ in cap.blocks(3):
            pass
    except ChannelizerError:
        pass


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(meta=st.binary(max_size=200), data=st.binary(max_size=64))
def test_random_bytes_only_channelizer_errors(tmp_path, meta, data):
    _exercise(tmp_path, meta, data)


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(doc=sigmf_like | json_values, data=st.binary(max_size=64))
def test_random_json_only_channelizer_errors(tmp_path, doc, data):
    _exercise(tmp_path, json.dumps(doc).encode(), data)
