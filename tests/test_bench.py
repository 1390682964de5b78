"""Mechanics of the benchmark and soak runs, at tiny sizes (no timing is asserted).

Outside sources: the length of a down-sampled sequence, floor(N / D) (common
practice; Oppenheim & Schafer 2010 sec. 4.6, from memory) and the output length
of ``scipy.signal.resample_poly``, ceil(N up / down) (its documentation);
``scipy.signal.resample_poly`` as the reference the one-channel output's power is
compared with; ``scipy.signal.kaiserord`` (Kaiser's estimate) and
``scipy.signal.freqz`` for the reference filter; ``numpy.fft`` for the generated
tones; the sigmf reference library for the generated capture.
"""

import hashlib
import json
import math
import os
import subprocess
import sys
import warnings

import numpy as np
import pytest
import scipy
import scipy.signal
import sigmf

from channelizer.bench.measure import BENCH_SPEC, MAX_CHANNELS, SAMPLE_RATE, _write_capture, channel_offsets, run_benchmark, run_soak

from channelizer.bench.reference import reference_filter

from channelizer.bench.report import BenchReport, SoakReport, format_report, format_soak_report
from channelizer.io.captures import open_capture
from channelizer.errors import ChannelizerError

SECONDS = 0.05
N = 3_072_000  # 0.05 s at 61.44 Msps
D = 256  # 61.44 MHz / 240 kHz


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    work = tmp_path_factory.mktemp("bench")
    rep = run_benchmark(seconds=SECONDS, channels=2, workdir=str(work))
    rep.workdir_left = sorted(os.listdir(work))
    return rep


@pytest.fixture(scope="module")
def soak(tmp_path_factory):
    work = tmp_path_factory.mktemp("soak")
    rep = run_soak(gigabytes=0.005, channels=2, workdir=str(work), progress=False)
    rep.workdir_left = sorted(os.listdir(work))
    return rep


def test_benchmark_chain_has_cic_and_halfband(report):
    kinds = [st["kind"] for st in report.plan["stages"]]
    assert kinds[0] == "cic" and "halfband" in kinds
    assert report.plan["total_decimation"] == pytest.approx(SAMPLE_RATE / BENCH_SPEC.output_rate)
    assert report.plan["predicted"]["alias_rejection_db"] >= BENCH_SPEC.rejection_db


def test_report_has_every_figure(report):
    assert report.capture["samples"] == N
    assert report.channels == 2 and report.repeats == 3
    for name in ("reference", "one_channel", "many_channels"):
        t = report.timings[name]
        assert len(t["runs_s"]) == 3 and t["best_s"] == min(t["runs_s"]) > 0
        assert t["input_msps"] > 0 and t["realtime_factor"] > 0
        m = report.memory[name]
        assert m["peak_rss_mb"] >= m["baseline_rss_mb"] > 0
        assert m["peak_heap_mb"] > 0 and m["seconds"] > 0
        if sys.platform.startswith("linux"):  # read from /proc/self/smaps
            # the capture's memory map is resident, at most the whole file (4 bytes a sample)
            # the reader releases pages behind it, so little or nothing of the file stays mapped
                assert 0 <= m["mapped_file_mb"] <= 4 * N / 1e6 + 0.01
    for key in ("speedup_vs_reference", "many_over_one_time", "one_channel_realtime"):
        t = report.targets[key]
        assert set(t) == {"value", "limit", "sense", "met"}
        assert t["met"] == (t["value"] >= t["limit"] if t["sense"] == ">=" else t["value"] <= t["limit"])
    assert report.ratios["speedup_vs_reference"] == pytest.approx(
        report.timings["reference"]["best_s"] / report.timings["one_channel"]["best_s"], rel=1e-3
    )
    env = report.environment
    assert env["cpu_count"] == os.cpu_count()
    assert env["numpy"] == np.__version__ and env["scipy"] == scipy.__version__


def test_temporary_files_are_removed(report, soak):
    assert report.workdir_left == [] and soak.workdir_left == []


def test_json_round_trip(report):
    text = report.to_json()
    doc = json.loads(text)
    assert doc["targets"]["speedup_vs_reference"]["limit"] == 5.0
    again = BenchReport.from_json(text)
    assert again.to_dict() == report.to_dict()


def test_output_lengths_are_floor_n_over_d(report):
    ch = report.checks
    # floor(N / D) outputs for N inputs through a decimation by D (common practice)
    assert ch["expected_outputs"] == N // D == 12_000
    assert ch["one_channel_written"] == [N // D]
    assert ch["many_channels_written"] == [N // D] * 2
    # resample_poly returns ceil(n up / down) samples per call (scipy's documentation)
    block = report.capture["block_size"]
    assert ch["reference_outputs"] == sum(math.ceil(min(block, N - i) / D) for i in range(0, N, block))
    assert ch["lengths_ok"]


def test_one_channel_power_matches_reference(report):
    # The tone (amplitude 0.1, i.e. -20 dBFS) dominates; unit passband gain in both
    # (scipy.signal.resample_poly scales its taps to gain `up` = 1).
    ch = report.checks
    assert ch["one_channel_power_dbfs"] == pytest.approx(-20.0, abs=0.1)
    assert abs(ch["power_difference_db"]) < 0.1


def test_reference_filter_meets_the_spec():
    fs = float(SAMPLE_RATE)
    ref = reference_filter(BENCH_SPEC, fs=fs)
    taps = ref["taps"]
    fp = BENCH_SPEC.bandwidth / 2
    fstop = BENCH_SPEC.output_rate - fp
    # at least Kaiser's estimate for the target (scipy.signal.kaiserord)
    estimate, _ = scipy.signal.kaiserord(BENCH_SPEC.rejection_db, (fstop - fp) / (fs / 2))
    assert len(taps) >= estimate and len(taps) % 2 == 1
    # every frequency folding onto the passband after decimation by D: k fs/D +- fp, k != 0
    rng = np.random.default_rng(20)
    k = np.arange(1, D // 2 + 1)
    centres = k * fs / D
    f = np.concatenate([centres[:, None] + rng.uniform(-fp, fp, (k.size, 40)), [[fstop]] * k.size], axis=1)
    f = f[(f >= fstop) & (f <= fs / 2)].ravel()
    _, h = scipy.signal.freqz(taps, worN=f, fs=fs)
    assert -20 * np.log10(np.abs(h).max()) >= BENCH_SPEC.rejection_db
    _, hp = scipy.signal.freqz(taps, worN=np.linspace(0, fp, 200), fs=fs)
    assert 20 * np.log10(np.abs(hp).max() / np.abs(hp).min()) <= BENCH_SPEC.ripple_db


def test_format_report_names_the_targets(report):
    text = format_report(report)
    assert report.plan["layout"] in text
    assert "reference" in text and "2 channels" in text
    assert text.count(" met") + text.count("MISSED") >= 3


def test_whole_command_is_timed_beside_its_pass(report):
    cmd = report.command
    assert cmd["channels"] == 2 and len(cmd["runs_s"]) == 3 and cmd["best_s"] == min(cmd["runs_s"])
    # the command holds the pass: start-up, plan reading, audit and summary come on top
    assert cmd["best_s"] > cmd["pass_s"] > 0
    assert cmd["outside_pass_s"] == pytest.approx(cmd["best_s"] - cmd["pass_s"], abs=2e-4)
    assert cmd["realtime_factor"] == pytest.approx(SECONDS / cmd["best_s"], rel=1e-3)
    # the reference for two channels: two resample_poly passes of the same run
    assert cmd["reference_s"] == pytest.approx(2 * report.timings["reference"]["best_s"], rel=1e-3)
    assert cmd["speedup_vs_reference"] == pytest.approx(cmd["reference_s"] / cmd["best_s"], rel=1e-3)
    for key in ("command_realtime", "command_speedup_vs_reference"):
        t = report.targets[key]
        assert t["met"] == (t["value"] >= t["limit"])
    assert "whole command" in format_report(report)
    # a fresh interpreter importing numpy alone is a floor under the command (common practice)
    assert 0 < cmd["startup_floor_s"] < cmd["best_s"]
    assert "only imports numpy" in format_report(report)


def test_timed_command_caches_its_bytecode_like_an_installed_package(tmp_path, monkeypatch):
    from channelizer.bench.command import _child_env

    monkeypatch.setenv("PYTHONDONTWRITEBYTECODE", "1")
    env = _child_env(str(tmp_path / "bytecode"))
    assert "PYTHONDONTWRITEBYTECODE" not in env and env["PYTHONPYCACHEPREFIX"] == str(tmp_path / "bytecode")
    done = subprocess.run([sys.executable, "-c", "import channelizer.units"], env=env, capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    # Python writes the compiled module under the prefix, mirroring the source path (PEP 3147, from memory)
    assert list((tmp_path / "bytecode").rglob("units*.pyc"))


def test_soak_mechanics(soak):
    n = int(0.005e9) // 4
    assert soak.samples == n
    assert [o["written"] for o in soak.outputs] == [n // D] * 2  # floor(N / D), common practice
    assert soak.lengths_ok
    m = soak.memory
    assert m["peak_rss_mb"] >= m["baseline_rss_mb"] > 0 and m["peak_heap_mb"] > 0
    assert soak.targets["peak_rss_mb"]["limit"] == 300.0
    assert SoakReport.from_json(soak.to_json()).to_dict() == soak.to_dict()
    assert "soak" in format_soak_report(soak)


@pytest.mark.parametrize(
    "kwargs",
    [{"seconds": 0}, {"seconds": -1.0}, {"seconds": math.nan}, {"seconds": "2"}, {"seconds": 1e-6},
     {"channels": 0}, {"channels": MAX_CHANNELS + 1}, {"channels": 2.5}, {"channels": True}],
)
def test_benchmark_refuses_bad_arguments(kwargs, tmp_path):
    with pytest.raises(ChannelizerError):
        run_benchmark(workdir=str(tmp_path), **kwargs)


@pytest.mark.parametrize("kwargs", [{"gigabytes": 0}, {"gigabytes": math.inf}, {"channels": 0}])
def test_soak_refuses_bad_arguments(kwargs, tmp_path):
    with pytest.raises(ChannelizerError):
        run_soak(workdir=str(tmp_path), progress=False, **kwargs)


def test_channel_offsets_fit_the_capture():
    for n in (1, 2, 8, MAX_CHANNELS):
        offs = channel_offsets(n)
        assert len(offs) == n and len(set(offs)) == n and 0.0 in offs
        assert all(abs(o) + BENCH_SPEC.bandwidth / 2 <= SAMPLE_RATE / 2 for o in offs)


def test_generated_capture_is_deterministic_and_holds_the_tones(tmp_path):
    n = 1 << 16
    tones = [20_000, -2_480_000]
    digests = []
    for i in range(2):
        base = str(tmp_path / f"c{i}")
        _write_capture(base, n, tones=tones)
        with open(base + ".sigmf-data", "rb") as fh:
            digests.append(hashlib.sha256(fh.read()).hexdigest())
    assert digests[0] == digests[1]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        rec = sigmf.sigmffile.fromfile(str(tmp_path / "c0"))
        rec.validate()
    assert rec.get_global_field("core:datatype") == "ci16_le"
    x = open_capture(str(tmp_path / "c0.sigmf-meta")).read(0, n)
    spec = np.abs(np.fft.fft(x * np.hanning(n)))
    bins = np.fft.fftfreq(n, 1 / SAMPLE_RATE)
    top = sorted(bins[np.argsort(spec)[-2:]])
    # each tone's peak within one bin of its frequency (Hann window, common practice)
    for got, want in zip(top, sorted(tones)):
        assert abs(got - want) <= SAMPLE_RATE / n


def test_engine_cost_counts_what_the_runners_do():
    # a CIC runs as its boxcar-power FIR: N (R M - 1) + 1 taps per output (Hogenauer
    # 1981); a polyphase rational stage len(h) / L per output; mixing one per input
    from channelizer.bench.engine_cost import engine_multiplies
    from channelizer.planning.stages import CicStage, FirStage, ResamplerStage

    stages = (CicStage(49, 4), FirStage(5, tuple([0.01] * 85)), ResamplerStage(3, 5, tuple([0.1] * 60)))
    fs = 61.44e6
    want = 1 + (4 * 48 + 1) / 49 + 85 / 245 + (60 / 3) / (245 * 5 / 3)
    assert engine_multiplies(stages, fs=fs) == pytest.approx(want, rel=1e-12)


def test_ranking_check_times_the_fewest_engine_multiplies_where_it_differs():
    # 20 MHz to 240 kHz: the planner's FIR-first choice is not the chain with the fewest
    # engine multiplies (CIC counted as N (R M - 1) + 1 taps per output, Hogenauer 1981)
    from channelizer.bench.engine_cost import RANKING_SPECS, ranking_check
    from channelizer.planning.planner import plan_chain
    from channelizer.planning.spec import ChainSpec

    spec = dict(input_rate=20e6, bandwidth=150e3, output_rate=240e3)
    assert spec in RANKING_SPECS
    (row,) = ranking_check([spec], samples=4096, repeats=1)
    res = plan_chain(ChainSpec(**spec))
    meeting = [res.chosen] + [c for c in res.alternatives if c.meets]
    assert row["chosen"]["layout"] == res.chosen.layout
    assert row["fewest"]["engine"] == min(c.cost.total.multiplies_per_input_sample for c in meeting)
    assert row["fewest"]["engine"] < row["chosen"]["engine"]
    assert row["chosen"]["fir"] < row["fewest"]["fir"]
    assert row["decimation"] == pytest.approx(20e6 / 240e3)  # common practice: input over output rate
    assert row["ratio"] == pytest.approx(row["fewest_ns"] / row["chosen_ns"])
    assert row["chosen_ns"] > 0 and row["fewest_ns"] > 0
