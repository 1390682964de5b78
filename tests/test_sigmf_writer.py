"""Tests for the SigMF writer and for output-name checking.

Outside sources: the `sigmf` reference library (schema validation with
``validate()``, sample decoding with ``read_samples()``), the SigMF
specification (required fields, ordering of captures and annotations,
namespaces declared in ``core:extensions``), and common practice for int16
quantization (full scale 32768, round to nearest, saturate).
"""

import json
import os
import re
import warnings

import numpy as np
import pytest
import sigmf

from channelizer.io.captures import open_capture
from channelizer.errors import ChannelizerError
from channelizer.io.names import safe_output_name
from channelizer.io.sigmf_writer import SIGMF_VERSION, SigmfWriter, write_sigmf


@pytest.fixture
def rng():
    return np.random.default_rng(7781)


def noise(rng, n, scale=0.4):
    return ((rng.standard_normal(n) + 1j * rng.standard_normal(n)) * scale).astype(np.complex64)


def read_with_library(base):
    """Open with the reference library, validate against its schema (warnings are failures)."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        rec = sigmf.sigmffile.fromfile(base)
        rec.validate()
    return rec


def stream(base, x, block_sizes, **kw):
    with SigmfWriter(base, **kw) as w:
        pos = 0
        for size in block_sizes:
            w.write(x[pos : pos + size])
            pos += size
        w.write(x[pos:])
    return w


def test_cf32_validated_and_read_back_by_sigmf(tmp_path, rng):
    x = noise(rng, 5003)
    base = tmp_path / "chan_a"
    w = stream(base, x, [1, 99, 1000, 777], datatype="cf32_le", fs=48e3, center_frequency=162.4e6)
    assert w.num_samples == 5003 and w.clipped == 0
    rec = read_with_library(base)
    assert rec.get_global_field(sigmf.SAMPLE_RATE_KEY) == 48e3
    assert rec.get_captures()[0][sigmf.FREQUENCY_KEY] == 162.4e6
    np.testing.assert_array_equal(rec.read_samples(), x)  # float32 stored exactly
    cap = open_capture(tmp_path / "chan_a.sigmf-meta")
    assert (cap.sample_rate, cap.center_frequency, cap.num_samples) == (48e3, 162.4e6, 5003)
    np.testing.assert_array_equal(cap.read(0, 5003), x)


def test_ci16_quantization_against_sigmf(tmp_path, rng):
    x = noise(rng, 4000, scale=0.45)  # a few components beyond +-1 -> saturated
    x[:6] = [0.5 / 32768, 1.5 / 32768, -0.5 / 32768, 1.0, -1.0, 1 - 1j]
    base = tmp_path / "chan_b"
    w = stream(base, x, [3, 1024, 5], datatype="ci16_le", fs="1.92M")
    # common practice: scale by full scale 32768, round to nearest (ties to even), saturate to int16
    r = np.rint(x.view(np.float32).astype(np.float64) * 32768)
    q = np.clip(r, -32768, 32767)
    expected = (q[0::2] + 1j * q[1::2]) / 32768
    outside = (r != q).reshape(-1, 2)  # a sample is clipped when either component saturates
    clipped_expected = int(np.count_nonzero(outside.any(axis=1)))
    assert w.clipped == clipped_expected and clipped_expected > 2
    rec = read_with_library(base)
    assert rec.get_global_field(sigmf.DATATYPE_KEY) == "ci16_le"
    # the library scales ci16 by 2**-15 (sigmffile._read_datafile)
    np.testing.assert_array_equal(rec.read_samples(), expected.astype(np.complex64))
    np.testing.assert_array_equal(open_capture(base.with_suffix(".sigmf-data")).read(0, 4000),
                                  expected.astype(np.complex64))  # fmt: skip
    raw = np.fromfile(base.with_suffix(".sigmf-data"), "<i2")
    assert list(raw[:12]) == [0, 0, 2, 0, 0, 0, 32767, 0, -32768, 0, 32767, -32768]


def test_metadata_contents(tmp_path):
    base = tmp_path / "meta_check"
    extras = {
        "core:description": "simulated harbour band, channel 3",
        "core:author": "test suite",
        "core:extensions": [{"name": "chz", "version": "0.1.0", "optional": True}],
        "chz:gain_db": np.float32(-3.5),
        "chz:taps": np.arange(3),
    }
    w = write_sigmf(
        base, np.zeros(10, np.complex64), datatype="ci16_le", fs=np.float64(250e3), center_frequency=np.int64(-1500),
        global_extra=extras, capture_extra={"core:datetime": "2024-01-02T03:04:05Z"},
        annotations=[{"core:sample_start": 8, "core:label": "b"}, {"core:sample_start": 2, "core:sample_count": 3}],
    )  # fmt: skip
    text = w.meta_path.read_text()
    doc = json.loads(text)
    g = doc["global"]
    # SigMF specification: required core:datatype and core:version ("X.Y.Z"); recorder names the software
    assert g["core:datatype"] == "ci16_le" and g["core:recorder"] == "channelizer"
    assert re.fullmatch(r"\d+\.\d+\.\d+", g["core:version"]) and g["core:version"] == SIGMF_VERSION
    assert g["core:version"].split(".")[0] == sigmf.__specification__.split(".")[0]
    assert type(g["core:sample_rate"]) is float and g["core:sample_rate"] == 250e3
    assert g["chz:gain_db"] == -3.5 and g["chz:taps"] == [0, 1, 2]
    assert doc["captures"] == [
        {"core:sample_start": 0, "core:frequency": -1500.0, "core:datetime": "2024-01-02T03:04:05Z"}
    ]
    # SigMF specification: annotations sorted by core:sample_start
    assert [a["core:sample_start"] for a in doc["annotations"]] == [2, 8]
    assert "float32" not in text and "NaN" not in text
    rec = read_with_library(base)
    assert len(rec.get_annotations()) == 2


def test_empty_annotations_and_no_frequency(tmp_path):
    w = write_sigmf(tmp_path / "plain", np.ones(4, np.complex64), datatype="cf32_le", fs=1000)
    doc = json.loads(w.meta_path.read_text())
    assert doc["annotations"] == [] and doc["captures"] == [{"core:sample_start": 0}]
    read_with_library(tmp_path / "plain")


def test_add_annotation_during_streaming(tmp_path, rng):
    with SigmfWriter(tmp_path / "ann", datatype="cf32_le", fs=1e3) as w:
        w.write(noise(rng, 50))
        w.add_annotation({"core:sample_start": 10, "core:sample_count": 5, "core:comment": "burst"})
    rec = read_with_library(tmp_path / "ann")
    assert rec.get_annotations()[0]["core:comment"] == "burst"


def test_data_renamed_before_metadata(tmp_path, monkeypatch, rng):
    done = []
    real_replace = os.replace

    def recording_replace(src, dst):
        done.append(os.path.basename(dst))
        real_replace(src, dst)

    monkeypatch.setattr(os, "replace", recording_replace)
    with SigmfWriter(tmp_path / "order", datatype="cf32_le", fs=1e3) as w:
        w.write(noise(rng, 10))
        assert not (tmp_path / "order.sigmf-data").exists()  # nothing under the final name while writing
    # project rule (SigMF practice): data first, metadata last, each via temp name + rename
    assert done == ["order.sigmf-data", "order.sigmf-meta"]


@pytest.mark.parametrize("older", [False, True])
def test_failure_mid_write_leaves_no_new_files(tmp_path, rng, older):
    base = tmp_path / "crash"
    if older:
        (tmp_path / "crash.sigmf-data").write_bytes(b"old data")
        (tmp_path / "crash.sigmf-meta").write_text("old meta")
    with pytest.raises(RuntimeError, match="simulated"):
        with SigmfWriter(base, datatype="ci16_le", fs=1e6) as w:
            w.write(noise(rng, 1000))
            w.write(noise(rng, 1000))
            raise RuntimeError("simulated failure")
    if older:
        assert (tmp_path / "crash.sigmf-data").read_bytes() == b"old data"
        assert (tmp_path / "crash.sigmf-meta").read_text() == "old meta"
        assert sorted(os.listdir(tmp_path)) == ["crash.sigmf-data", "crash.sigmf-meta"]
    else:
        assert os.listdir(tmp_path) == []  # no temporary files either


def test_overwrites_older_recording_on_success(tmp_path, rng):
    (tmp_path / "again.sigmf-data").write_bytes(b"old")
    (tmp_path / "again.sigmf-meta").write_text("old")
    x = noise(rng, 20)
    write_sigmf(tmp_path / "again.sigmf-meta", x, datatype="cf32_le", fs=1e3)
    np.testing.assert_array_equal(read_with_library(tmp_path / "again").read_samples(), x)
    assert sorted(os.listdir(tmp_path)) == ["again.sigmf-data", "again.sigmf-meta"]


def test_one_shot_equals_streamed(tmp_path, rng):
    x = noise(rng, 3001, scale=0.6)
    a = write_sigmf(tmp_path / "one", x, datatype="ci16_le", fs=1e3)
    b = stream(tmp_path / "many", x, [1, 2, 3, 500, 1000], datatype="ci16_le", fs=1e3)
    assert a.clipped == b.clipped and a.num_samples == b.num_samples == 3001
    assert a.data_path.read_bytes() == b.data_path.read_bytes()


@pytest.mark.parametrize(
    "kw, match",
    [
        ({"datatype": "ci8"}, "'ci8' is not supported"),
        ({"datatype": "cf64_le"}, "not supported"),
        ({"fs": 0}, "fs"),
        ({"fs": -48e3}, "fs"),
        ({"fs": float("nan")}, "fs"),
        ({"fs": 2e12}, "fs"),
        ({"center_frequency": float("inf")}, "center_frequency"),
        ({"global_extra": {"core:sample_rate": 5}}, "core:sample_rate"),
        ({"global_extra": {"core:num_channels": 2}}, "core:num_channels"),
        ({"global_extra": {"description": "x"}}, "namespace:name"),
        ({"global_extra": {"chz:x": 1}}, "namespace 'chz'"),
        ({"global_extra": {"core:description": float("nan")}}, "not finite"),
        ({"global_extra": {"core:description": object()}}, "cannot go into JSON"),
        ({"capture_extra": {"core:sample_start": 3}}, "core:sample_start"),
        ({"annotations": [{"core:label": "x"}]}, "core:sample_start"),
        ({"annotations": [{"core:sample_start": -1}]}, "core:sample_start"),
        ({"annotations": [{"core:sample_start": 0, "core:sample_count": 1.5}]}, "core:sample_count"),
        ({"annotations": {"core:sample_start": 0}}, "annotations"),
    ],
)
def test_bad_writer_arguments(tmp_path, kw, match):
    args = {"datatype": "cf32_le", "fs": 48e3, **kw}
    with pytest.raises(ChannelizerError, match=match):
        SigmfWriter(tmp_path / "bad", **args)
    assert os.listdir(tmp_path) == []


def test_missing_output_folder_named(tmp_path):
    with pytest.raises(ChannelizerError, match="no_such_dir"):
        with SigmfWriter(tmp_path / "no_such_dir" / "x", datatype="cf32_le", fs=1):
            pass


def test_write_outside_with_block(tmp_path):
    w = SigmfWriter(tmp_path / "w", datatype="cf32_le", fs=1)
    with pytest.raises(RuntimeError):
        w.write(np.zeros(3, np.complex64))
    with w:
        pass
    with pytest.raises(RuntimeError):
        w.write(np.zeros(3, np.complex64))
    with pytest.raises(TypeError):
        write_sigmf(tmp_path / "real", np.zeros(3, np.float32), datatype="cf32_le", fs=1)


# -- output names ----------------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["ch1", "marine-16", "band_A.narrow", "x" * 100, "A.b-c_d.9", "trailing."])
def test_safe_output_name_accepts(name):
    assert safe_output_name(name) == name


@pytest.mark.parametrize(
    "name, problem",
    [
        ("", "empty"),
        ("x" * 101, "101 characters"),
        ("a/b", "separator"),
        ("a\\b", "separator"),
        ("/etc/passwd", "separator"),
        ("..", "starts with '.'"),
        ("a..b", "'..'"),
        (".hidden", "starts with '.'"),
        ("tab\there", "control"),
        ("nul\x00", "control"),
        ("del\x7f", "control"),
        ("sp ace", "' '"),
        ("C:chan", "':'"),
        ("chañ", "'ñ'"),
        ("a*b", "'\\*'"),
    ],
)
def test_safe_output_name_refuses(name, problem):
    with pytest.raises(ChannelizerError, match=problem) as info:
        safe_output_name(name)
    message = str(info.value)
    assert repr(name)[:40] in message and "letters, digits" in message and "\n" not in message


def test_safe_output_name_non_string():
    with pytest.raises(ChannelizerError):
        safe_output_name(None)
