"""Timing in every output recording: datetime, settling annotation, delay and sample mapping.

Checked against things we did not write: scipy.signal.upfirdn (tests/chain_reference.py)
for when the chain has settled and where a tone's phase lands, Python's datetime for
the time arithmetic, and the sigmf reference library for the files.
"""

import datetime as dt
import math

import numpy as np
import pytest
import sigmf

from chain_reference import reference_chain
from channelizer.cli import main
from channelizer.io.captures import open_capture
from channelizer.io.channels import ChannelEntry
from channelizer.io.sigmf_writer import write_sigmf
from channelizer.planning.planner import plan_chain
from channelizer.planning.spec import ChainSpec
from channelizer.run.extraction import run_extraction
from channelizer.run.timing import SETTLING_LABEL, channel_timing, shift_datetime

FS = 1.0e6
START = "2031-03-04T23:59:59.990000Z"


@pytest.fixture(scope="module", params=[40e3, 30e3], ids=["integer", "rational"])
def plan_path(request, tmp_path_factory):
    plan = plan_chain(ChainSpec(input_rate=FS, bandwidth=10e3, output_rate=request.param)).plan
    path = tmp_path_factory.mktemp("plan") / "p.yaml"
    path.write_text(plan.to_yaml())
    return str(path), plan


@pytest.fixture(scope="module")
def capture(tmp_path_factory):
    n = 50_003
    t = np.arange(n)
    x = (0.5 * np.exp(2j * np.pi * 1.5e3 * t / FS)).astype(np.complex64)
    base = str(tmp_path_factory.mktemp("cap") / "cap")
    write_sigmf(base, x, datatype="cf32_le", fs=FS, center_frequency=100e6, capture_extra={"core:datetime": START})
    return base + ".sigmf-meta", x


def _read(base):
    f = sigmf.sigmffile.fromfile(base + ".sigmf-meta")
    f.validate()  # the reference library's schema check
    return f, f.read_samples()


def test_shift_datetime_agrees_with_python_datetime():
    # Python's datetime arithmetic as the reference (microsecond steps are exact there)
    base = dt.datetime(2031, 3, 4, 23, 59, 59, 990000, tzinfo=dt.timezone.utc)
    for shift in (0.0, 0.010001, -0.5, 86400.25, -1e-6):
        want = base + dt.timedelta(seconds=shift)
        got = dt.datetime.strptime(shift_datetime(START, shift)[:-4], "%Y-%m-%dT%H:%M:%S.%f").replace(tzinfo=dt.timezone.utc)
        assert got == want, shift
    assert shift_datetime("2031-03-04 12:00", 1.0) is None  # not SigMF's form
    assert shift_datetime("2020-08-13T06:52:20Z", 0.5) == "2020-08-13T06:52:20.500000000Z"


def test_settling_length_is_where_a_step_reaches_its_final_value(plan_path):
    _, plan = plan_path
    t = channel_timing(plan.stages, fs=FS)
    # a unit step through the upfirdn model against the same chain fed ones for ever:
    # an output is final once every tap sees input (common practice)
    pre = t.step.numerator * (t.settling + 2)  # whole periods of the chain's sample grid
    y = reference_chain(plan, np.ones(20_000), 0.0, fs=FS)
    steady = reference_chain(plan, np.ones(20_000 + pre), 0.0, fs=FS)[pre // t.step.numerator * t.step.denominator :]
    n = min(len(y), len(steady))
    assert np.all(np.abs(y[t.settling : n] - steady[t.settling : n]) < 1e-9)
    # and the count is tight: the output before it still differs.  For a rational stage the
    # count takes the longest polyphase branch, len(h) - 1 input samples at L times the rate;
    # the branch an output actually uses may be shorter, so there it may be one output early
    # (common practice: polyphase branch lengths differ by at most one tap).
    slack = 2 if any(st.interpolation > 1 for st in plan.stages) else 1
    assert max(abs(y[t.settling - k] - steady[t.settling - k]) for k in range(1, slack + 1)) > 1e-12


def test_metadata_datetime_annotation_and_tone_phase(plan_path, capture, tmp_path):
    path, plan = plan_path
    cap_path, x = capture
    run_extraction(open_capture(cap_path), [ChannelEntry("c", 0.0, True)], str(tmp_path), plan_path=path, plots=False)
    f, y = _read(str(tmp_path / "c"))
    cap = f.get_captures()[0]
    t = channel_timing(plan.stages, fs=FS)
    ann = f.get_annotations()
    assert [(a["core:sample_start"], a["core:sample_count"], a["core:label"]) for a in ann] == [(0, t.settling, SETTLING_LABEL)]
    step = cap["channelizer:source_sample_step"]
    assert step == pytest.approx(FS / plan.output_rate)
    assert cap["channelizer:source_sample_start"] == 0
    tau = cap["channelizer:group_delay_source_samples"]
    # the content of output n is the source at sample n*step - tau: compare a tone's phase
    # there with the tone itself (linear-phase stages, common practice)
    n = np.arange(t.settling + 5, len(y))
    src = 0.5 * np.exp(2j * np.pi * 1.5e3 * (n * step - tau) / FS)
    err = np.angle(y[n] * np.conj(src))  # radians
    # on average the delay is exact; a rational stage's polyphase branches spread it a little
    assert abs(np.mean(err)) < 1e-3 and np.max(np.abs(err)) < 0.05
    # datetime moved by -tau / fs: checked with Python's datetime
    want = dt.datetime(2031, 3, 4, 23, 59, 59, 990000, tzinfo=dt.timezone.utc) - dt.timedelta(seconds=tau / FS)
    got = dt.datetime.strptime(cap["core:datetime"][:-4], "%Y-%m-%dT%H:%M:%S.%f").replace(tzinfo=dt.timezone.utc)
    assert abs((got - want).total_seconds()) <= 1e-6


def test_trim_settling_drops_the_start_up_and_moves_the_mapping(plan_path, capture, tmp_path):
    path, plan = plan_path
    cap_path, _ = capture
    for name, extra in (("full", []), ("trim", ["--trim-settling"])):
        rc = main(["extract", cap_path, "--plan", path, "--channel", f"{name}=+0", "--out", str(tmp_path / name), "--no-plots", "--quiet", *extra])
        assert rc == 0
    ff, full = _read(str(tmp_path / "full" / "full"))
    ft, trim = _read(str(tmp_path / "trim" / "trim"))
    t = channel_timing(plan.stages, fs=FS)
    assert np.array_equal(trim, full[t.settling :])
    assert ft.get_annotations() == []
    cap = ft.get_captures()[0]
    assert cap["channelizer:settling_trimmed"] is True
    assert cap["channelizer:source_sample_start"] == pytest.approx(t.settling * FS / plan.output_rate)
    shift = t.settling / plan.output_rate
    a = dt.datetime.strptime(ff.get_captures()[0]["core:datetime"][:-4], "%Y-%m-%dT%H:%M:%S.%f")
    b = dt.datetime.strptime(cap["core:datetime"][:-4], "%Y-%m-%dT%H:%M:%S.%f")
    assert math.isclose((b - a).total_seconds(), shift, abs_tol=2e-6)
