"""Command-line round trips: survey -> channel list -> extract, verify's exit status,
export, and SI-suffixed rates."""

import json
import math
import os

import numpy as np
import pytest
import scipy.signal
import yaml

from channelizer.cli import main
from channelizer.errors import ChannelizerError
from channelizer.io.sigmf_writer import write_sigmf
from channelizer.units import format_hz, parse_frequency

FS = 2.4e6
CENTRE = 100e6


@pytest.mark.parametrize(
    "text, hz",
    [("61.44M", 61.44e6), ("200k", 200e3), ("1.5e6", 1.5e6), ("-25k", -25e3), ("+162.5k", 162.5e3), ("3G", 3e9), (" 48000 ", 48e3)],
)
def test_si_suffixes(text, hz):
    # common practice: k, M, G multiply by 1e3, 1e6, 1e9
    assert parse_frequency(text) == pytest.approx(hz)


@pytest.mark.parametrize("text", ["", "fast", "1..2M", "2MM", "nan", "inf", "1e999"])
def test_malformed_rates_are_refused(text):
    with pytest.raises(ChannelizerError):
        parse_frequency(text, name="rate")


def test_format_hz():
    assert format_hz(61.44e6) == "61.44 MHz" and format_hz(250) == "250 Hz"


@pytest.fixture(scope="module")
def scene(tmp_path_factory):
    """Noise plus two band-limited signals of known width (firwin-shaped noise)."""
    d = tmp_path_factory.mktemp("scene")
    rng = np.random.default_rng(21)
    n = 2**19
    t = np.arange(n)
    noise = (rng.standard_normal(n) + 1j * rng.standard_normal(n)) * 10 ** (-90 / 20) * math.sqrt(FS / 2)
    x = noise.astype(np.complex128)
    for off, bw, amp in ((-300e3, 10e3, 0.05), (250e3, 10e3, 0.02)):
        h = scipy.signal.firwin(2047, bw / 2, fs=FS)
        s = scipy.signal.lfilter(h, 1, rng.standard_normal(n) + 1j * rng.standard_normal(n))
        s *= amp / np.sqrt(np.mean(np.abs(s) ** 2))
        x += s * np.exp(2j * np.pi * off * t / FS)
    base = str(d / "scene")
    write_sigmf(base, x.astype(np.complex64), datatype="cf32_le", fs=FS, center_frequency=CENTRE)
    plan = d / "plan.yaml"
    assert main(["plan", "--rate", "2.4M", "--bandwidth", "12.5k", "--output-rate", "48k", "--out", str(plan)]) == 0
    return base + ".sigmf-meta", str(plan), d


def test_survey_channel_list_feeds_extract(scene, tmp_path, capsys):
    cap, plan, _ = scene
    lst = tmp_path / "found.yaml"
    assert main(["survey", cap, "--resolution", "1k", "--channels-out", str(lst), "--plot", str(tmp_path / "s.png"), "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "Noise floor" in out and "99 % power bandwidth" in out
    rows = yaml.safe_load(lst.read_text())
    centres = sorted(r["frequency"] for r in rows)
    # the two signals were placed at centre -300 kHz and +250 kHz (within one 1 kHz bin, plus
    # the window's half-width)
    assert len(rows) == 2
    assert centres[0] == pytest.approx(CENTRE - 300e3, abs=2.5e3)
    assert centres[1] == pytest.approx(CENTRE + 250e3, abs=2.5e3)
    assert (tmp_path / "s.png").stat().st_size > 10_000
    # the generated list is accepted by extract --channels (with a plan for all)
    assert main(["extract", cap, "--channels", str(lst), "--plan", plan, "--out", str(tmp_path / "x"), "--quiet", "--no-plots"]) == 0
    doc = json.loads((tmp_path / "x" / "summary.json").read_text())
    powers = sorted(c["mean_power_dbfs"] for c in doc["channels"])
    # generated powers 20 log10(0.02) and 20 log10(0.05) (common practice: unit tone = 0 dBFS)
    assert powers[0] == pytest.approx(20 * math.log10(0.02), abs=0.5)
    assert powers[1] == pytest.approx(20 * math.log10(0.05), abs=0.5)


def test_verify_exit_status(scene, tmp_path, capsys):
    _, plan, _ = scene
    assert main(["verify", plan, "--json", str(tmp_path / "v.json"), "--plot", str(tmp_path / "v.png")]) == 0
    doc = json.loads((tmp_path / "v.json").read_text())
    assert doc["meets_spec"] is True
    # a weakened copy: the channel FIR cut to its middle third (taps truncated in the YAML)
    d = yaml.safe_load(open(plan).read())
    fir = next(s for s in d["stages"] if s["kind"] == "fir")
    n = len(fir["taps"])
    fir["taps"] = fir["taps"][n // 3 : n - n // 3]
    weak = tmp_path / "weak.yaml"
    weak.write_text(yaml.safe_dump(d, sort_keys=False))
    assert main(["verify", str(weak)]) == 1
    assert main(["verify", str(tmp_path / "missing.yaml")]) == 2


def test_export_command(scene, tmp_path, capsys):
    _, plan, _ = scene
    assert main(["export", plan, "--out", str(tmp_path / "hw"), "--vectors", "512"]) == 0
    out = capsys.readouterr().out
    assert "meets the spec" in out
    names = set(os.listdir(tmp_path / "hw"))
    assert {"coefficients.h", "bit_widths.csv", "vectors"} <= names


def test_alias_audit_flags_a_folding_signal_only_when_the_plan_lets_it_through(tmp_path):
    """A strong tone placed where the chain folds it onto the channel: the audit's predicted
    output level must match the level measured in the recording (least-squares fit at the
    landing frequency), and be flagged above the noise only for a weak plan."""
    rng = np.random.default_rng(5)
    n = 2**19
    t = np.arange(n)
    noise_dbfs_hz = -120.0
    x = (rng.standard_normal(n) + 1j * rng.standard_normal(n)) * math.sqrt(10 ** (noise_dbfs_hz / 10) * FS / 2)
    f_tone = 48e3 * 3 + 2e3  # folds onto +2 kHz of a 48 ksps channel at the centre
    x = x + 0.3 * np.exp(2j * np.pi * f_tone * t / FS)
    base = str(tmp_path / "cap")
    write_sigmf(base, x.astype(np.complex64), datatype="cf32_le", fs=FS, center_frequency=CENTRE)
    results = {}
    for label, rej in (("weak", "30"), ("strong", "90")):
        plan = tmp_path / f"{label}.yaml"
        assert main(["plan", "--rate", "2.4M", "--bandwidth", "12.5k", "--output-rate", "48k", "--rejection-db", rej, "--out", str(plan)]) == 0
        out = tmp_path / label
        assert main(["extract", base + ".sigmf-meta", "--plan", str(plan), "--channel", "c=+0", "--out", str(out), "--quiet"]) == 0
        audit = json.loads((out / "summary.json").read_text())["channels"][0]["alias_audit"]
        tone = [a for a in audit if abs(a["signal_center_hz"] - (CENTRE + f_tone)) < 2e3]
        assert len(tone) == 1
        y = np.fromfile(out / "c.sigmf-data", dtype=np.complex64)[200:]
        m = np.arange(200, 200 + y.size)
        e = np.exp(2j * np.pi * 2e3 * m / 48e3)
        measured = 20 * math.log10(abs(np.vdot(e, y) / np.vdot(e, e)))
        results[label] = (tone[0], measured)
    weak, measured_weak = results["weak"]
    assert weak["above_noise"] is True
    assert weak["output_level_dbfs"] == pytest.approx(measured_weak, abs=1.0)
    strong, _ = results["strong"]
    assert strong["above_noise"] is False and strong["attenuation_db"] >= 90
