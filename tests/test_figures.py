"""Figures the tool prints, plots or exits with, checked against outside references.

Each check names where its expected value comes from; none is copied from our own output.
"""

import math
import os
import re

import pytest

from channelizer.planning.cost import chain_cost
from channelizer.planning.stages import CicStage, FirStage


def test_multiplier_count_is_exact_arithmetic():
    # CIC/3 then a 41-tap FIR/7 at 61.44 Msps: folded, 21 multiplies per output at
    # 61.44M / 21 = 2.925714... Msps, i.e. exactly 61.44 M multiplies/s; both rails at a
    # 61.44 MHz clock need exactly 2 multipliers, at 122.88 MHz exactly 1 (arithmetic:
    # 2 * 21 * (fs / 21) / clock).  The float product lands at 2.0000000000000004.
    stages = [CicStage(3, 4), FirStage(7, tuple([0.01] * 41))]
    for clock, expected in [(61.44e6, 2), (122.88e6, 1), (20.48e6, 6)]:
        cost = chain_cost(stages, fs=61.44e6, objective="hardware", clock=clock)
        assert cost.stages[1].multipliers == expected


def _refusal(**kw):
    from channelizer.errors import ChannelizerError
    from channelizer.planning.planner import plan_chain
    from channelizer.planning.spec import ChainSpec

    with pytest.raises(ChannelizerError) as exc:
        plan_chain(ChainSpec(**kw))
    return str(exc.value)


def test_stopband_edge_messages_name_the_real_limit():
    # Without --output-rate the only rate is the input's: half of 10 Msps is 5 MHz
    # (arithmetic), so the message must call 5 MHz half the *input* rate.
    msg = _refusal(input_rate=10e6, bandwidth=1e6, stopband_edge=6e6)
    assert "half the input rate (5 MHz)" in msg
    # An edge at 3 MHz needs an output rate above 6 MHz: no decimation by 2 of 10 Msps
    # is left (10/2 = 5 < 6, arithmetic).  The bandwidth alone would allow /8.
    msg = _refusal(input_rate=10e6, bandwidth=1e6, stopband_edge=3e6)
    assert msg.startswith("stopband edge 3 MHz") and "bandwidth" not in msg


def test_output_rate_message_shows_the_rate_as_given():
    # 1.0000001 MHz printed to 6 significant digits reads 1 MHz, a clean /10 (common
    # practice: %g keeps 6 digits).  The chain reaches 1 MHz exactly (10 MHz / 10), so
    # what is printed must state the error against the rate asked for:
    # (1e6 / 1.0000001e6 - 1) * 1e6 = -0.1 ppm (arithmetic).
    from channelizer.planning.planner import plan_chain
    from channelizer.planning.spec import ChainSpec
    from channelizer.views.table import format_plan

    plan = plan_chain(ChainSpec(input_rate=10e6, bandwidth=100e3, output_rate=1.0000001e6)).plan
    text = format_plan(plan)
    want = (plan.output_rate / 1.0000001e6 - 1) * 1e6
    assert want == pytest.approx(-0.1, abs=1e-6)
    assert f"{want:.3f} ppm from the rate asked for" in text and "1e+06" not in text


def test_hardware_refusal_names_the_coefficient_width():
    # Rounding taps to b bits leaves a floor near 6.02 b dB below the peak tap
    # (common practice), less the sum over the taps: 18 bits reach about 90-97 dB,
    # short of 100 dB, while exact taps meet it.  The message must name the width.
    msg = _refusal(input_rate=61.44e6, bandwidth=200e3, output_rate=256e3, objective="hardware",
                   rejection_db=100.0, ripple_db=0.05)
    assert "droop" not in msg and "18-bit coefficients" in msg
    need = int(re.search(r"--coefficient-bits (\d+)", msg).group(1))
    reached = float(re.search(r"rejection ([\d.]+) dB;", msg).group(1))
    assert 19 <= need <= 22 and 85.0 < reached < 100.0


def _plan_file(tmp_path, name, **kw):
    from channelizer.planning.planner import plan_chain
    from channelizer.planning.spec import ChainSpec

    path = tmp_path / name
    path.write_text(plan_chain(ChainSpec(**kw)).plan.to_yaml())
    return str(path)


def test_export_exit_status_follows_the_verdict(tmp_path, capsys):
    from channelizer.cli import main

    # 18-bit coefficients cannot hold 150 dB: rounding leaves a floor near
    # 6.02 x 18 = 108 dB below the peak tap at best (common practice).
    plan = _plan_file(tmp_path, "deep.yaml", input_rate=1e6, bandwidth=20e3, rejection_db=150.0)
    out = tmp_path / "hw"
    assert main(["export", plan, "--out", str(out), "--vectors", "0"]) == 1
    captured = capsys.readouterr()
    assert "does NOT meet the spec" in captured.out
    assert re.search(r"\d+-bit coefficients would meet it", captured.err)
    assert (out / "bit_widths.csv").exists()  # the files are still written


def test_verify_limited_by_its_own_floor_is_inconclusive(tmp_path, capsys):
    from channelizer.checks.verify import verify_plan
    from channelizer.cli import EXIT_INCONCLUSIVE, main
    from channelizer.planning.plan import Plan

    # An 8-bit output word cannot show 80 dB: a full-scale tone's quantisation SNR is
    # 6.02 x 8 + 1.76 = 49.9 dB (Bennett 1948; common practice), so a bit-true sweep of
    # an 80 dB plan ends at its own floor and must not say "does not meet".
    plan = _plan_file(tmp_path, "o8.yaml", input_rate=1e6, bandwidth=20e3, output_bits=8)
    v = verify_plan(Plan.from_yaml(open(plan).read()), bit_true=True, tones=20)
    # the sweep's own floor stops it short of the plan's 80 dB (how far short depends on how
    # many samples each tone's fit averages, so only the side of 80 dB is checked)
    assert v.floor_limited and v.measured_rejection_db < 80.0
    assert v.verdict == "inconclusive" and v.to_dict()["verdict"] == "inconclusive"
    assert main(["verify", plan, "--bit-true", "--tones", "20"]) == EXIT_INCONCLUSIVE == 3
    assert "inconclusive" in capsys.readouterr().out


def test_a_closed_pipe_loses_no_file(tmp_path):
    # `cmd | head -1`: the reader closes the pipe after one line, and every later
    # write to it fails with EPIPE (POSIX write(2); Python docs, signal module,
    # "Note on SIGPIPE").  The files asked for must still be written.
    import subprocess
    import sys

    yaml_path, png_path = tmp_path / "F.yaml", tmp_path / "P.png"
    proc = subprocess.Popen(
        [sys.executable, "-m", "channelizer", "plan", "--rate", "61.44M", "--bandwidth", "200k",
         "--out", str(yaml_path), "--plot", str(png_path)],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=tmp_path,
    )
    first = proc.stdout.readline()
    proc.stdout.close()
    err = proc.stderr.read()
    assert proc.wait(timeout=300) == 0, err
    assert first.startswith(b"Chain:")
    assert yaml_path.stat().st_size > 0 and png_path.stat().st_size > 0
    assert b"Traceback" not in err and b"Exception ignored" not in err


def _append_chunk(path, cid, body):
    """Append a RIFF chunk and fix the RIFF size (Microsoft/IBM RIFF specification, 1991)."""
    import struct

    with open(path, "r+b") as fh:
        fh.seek(0, 2)
        fh.write(cid + struct.pack("<I", len(body)) + body + b"\0" * (len(body) & 1))
        end = fh.tell()
        fh.seek(4)
        fh.write(struct.pack("<I", end - 8))


def test_wav_with_several_data_chunks_is_not_read_in_part(tmp_path):
    import numpy as np
    import scipy.io.wavfile

    from channelizer.errors import ChannelizerError
    from channelizer.io.captures import open_capture

    iq = np.zeros((100, 2), dtype=np.int16)
    path = tmp_path / "iq.wav"
    scipy.io.wavfile.write(path, 48000, iq)  # one fmt and one data chunk (scipy.io.wavfile)
    _append_chunk(path, b"LIST", b"INFOjunk")  # a non-data chunk after the data is fine
    assert open_capture(str(path)).num_samples == 100
    _append_chunk(path, b"data", np.ones((50, 2), dtype=np.int16).tobytes())
    with pytest.raises(ChannelizerError, match="2 data chunks"):
        open_capture(str(path))


def _raw_tone(tmp_path, *, amplitude, n, fs):
    """A complex tone at 0 Hz offset stored as raw cf32_le (a complex tone of amplitude a is
    20 log10 a dBFS: common practice)."""
    import numpy as np

    path = tmp_path / "tone.cf32"
    (np.full(n, amplitude, dtype=np.complex64)).tofile(path)
    return str(path)


def _extract(tmp_path, capture, plan, fs, *extra):
    import json

    from channelizer.cli import main

    out = tmp_path / "out"
    rc = main(["extract", capture, "--input-format", "cf32_le", "--rate", str(fs), "--plan", plan,
               "--channel", "c=+0", "--out", str(out), "--no-plots", "--quiet", *extra])
    return rc, json.loads((out / "summary.json").read_text())["channels"][0]


def test_clipping_is_said_on_stderr_with_the_gain_that_fits(tmp_path, capsys):
    import math

    # A tone of amplitude 4 (12.04 dB over full scale: 20 log10 4) at the channel centre
    # passes the unit-DC-gain chain and saturates every ci16 sample after start-up.
    plan = _plan_file(tmp_path, "p.yaml", input_rate=1e6, bandwidth=20e3)
    cap = _raw_tone(tmp_path, amplitude=4.0, n=100_000, fs=1e6)
    rc, ch = _extract(tmp_path, cap, plan, 1e6, "--output-format", "ci16_le")
    err = capsys.readouterr().err
    assert rc == 0 and ch["clipped_samples"] > 0.9 * ch["samples"]
    m = re.search(r"(\d+) of (\d+) samples clipped.*gain of (-?[\d.]+) dB", err)
    assert m and int(m.group(1)) == ch["clipped_samples"]
    # the peak, start-up overshoot included, from an independent cascade of
    # scipy.signal.upfirdn over the plan's stage responses (CIC as its boxcar power)
    import numpy as np
    import scipy.signal

    from channelizer.planning.plan import Plan

    y = np.full(100_000, 4.0)
    for st in Plan.from_yaml(open(plan).read()).stages:
        taps = st.taps() if callable(st.taps) else np.asarray(st.taps)
        y = scipy.signal.upfirdn(taps, y, 1, st.decimation)[: len(y) // st.decimation]
    fit = 20 * math.log10((1 - 2.0**-15) / np.abs(y).max())
    assert float(m.group(3)) == pytest.approx(fit, abs=0.06)
    assert fit <= -20 * math.log10(4.0)  # never less than the tone's own 12.04 dB


def test_mean_power_is_the_settled_power(tmp_path):
    # A steady tone of amplitude 0.1 at the channel centre is -20 dBFS (20 log10 0.1);
    # the chain has unit gain at DC, so once settled the output is -20 dBFS exactly.  A
    # capture only a few impulse responses long makes the start-up weigh in the mean.
    from channelizer.planning.plan import Plan

    plan = _plan_file(tmp_path, "p.yaml", input_rate=1e6, bandwidth=20e3)
    length, step = 0, 1  # impulse response length in input samples: taps at each stage's rate
    for st in Plan.from_yaml(open(plan).read()).stages:
        length += (st.num_taps - 1) * step
        step *= st.decimation
    n = 3 * length
    cap = _raw_tone(tmp_path, amplitude=0.1, n=n, fs=1e6)
    rc, ch = _extract(tmp_path, cap, plan, 1e6)
    assert rc == 0 and ch["power_from_sample"] > 0
    assert ch["mean_power_dbfs"] == pytest.approx(-20.0, abs=0.01)


def test_bit_true_dc_offset_is_a_spur_not_an_alias(tmp_path):
    # 8 Msps -> 8 ksps, 3 kHz, 90 dB: alias tones such as 415995 Hz land 5 Hz from DC
    # (415995 - 52 x 8000 = -5, arithmetic), on top of the integer path's constant offset.
    # Hogenauer's pruning floors the first integrator's input by d1 bits (the plan's
    # pruned_bits[0], which is what the chain builds): a mean of -(2^d1 - 1)/2 input LSBs
    # on each rail (Hogenauer 1981, truncation error mean; the later sources see the combs'
    # zeros at DC), so a complex offset of sqrt(2) (2^d1 - 1) / 2 / 32768 of full scale,
    # give or take the half-up roundings after it; d1 = 3 gives -76.4 dBFS.
    from channelizer.checks.verify import verify_plan
    from channelizer.planning.plan import Plan
    from channelizer.planning.stages import CicStage

    path = _plan_file(tmp_path, "p.yaml", input_rate=8e6, bandwidth=3e3, output_rate=8e3, rejection_db=90.0)
    plan = Plan.from_yaml(open(path).read())
    d1 = next(st for st in plan.stages if isinstance(st, CicStage)).pruned_bits[0]
    bound = 20 * math.log10(math.sqrt(2) * max(2**d1 - 1, 1) / 2 / 32768)
    v = verify_plan(plan, bit_true=True)
    near = [t for t in v.aliases if abs(t.landing_hz) < 10.0]
    assert near, "the sweep must hold a tone landing next to DC"
    for t in near:  # predicted: the quantised taps' response (scipy.signal.freqz per stage)
        assert t.measured_db <= max(t.predicted_db, t.floor_db) + 3.0 < -90.0
    assert v.verdict == "meets" and v.measured_rejection_db >= 90.0
    assert v.dc_spur_dbfs is not None and -120.0 < v.dc_spur_dbfs < bound + 1.0
    assert any(line.startswith("DC spur:") for line in v.summary_lines())


RATIONAL_PLAN = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "plans",
                             "narrow-61m44-to-25k-rational.yaml")


def test_plan_plot_draws_the_rational_composite_at_unit_gain(monkeypatch, tmp_path):
    # An up-by-L stage's filter has gain L to make up for the L-1 inserted zeros
    # (Oppenheim & Schafer 2010, sec. 4.6.2), so the chain as a whole passes DC at
    # 0 dB; drawn without dividing by L it sits at 20 log10 5 = 14 dB.
    import numpy as np

    from channelizer.planning.plan import Plan
    from channelizer.views import plots

    figures = []
    monkeypatch.setattr(plots, "save_figure", lambda fig, path: figures.append(fig))
    plan = Plan.from_yaml(open(RATIONAL_PLAN).read())
    plots.plot_plan(plan, str(tmp_path / "p.png"))
    (fig,) = figures
    levels = []
    for ax in fig.axes[:2]:
        for line in ax.get_lines():
            if line.get_label() in ("composite", "direct path (no folding)"):
                x, y = np.asarray(line.get_xdata(), float), np.asarray(line.get_ydata(), float)
                levels.append(float(y[np.argmin(np.abs(x))]))
        for band in ax.collections:  # the composite drawn as a min/max band over dense columns
            if band.get_label() == "composite":
                xy = np.concatenate([p.vertices for p in band.get_paths()])
                near = np.abs(xy[:, 0]) <= np.min(np.abs(xy[:, 0])) + 1e-9
                levels.append(float(np.max(xy[near, 1])))
    assert len(levels) == 2 and all(abs(v) < 0.1 for v in levels)


def test_printed_worst_inside_the_passband_is_called_an_image(tmp_path):
    # The direct path passes its own passband unattenuated, so a worst "alias" at a
    # frequency inside +-bw/2 can only come through another image path of the
    # rational stage (Oppenheim & Schafer 2010, sec. 4.6: up-sampling makes L-1 images).
    from channelizer.planning.plan import Plan
    from channelizer.views.table import format_plan

    plan = Plan.from_yaml(open(RATIONAL_PLAN).read())
    assert abs(plan.predicted["worst_alias_hz"]) < plan.bandwidth / 2
    line = next(ln for ln in format_plan(plan).splitlines() if ln.startswith("Predicted alias rejection"))
    assert re.search(r"image path [1-4] of the x5/6 stage, not an alias", line)


def test_alias_audit_level_through_a_rational_plan_matches_an_upfirdn_cascade(tmp_path):
    # 2.4 Msps -> 25.6 ksps (x4/5 last): a tone 35 kHz from the channel reaches the
    # passband through image paths.  Its level there, from an independent cascade of
    # scipy.signal.upfirdn over the plan's stages (a rational stage as
    # upfirdn(h, x, L, M)) and a least-squares fit of the landing exponentials, must
    # match the audit's predicted output level.
    import json

    import numpy as np
    import scipy.signal

    from channelizer.cli import main
    from channelizer.planning.plan import Plan
    from channelizer.planning.response import fold, resampler_of

    fs, f_t, n = 2.4e6, 35e3, 600_000
    plan_path = _plan_file(tmp_path, "r.yaml", input_rate=fs, bandwidth=20e3, output_rate=25.6e3)
    plan = Plan.from_yaml(open(plan_path).read())
    t = np.arange(n)
    x = np.exp(2j * np.pi * f_t / fs * t)
    noise = np.random.default_rng(1).normal(0, 1e-5, (n, 2)) @ np.array([1, 1j])
    (x + noise).astype(np.complex64).tofile(tmp_path / "cap.cf32")

    y = x
    for st in plan.stages:
        taps = st.taps() if callable(st.taps) else np.asarray(st.taps)
        y = scipy.signal.upfirdn(taps, y, st.interpolation, st.decimation)[: len(y) * st.interpolation // st.decimation]
    res, fs_r = resampler_of(plan.stages, fs=fs)
    lands = fold(f_t + np.arange(res.interpolation) * fs_r, plan.output_rate)
    y = y[2000:]
    m = np.arange(2000, 2000 + y.size)
    E = np.exp(2j * np.pi * np.outer(m, lands) / plan.output_rate)
    a = np.linalg.lstsq(E, y, rcond=None)[0]
    expected = 10 * np.log10(np.sum(np.abs(a[np.abs(lands) <= 10e3]) ** 2))

    out = tmp_path / "out"
    assert main(["extract", str(tmp_path / "cap.cf32"), "--input-format", "cf32_le", "--rate", "2.4M",
                 "--plan", plan_path, "--channel", "c=+0", "--out", str(out), "--no-plots", "--quiet"]) == 0
    audit = json.loads((out / "summary.json").read_text())["channels"][0]["alias_audit"]
    (entry,) = [e for e in audit if abs(e["signal_center_hz"] - f_t) < 2e3]
    assert entry["output_level_dbfs"] == pytest.approx(expected, abs=1.5)


def test_alias_audit_resolves_narrow_channels_and_clips_attenuation(tmp_path):
    # A 20 kHz channel at 61.44 Msps: at the old rate/4096 = 15 kHz bins two signals
    # 15 kHz apart share a bin and merge; resolving them needs bins a small fraction
    # of the spacing (a Hann window's main lobe is 4 bins wide: Harris 1978, Table 1).
    import json

    import numpy as np
    import scipy.signal

    from channelizer.checks.alias_audit import format_attenuation
    from channelizer.cli import main
    from channelizer.planning.plan import Plan
    from channelizer.planning.stages import CicStage

    fs, n = 61.44e6, 1_000_000
    t = np.arange(n)
    x = 0.1 * np.exp(2j * np.pi * 200e3 / fs * t) + 0.1 * np.exp(2j * np.pi * 215e3 / fs * t)
    x += 0.5 * np.exp(2j * np.pi * 5e6 / fs * t)
    x += np.random.default_rng(0).normal(0, 1e-3, (n, 2)) @ np.array([1, 1j])
    x.astype(np.complex64).tofile(tmp_path / "cap.cf32")

    def audit(*extra):
        out = tmp_path / f"out{len(extra)}"
        assert main(["extract", str(tmp_path / "cap.cf32"), "--input-format", "cf32_le", "--rate", "61.44M",
                     "--plan", RATIONAL_PLAN, "--channel", "c=+0", "--out", str(out), "--no-plots", "--quiet",
                     *extra]) == 0
        return json.loads((out / "summary.json").read_text())

    doc = audit()
    assert doc["audit_resolution_hz"] <= 20e3 / 16
    entries = doc["channels"][0]["alias_audit"]
    centres = sorted(e["signal_center_hz"] for e in entries)
    assert len(centres) == 3 and abs(centres[0] - 200e3) < 1e3 and abs(centres[1] - 215e3) < 1e3

    # The CIC alone (N=7, R=1024) attenuates 5 MHz by far more than 150 dB (its
    # impulse response through scipy.signal.freqz), beyond what float32 samples
    # (2**-24 = -144.5 dB, IEEE 754) can show: the audit must say "> 150 dB".
    (cic,) = [s for s in Plan.from_yaml(open(RATIONAL_PLAN).read()).stages if isinstance(s, CicStage)]
    _, h = scipy.signal.freqz(cic.taps(), worN=[5e6], fs=fs)
    assert -20 * np.log10(abs(h[0])) > 150
    (far,) = [e for e in entries if abs(e["signal_center_hz"] - 5e6) < 2e3]
    assert far["attenuation_db"] == 150.0 and far["attenuation_beyond_ceiling"]
    assert format_attenuation(far) == "> 150 dB"

    # --audit-resolution is honoured (61.44 MHz / 15 kHz = 4096 bins exactly)
    assert audit("--audit-resolution", "15k")["audit_resolution_hz"] == 15e3


def test_audit_spectrum_has_no_segment_across_skipped_blocks(tmp_path, monkeypatch):
    # On a long capture the audit's spectrum reads segments spread over the file.  A Welch
    # segment spanning two blocks far apart in the file would hold a phase jump,
    # whose spectrum falls only as 1/f (a step's transform, common practice) and
    # smears a strong tone over the whole band.  Here a clean tone 80 dB above
    # white noise must leave the band 300 kHz away at the noise floor.
    import numpy as np

    from channelizer.io.captures import open_capture
    from channelizer.planning.plan import Plan
    from channelizer.run import processor
    from channelizer.run.processor import ChannelRequest, extract_channels

    monkeypatch.setattr(processor, "OVERVIEW_SEGMENTS", 4)  # a few segments, far apart
    fs, n = 1e6, 1 << 18
    t = np.arange(n)
    x = np.exp(2j * np.pi * 123.4567e3 / fs * t)
    x += np.random.default_rng(2).normal(0, 1e-4, (n, 2)) @ np.array([1, 1j])  # -77 dBFS total
    x.astype(np.complex64).tofile(tmp_path / "cap.cf32")
    cap = open_capture(str(tmp_path / "cap.cf32"), input_format="cf32_le", rate=fs)
    plan = Plan.from_yaml(open(_plan_file(tmp_path, "p.yaml", input_rate=fs, bandwidth=20e3)).read())
    res = extract_channels(cap, [ChannelRequest("c", 0.0, plan)], str(tmp_path / "out"), block_size=8192)
    psd = res.overview
    far = np.abs(psd.freqs - 123.4567e3) > 300e3
    noise_density = 10 * np.log10(2e-8 / fs)  # 2 sigma^2 over fs: -137 dBFS/Hz
    assert 10 * np.log10(np.median(psd.psd[far])) < noise_density + 3
