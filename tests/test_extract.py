"""Extraction end to end: the processor computes exactly what the plan says.

Reference: scipy.signal.upfirdn applied stage by stage (float64) after mixing with
exp(-2j pi f n / fs); SigMF files are checked with the sigmf reference library.
"""

import json
import math

import numpy as np
import pytest

import chain_reference

from channelizer.io.captures import open_capture
from channelizer.io.channels import ChannelEntry, parse_channel_list, parse_channel_option
from channelizer.cli import main
from channelizer.errors import ChannelizerError
from channelizer.run.extraction import run_extraction
from channelizer.planning.planner import plan_chain
from channelizer.planning.spec import ChainSpec
from channelizer.io.sigmf_writer import write_sigmf

FS = 2.4e6
CENTER = 161.0e6


@pytest.fixture(scope="module")
def plan_file(tmp_path_factory):
    d = tmp_path_factory.mktemp("plan")
    plan = plan_chain(ChainSpec(input_rate=FS, bandwidth=12.5e3, output_rate=48e3)).plan
    path = d / "p.yaml"
    path.write_text(plan.to_yaml())
    return str(path), plan


@pytest.fixture(scope="module")
def rational_plan_file(tmp_path_factory):
    d = tmp_path_factory.mktemp("rplan")
    plan = plan_chain(ChainSpec(input_rate=FS, bandwidth=12.5e3, output_rate=36e3)).plan
    assert plan.stages[-1].kind == "resampler"
    path = d / "r.yaml"
    path.write_text(plan.to_yaml())
    return str(path), plan


@pytest.fixture(scope="module")
def capture(tmp_path_factory):
    rng = np.random.default_rng(11)
    n = 120_017  # not a multiple of any decimation
    x = 0.3 * (rng.standard_normal(n) + 1j * rng.standard_normal(n)) / math.sqrt(2)
    t = np.arange(n)
    x += 0.4 * np.exp(2j * np.pi * 150e3 * t / FS)
    x = x.astype(np.complex64)
    d = tmp_path_factory.mktemp("cap")
    base = str(d / "cap")
    write_sigmf(base, x, datatype="cf32_le", fs=FS, center_frequency=CENTER)
    return base + ".sigmf-meta", x


def reference_chain(plan, x, offset):
    """Mix, then upfirdn stage by stage (float64): the definition in the issue text."""
    return chain_reference.reference_chain(plan, x, offset, fs=FS)


def _read(path_base):
    import sigmf

    f = sigmf.sigmffile.fromfile(path_base + ".sigmf-meta")
    f.validate()  # the reference library's own schema check
    return f, f.read_samples()


@pytest.mark.parametrize("which", ["plan_file", "rational_plan_file"])
def test_extract_matches_upfirdn_stage_by_stage(which, request, capture, tmp_path):
    path, plan = request.getfixturevalue(which)
    cap_path, x = capture
    out = tmp_path / "out"
    entries = [ChannelEntry("a", 150e3, True), ChannelEntry("b", CENTER - 400e3, False)]
    res = run_extraction(open_capture(cap_path), entries, str(out), plan_path=path, plots=False)
    for e, ch in zip(entries, res.channels):
        offset = e.frequency if e.is_offset else e.frequency - CENTER
        ref = reference_chain(plan, x, offset)
        f, y = _read(str(out / e.name))
        # count: floor(N_in * L / M) stage by stage (issue definition; common practice)
        assert len(y) == len(ref) == ch.samples
        err = np.sqrt(np.mean(np.abs(y - ref) ** 2) / np.mean(np.abs(ref) ** 2))
        assert err < 1e-5
        g = f.get_global_info()
        assert g["core:sample_rate"] == pytest.approx(plan.output_rate)
        assert g["core:datatype"] == "cf32_le"
        assert f.get_captures()[0]["core:frequency"] == pytest.approx(CENTER + offset)
        assert g["channelizer:channel"] == e.name
        import hashlib

        assert g["channelizer:plan_sha256"] == hashlib.sha256(open(path, "rb").read()).hexdigest()


def test_tone_comes_out_at_its_offset_and_level(plan_file, capture, tmp_path):
    path, plan = plan_file
    cap_path, _ = capture
    run_extraction(open_capture(cap_path), [ChannelEntry("t", 150e3 + 1e3, True)], str(tmp_path), plan_path=path, plots=False)
    _, y = _read(str(tmp_path / "t"))
    y = y[100:]
    n = np.arange(len(y)) + 100
    # the 150 kHz tone lands at -1 kHz in the channel; amplitude 0.4 (unit passband gain)
    e = np.exp(2j * np.pi * -1e3 * n / plan.output_rate)
    a = np.vdot(e, y) / np.vdot(e, e)
    assert abs(a) == pytest.approx(0.4, rel=2e-2)


@pytest.mark.parametrize("block", [1, 7, 4096, 50_001, 1 << 20])
def test_any_block_size_gives_the_same_output(plan_file, capture, tmp_path, block):
    path, _ = plan_file
    cap_path, _ = capture
    outs = []
    for bs, sub in ((block, "x"), (1 << 20, "ref")):
        d = tmp_path / sub
        run_extraction(open_capture(cap_path), [ChannelEntry("c", -300e3, True)], str(d), plan_path=path, plots=False, block_size=bs)
        outs.append(np.fromfile(d / "c.sigmf-data", dtype=np.complex64))
    err = np.sqrt(np.mean(np.abs(outs[0] - outs[1]) ** 2) / np.mean(np.abs(outs[1]) ** 2))
    assert len(outs[0]) == len(outs[1]) and err < 1e-6


def test_summary_and_plots(plan_file, capture, tmp_path):
    path, plan = plan_file
    cap_path, _ = capture
    rc = main(["extract", cap_path, "--plan", path, "--channel", "near=+150k", "--channel", "far=160.7M", "--out", str(tmp_path / "o"), "--quiet"])
    assert rc == 0
    doc = json.loads((tmp_path / "o" / "summary.json").read_text())
    names = [c["name"] for c in doc["channels"]]
    assert names == ["near", "far"]
    near = doc["channels"][0]
    assert near["center_frequency"] == pytest.approx(CENTER + 150e3)
    assert near["output_rate"] == pytest.approx(48e3)
    assert near["samples"] == 120_017 // 50  # floor(N / D), common practice
    assert near["mean_power_dbfs"] == pytest.approx(20 * math.log10(0.4), abs=0.5)
    # group delay of linear-phase stages: (L-1)/2 input samples each, in output samples
    expected = 0.0
    rate = FS
    for st in plan.stages:
        n_taps = st.order * (st.decimation - 1) + 1 if st.kind == "cic" else len(st.taps)
        expected += (n_taps - 1) / 2 * FS / rate
        rate /= st.decimation
    assert near["group_delay_output_samples"] == pytest.approx(expected / 50)
    for f in ("overview.png", "near.png", "far.png"):
        assert (tmp_path / "o" / f).stat().st_size > 1000


def test_channels_file_with_own_plans(plan_file, rational_plan_file, capture, tmp_path):
    p1, _ = plan_file
    p2, _ = rational_plan_file
    cap_path, _ = capture
    lst = tmp_path / "ch.yaml"
    lst.write_text(f"- {{name: one, frequency: '+100k', plan: {p1}}}\n- {{name: two, frequency: 160.9M, plan: {p2}}}\n")
    rc = main(["extract", cap_path, "--channels", str(lst), "--out", str(tmp_path / "o"), "--quiet", "--no-plots"])
    assert rc == 0
    doc = json.loads((tmp_path / "o" / "summary.json").read_text())
    assert [c["output_rate"] for c in doc["channels"]] == [48e3, 36e3]


def test_frequency_rules():
    # a leading sign always means an offset; otherwise absolute when the centre is known
    assert parse_channel_option("a=+25k") == ChannelEntry("a", 25e3, True)
    assert parse_channel_option("a=-25k") == ChannelEntry("a", -25e3, True)
    assert parse_channel_option("a=161.2M") == ChannelEntry("a", 161.2e6, False)
    with pytest.raises(ChannelizerError, match="NAME=FREQ"):
        parse_channel_option("nofreq")
    with pytest.raises(ChannelizerError):
        parse_channel_option("../x=1M")
    assert parse_channel_list("- {name: a, frequency: -1.0e+04}")[0].is_offset


def test_refusals_name_the_numbers(plan_file, capture, tmp_path, capsys):
    path, _ = plan_file
    cap_path, _ = capture
    # outside the captured band
    rc = main(["extract", cap_path, "--plan", path, "--channel", "x=+1.199M", "--out", str(tmp_path / "o")])
    assert rc == 2
    err = capsys.readouterr().err
    assert "leaves the captured band" in err and "1.19" in err
    # rate mismatch: a plan for another input rate
    other = tmp_path / "other.yaml"
    other.write_text(plan_chain(ChainSpec(input_rate=1e6, bandwidth=10e3)).plan.to_yaml())
    rc = main(["extract", cap_path, "--plan", str(other), "--channel", "x=+0", "--out", str(tmp_path / "o2")])
    assert rc == 2
    err = capsys.readouterr().err
    assert "2.4 Msps" in err and "1 Msps" in err
    assert not (tmp_path / "o2" / "x.sigmf-meta").exists()


def test_run_without_plots_audits_without_output_spectra(plan_file, capture, tmp_path):
    # the alias audit reads the input spectrum only; each channel's output spectrum
    # serves its plot, so a run without plots leaves it out
    path, _ = plan_file
    cap_path, _ = capture
    entries = [ChannelEntry("t", 150e3 + 1e3, True)]
    quiet = run_extraction(open_capture(cap_path), entries, str(tmp_path / "q"), plan_path=path, plots=False)
    assert quiet.overview is not None  # what the audit reads
    assert quiet.channels[0].spectrum is None
    from channelizer.run.processor import ChannelRequest, extract_channels
    from channelizer.run.extraction import load_plan_file

    plan, ident = load_plan_file(path)
    req = [ChannelRequest("t", 151e3, plan, ident, path)]
    full = extract_channels(open_capture(cap_path), req, str(tmp_path / "f"))
    assert full.channels[0].spectrum is not None
    no_out = extract_channels(open_capture(cap_path), req, str(tmp_path / "n"), channel_spectra=False)
    assert no_out.channels[0].spectrum is None and no_out.overview is not None
    np.testing.assert_array_equal(no_out.overview.psd, full.overview.psd)


def test_the_plan_file_is_read_and_parsed_once(plan_file, capture, tmp_path, monkeypatch):
    # one read whether the file turns out to hold a chain plan or a bank plan (common practice)
    from channelizer.planning import plan as plan_module
    from channelizer.run import bank_extraction

    path, _ = plan_file
    cap_path, _ = capture
    parsed = []
    real = plan_module.load_plan_text
    monkeypatch.setattr(bank_extraction, "load_plan_text", lambda text, **k: parsed.append(k) or real(text, **k))
    monkeypatch.setattr(plan_module, "load_plan_text", lambda text, **k: parsed.append(k) or real(text, **k))
    rc = main(["extract", cap_path, "--plan", path, "--channel", "a=+150k", "--channel", "b=+0", "--out",
               str(tmp_path / "o"), "--quiet", "--no-plots"])
    assert rc == 0 and parsed == [{"source": path}]
