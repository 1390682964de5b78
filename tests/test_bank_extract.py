"""extract through a bank plan: every raster channel in one pass, against the bank's description.

Reference for each channel (channelizer.engines.filterbank docstring, written
here with numpy/scipy only): mix the capture by the bin centre, upfirdn with the
prototype decimating by M/O, mix by the residual at the bin rate, then upfirdn
each fine stage.  SigMF files are read back with the sigmf reference library.
"""

import json
import math

import numpy as np
import pytest
import scipy.signal

from chain_reference import reference_bank_channel
from channelizer.cli import main
from channelizer.errors import ChannelizerError
from channelizer.io.captures import open_capture
from channelizer.io.channels import parse_channel_option
from channelizer.io.sigmf_writer import write_sigmf
from channelizer.planning.bank_planner import BankSpec, plan_bank
from channelizer.run.bank_extraction import raster_channel_name, run_bank_extraction

sigmf = pytest.importorskip("sigmf")

FS = 2.4e6
CENTER = 161.0e6
TONE = 125e3  # on the raster (10 x 12.5 kHz)


@pytest.fixture(scope="module")
def bank(tmp_path_factory):
    plan = plan_bank(BankSpec(input_rate=FS, bandwidth=10e3, spacing=12.5e3, first=100e3, last=150e3)).plan
    path = tmp_path_factory.mktemp("bank") / "bank.yaml"
    path.write_text(plan.to_yaml())
    return str(path), plan


@pytest.fixture(scope="module")
def capture(tmp_path_factory):
    rng = np.random.default_rng(3)
    n = 96_011  # not a multiple of the bank's decimation
    t = np.arange(n)
    x = 1e-3 * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    x += 0.5 * np.exp(2j * np.pi * TONE * t / FS)
    x = x.astype(np.complex64)
    base = str(tmp_path_factory.mktemp("cap") / "cap")
    write_sigmf(base, x, datatype="cf32_le", fs=FS, center_frequency=CENTER)
    return base + ".sigmf-meta", x


def read(path):
    rec = sigmf.sigmffile.fromfile(path)
    return rec.read_samples(), rec.get_global_info()


def test_every_raster_channel_equals_its_reference(bank, capture, tmp_path):
    path, plan = bank
    meta, x = capture
    out = tmp_path / "all"
    result = run_bank_extraction(open_capture(meta), plan, str(out), plan_source=path, plots=False)
    names = [raster_channel_name(CENTER + off) for off in plan.offsets()]
    assert [c.name for c in result.channels] == names == [f"ch-{161_100_000 + 12_500 * i}" for i in range(5)]
    for i, name in enumerate(names):
        y, info = read(str(out / f"{name}.sigmf-meta"))
        ref = reference_bank_channel(plan, x, i)
        assert y.size == ref.size
        assert np.max(np.abs(y - ref)) < 1e-5
        assert info["core:sample_rate"] == plan.output_rate
        if name == "ch-161125000":  # the tone, past the filters' start-up (common practice)
            assert np.allclose(np.abs(y[50:]), 0.5, atol=2e-3)
        else:  # the neighbours: noise of 2e-6 over 2.4 MHz, 12.5/2400 of it per channel: about -80 dBFS
            assert 10 * math.log10(np.mean(np.abs(y[50:]) ** 2)) < -75
    summary = json.loads((out / "summary.json").read_text())
    powers = {c["name"]: c["mean_power_dbfs"] for c in summary["channels"]}
    # a 0.5-amplitude tone is 20 log10(0.5) = -6.02 dBFS (project convention); it sits
    # on channel 161.125 MHz (the mean includes the start-up), its neighbours see only the noise
    assert abs(powers["ch-161125000"] - 20 * math.log10(0.5)) < 0.3


def test_output_does_not_depend_on_block_size(bank, capture, tmp_path):
    path, plan = bank
    meta, _ = capture
    a = run_bank_extraction(open_capture(meta), plan, str(tmp_path / "a"), plots=False, audit=False, block_size=1 << 20)
    run_bank_extraction(open_capture(meta), plan, str(tmp_path / "b"), plots=False, audit=False, block_size=1000)
    for ca in a.channels:
        ya, _ = read(str(tmp_path / "a" / f"{ca.name}.sigmf-meta"))
        yb, _ = read(str(tmp_path / "b" / f"{ca.name}.sigmf-meta"))
        np.testing.assert_allclose(ya, yb, rtol=0, atol=1e-6)


def test_channel_option_picks_raster_channels(bank, capture, tmp_path):
    path, plan = bank
    meta, x = capture
    entries = [parse_channel_option("voice=161.1375M"), parse_channel_option("low=+100k")]
    result = run_bank_extraction(open_capture(meta), plan, str(tmp_path / "s"), entries=entries, plots=False, audit=False)
    assert [c.name for c in result.channels] == ["voice", "low"]
    y, _ = read(str(tmp_path / "s" / "voice.sigmf-meta"))
    assert np.max(np.abs(y - reference_bank_channel(plan, x, 3))) < 1e-5


def test_off_raster_frequency_names_the_nearest(bank, capture, tmp_path):
    path, plan = bank
    meta, _ = capture
    with pytest.raises(ChannelizerError, match=r"not on the raster.*nearest raster frequency is 161\.1375 MHz"):
        run_bank_extraction(open_capture(meta), plan, str(tmp_path / "o"), entries=[parse_channel_option("x=161.14M")])
    assert not (tmp_path / "o").exists()



def test_bank_and_chain_extractions_take_one_set_of_options(bank, capture, tmp_path):
    # the bank path reads the chain path's options (RunOptions): an option neither
    # knows is refused by both, and one the bank cannot honour is named
    from channelizer.run.extraction import run_extraction

    path, plan = bank
    meta, _ = capture
    with pytest.raises(TypeError, match="colour"):
        run_bank_extraction(open_capture(meta), plan, str(tmp_path / "a"), colour="red")
    with pytest.raises(TypeError, match="colour"):
        run_extraction(open_capture(meta), [], str(tmp_path / "b"), colour="red")
    with pytest.raises(ChannelizerError, match="runs in one process"):
        run_bank_extraction(open_capture(meta), plan, str(tmp_path / "c"), **{"workers": 2})
    assert not any((tmp_path / d).exists() for d in "abc")

@pytest.mark.parametrize(
    "argv,msg",
    [
        (["extract", "{cap}", "--plan", "{plan}", "--out", "{out}", "--bit-true"], "--bit-true does not cover filter-bank plans"),
        (["export", "{plan}", "--out", "{out}"], "filter-bank plan"),
        (["verify", "{plan}", "--bit-true"], "--bit-true does not cover filter-bank plans"),
        (["extract", "{cap}", "--plan", "{plan}", "--out", "{out}", "--channel", "x=161.14M"], "nearest raster frequency"),
    ],
)
def test_commands_refuse_clearly(bank, capture, tmp_path, capsys, argv, msg):
    path, _ = bank
    meta, _ = capture
    argv = [a.format(cap=meta, plan=path, out=str(tmp_path / "out")) for a in argv]
    assert main(argv) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and msg in err[0]


def test_extract_command_writes_the_raster(bank, capture, tmp_path, capsys):
    path, plan = bank
    meta, _ = capture
    assert main(["extract", meta, "--plan", path, "--out", str(tmp_path / "cli"), "--quiet", "--no-plots"]) == 0
    out = capsys.readouterr().out
    assert "5 channel(s), filter-bank path" in out
    assert sorted(p.name for p in (tmp_path / "cli").glob("*.sigmf-meta")) == [f"ch-{161_100_000 + 12_500 * i}.sigmf-meta" for i in range(5)]


def test_audit_of_each_channel_reads_the_prototype_at_the_tone(bank, capture, tmp_path):
    # the tone at +125 kHz lies in an alias band (j x 12.5 kHz +- 5 kHz) of each other raster
    # channel: the audit shares one detection over the channels and must still give each its
    # own attenuation, which is the path's response there: the product of each stage's
    # scipy.signal.freqz at its own rate (a decimating cascade keeps the input frequency;
    # common practice).  The audit states the worst gain over the tone's bins, so it lies
    # between the gain at the tone and the largest gain within +-1 kHz of it.
    path, plan = bank
    meta, _ = capture
    result = run_bank_extraction(open_capture(meta), plan, str(tmp_path / "audit"), plan_source=path, plots=False)

    def gain(f):
        g, rate = np.abs(scipy.signal.freqz(plan.prototype, worN=f, fs=FS)[1]), FS / plan.decimation
        for st in plan.stages:
            taps = st.taps() if callable(st.taps) else st.taps
            g = g * np.abs(scipy.signal.freqz(taps, worN=np.mod(f, rate), fs=rate)[1])
            rate /= st.decimation
        return g

    dc = gain(np.array([0.0]))[0]
    checked = 0
    for ch, off in zip(result.channels, plan.offsets()):
        if abs(off - TONE) < 1.0:
            continue
        entry = [e for e in ch.alias_audit if abs(e["signal_center_hz"] - (CENTER + TONE)) < 500]
        assert len(entry) == 1, ch.name
        u = TONE - off
        att = -20 * np.log10(gain(np.linspace(u - 1e3, u + 1e3, 401)) / dc)
        assert att.min() - 0.5 <= entry[0]["attenuation_db"] <= att[200] + 0.5, ch.name
        checked += 1
    assert checked == 4
