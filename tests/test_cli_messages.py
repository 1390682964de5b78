"""What a new user meets on the command line: version, help for every option, SI units,
suggestions for near misses, warnings on stderr with an exit status that can fail a script.

Sources: argparse's own parser objects (the options we register), pyproject.toml for the
version, and the definitions in the issue text (units, ratios); the folding tone is placed
by the mixing identity (common practice), as in tests/test_commands.py.
"""

import math
import re
import tomllib
from pathlib import Path

import numpy as np
import pytest
import yaml

import channelizer
from channelizer.cli import build_parser, main
from channelizer.io.sigmf_writer import write_sigmf

FS = 2.4e6
CENTRE = 100e6
ROOT = Path(__file__).resolve().parents[1]


def _subparsers(parser):
    for action in parser._actions:
        if action.__class__.__name__ == "_SubParsersAction":
            return action.choices
    return {}


def test_version_is_the_package_version(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["--version"])
    assert exc.value.code == 0
    version = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["version"]
    assert capsys.readouterr().out.strip() == f"channelizer {version}" == f"channelizer {channelizer.__version__}"


def test_every_option_has_help_and_states_its_default():
    for name, sub in _subparsers(build_parser()).items():
        for action in sub._actions:
            if not action.option_strings or action.help == "==SUPPRESS==" or action.dest == "help":
                continue
            where = f"{name} {action.option_strings[0]}"
            assert action.help, where
            if action.default not in (None, False) and action.__class__.__name__ != "_StoreTrueAction":
                assert "default" in action.help, where


@pytest.fixture(scope="module")
def tone_capture(tmp_path_factory):
    """Noise at -120 dBFS/Hz and a 0.3 tone at 3 x 48 kHz + 2 kHz: it folds onto +2 kHz of a
    48 ksps channel at the centre (mixing identity, common practice)."""
    d = tmp_path_factory.mktemp("tone")
    rng = np.random.default_rng(5)
    n = 2**18
    t = np.arange(n)
    x = (rng.standard_normal(n) + 1j * rng.standard_normal(n)) * math.sqrt(1e-12 * FS / 2)
    x = x + 0.3 * np.exp(2j * np.pi * (48e3 * 3 + 2e3) * t / FS)
    base = str(d / "cap")
    write_sigmf(base, x.astype(np.complex64), datatype="cf32_le", fs=FS, center_frequency=CENTRE)
    plans = {}
    for label, rej in (("weak", "30"), ("strong", "90")):
        plans[label] = str(d / f"{label}.yaml")
        assert main(["plan", "--rate", "2.4M", "--bandwidth", "12.5k", "--output-rate", "48k", "--rejection-db", rej, "--out", plans[label]]) == 0
    return base + ".sigmf-meta", plans, d


def test_folded_signal_warns_and_fail_on_alias_sets_the_status(tone_capture, tmp_path, capsys):
    cap, plans, _ = tone_capture
    capsys.readouterr()
    args = ["extract", cap, "--channel", "c=+0", "--no-plots", "--quiet"]
    assert main([*args, "--plan", plans["weak"], "--out", str(tmp_path / "a")]) == 0
    err = capsys.readouterr().err
    assert "warning: channel c:" in err and "100.146 MHz" in err and "above the output noise floor" in err
    assert main([*args, "--plan", plans["weak"], "--out", str(tmp_path / "b"), "--fail-on-alias"]) == 1
    capsys.readouterr()
    assert main([*args, "--plan", plans["strong"], "--out", str(tmp_path / "c"), "--fail-on-alias"]) == 0
    assert "warning" not in capsys.readouterr().err


def test_near_misses_get_suggestions(tone_capture, tmp_path, capsys):
    cap, plans, d = tone_capture
    capsys.readouterr()
    # an absolute frequency that only fits as an offset
    assert main(["extract", cap, "--plan", plans["weak"], "--channel", "c=100k", "--out", str(tmp_path / "x")]) == 2
    assert "write c=+100k" in capsys.readouterr().err
    # a datatype without its byte order
    raw = d / "raw.bin"
    np.zeros(64, dtype="<i2").tofile(raw)
    assert main(["survey", str(raw), "--input-format", "ci16", "--rate", "1M"]) == 2
    assert "ci16_le" in capsys.readouterr().err
    # an unknown option names itself and the command
    assert main(["survey", cap, "--treshold-db", "3"]) == 2
    err = capsys.readouterr().err
    assert "--treshold-db" in err and "survey" in err
    # --clock means nothing to the cpu objective
    assert main(["plan", "--rate", "2.4M", "--bandwidth", "12.5k", "--clock", "100M"]) == 2
    assert "--objective hardware" in capsys.readouterr().err


def test_si_units_and_ratios(tone_capture, tmp_path, capsys):
    cap, plans, _ = tone_capture
    capsys.readouterr()
    # a plan for another rate: the refusal states both rates in SI units
    other = tmp_path / "other.yaml"
    assert main(["plan", "--rate", "1M", "--bandwidth", "12.5k", "--out", str(other)]) == 0
    out = capsys.readouterr().out
    assert "(/" in out.splitlines()[0] and "x0." not in out
    assert main(["extract", cap, "--plan", str(other), "--channel", "c=+0", "--out", str(tmp_path / "x")]) == 2
    err = capsys.readouterr().err
    assert "2.4 Msps" in err and "1 Msps" in err and "e+0" not in err
    # a single multiplier is one multiplier
    assert main(["plan", "--rate", "2.4M", "--bandwidth", "12.5k", "--output-rate", "48k", "--objective", "hardware"]) == 0
    out = capsys.readouterr().out
    count, word = re.search(r"(\d+) (multipliers?) at", out).groups()
    assert word == ("multiplier" if count == "1" else "multipliers")


def test_listed_bandwidth_wider_than_the_plan_warns(tone_capture, tmp_path, capsys):
    cap, plans, _ = tone_capture
    lst = tmp_path / "l.yaml"
    lst.write_text(yaml.safe_dump([{"name": "w", "frequency": CENTRE, "bandwidth": 20e3, "plan": plans["strong"]}]))
    capsys.readouterr()
    assert main(["extract", cap, "--channels", str(lst), "--out", str(tmp_path / "o"), "--no-plots", "--quiet"]) == 0
    err = capsys.readouterr().err
    assert "channel w: listed bandwidth 20 kHz is wider than the passband" in err and "12.5 kHz" in err


def test_survey_plans_out_feeds_extract(tone_capture, tmp_path, capsys):
    cap, _, _ = tone_capture
    lst = tmp_path / "lists" / "found.yaml"
    lst.parent.mkdir()
    assert main(["survey", cap, "--channels-out", str(lst), "--plans-out", str(tmp_path / "plans"), "--quiet"]) == 0
    rows = yaml.safe_load(lst.read_text())
    assert rows and all((lst.parent / r["plan"]).is_file() for r in rows)
    plan = yaml.safe_load((lst.parent / rows[0]["plan"]).read_text())
    assert float(plan["bandwidth"]) >= rows[0]["bandwidth"]  # the plan passes the listed band
    assert main(["extract", cap, "--channels", str(lst), "--out", str(tmp_path / "x"), "--no-plots", "--quiet"]) == 0


def test_survey_plans_never_replace_the_channel_list_or_the_capture(tone_capture, tmp_path, capsys):
    # Every file a command writes is checked against every file it reads and against its
    # other outputs (README, reliability).  Before, a channel list named like a plan file
    # (NAME.yaml in the plans folder) was written over the plan just written there.
    cap, _, _ = tone_capture
    plans = tmp_path / "plans"
    assert main(["survey", cap, "--channels-out", str(tmp_path / "found.yaml"), "--plans-out", str(plans), "--quiet"]) == 0
    capsys.readouterr()
    name = yaml.safe_load((tmp_path / "found.yaml").read_text())[0]["name"]
    clash = plans / f"{name}.yaml"
    before = clash.read_bytes()
    status = main(["survey", cap, "--channels-out", str(clash), "--plans-out", str(plans), "--quiet"])
    err = capsys.readouterr().err.strip().splitlines()
    assert status == 2 and len(err) == 1 and "named twice as an output" in err[0]
    assert clash.read_bytes() == before


def test_demo_capture_folder_is_created(tmp_path, capsys):
    base = tmp_path / "gen" / "x"
    assert main(["demo", "--write-capture", str(base)]) == 0
    assert (tmp_path / "gen" / "x.sigmf-meta").is_file()
