"""The bank benchmark runs the three paths on the same input and reports ratios (no timing asserted)."""

import json

from channelizer.bench.bank_speed import format_bank_report, run_bank_benchmark
from channelizer.cli import main


def test_bank_benchmark_reports_the_three_paths():
    r = run_bank_benchmark(spacing=200e3, rate=4.8e6, seconds=0.02)
    # centres i * 200k with |i * 200k| + 80k <= 2.4M: |i| <= 11, 23 channels (common practice)
    assert r.channels == 23
    assert r.one_channel_s > 0 and r.bank_s > 0 and r.per_channel_s > 0
    text = format_bank_report(r)
    assert "bank / one channel" in text and "x real time" in text
    # memory beyond the outputs, for half the raster and twice that (11 and 22 channels)
    assert r.memory_channels == (11, 22)
    assert all(m > 0 for m in r.memory_beyond_outputs)
    assert "memory beyond the outputs" in text
    # the engine line says how the branch sums ran: compiled where numba (the fast extra) is
    # installed and the bank is short (K O taps per sample up to COMPILED_UP_TO_TAPS)
    from channelizer.engines import filterbank

    bins, o, taps = (int(w.split()[0].removeprefix("O=")) for w in r.bank_layout.split(", "))
    short = taps // bins * o <= filterbank.COMPILED_UP_TO_TAPS
    assert ("compiled by numba" in r.bank_engine) == (short and filterbank.compiled_kernel() is not None) == bool(r.numba_version)
    assert "engine        " + r.bank_engine in text


def test_engine_line_says_why_the_numpy_paths_ran(monkeypatch):
    # without numba the engine line names the numpy path, why, and the install line
    from channelizer.bench import bank_speed
    from channelizer.engines import filterbank

    monkeypatch.setattr(filterbank, "_KERNEL", [None])
    line = bank_speed._engine("fft")
    assert line.startswith("branch sums by FFT correlation (numpy; compiled loops not available here")
    assert "pip install '.[fast]'" in line


def test_bench_command_with_spacing_writes_json(tmp_path, capsys):
    out = tmp_path / "b.json"
    assert main(["bench", "--spacing", "200k", "--rate", "4.8M", "--seconds", "0.02", "--json", str(out)]) == 0
    doc = json.loads(out.read_text())
    assert doc["channels"] == 23 and doc["spacing"] == 200e3
    assert "one chain each" in capsys.readouterr().out


def test_short_runs_are_repeated_until_the_time_floor():
    # a figure of a millisecond is the best of many runs, a long one of at least three (common practice)
    import time

    import numpy as np

    from channelizer.bench import bank_speed

    made = []

    class Quick:
        def process(self, block):
            pass

    class Slow:
        def process(self, block):
            time.sleep(0.15)

    def make(kind):
        def build():
            made.append(kind)
            return kind()
        return build

    x = np.zeros(10, np.complex64)
    t0 = time.perf_counter()
    bank_speed._best(make(Quick), x)
    quick = made.count(Quick)
    assert quick == bank_speed.MAX_RUNS or time.perf_counter() - t0 >= bank_speed.MIN_TIMED_S
    assert quick > bank_speed.REPEATS
    bank_speed._best(make(Slow), x)
    assert made.count(Slow) == bank_speed.REPEATS
