"""Reading one block ahead on a second thread: same blocks, same order, same pass."""

import threading

import numpy as np
import pytest

from channelizer.errors import ChannelizerError
from channelizer.io.captures import open_capture
from channelizer.io.read_ahead import read_ahead
from channelizer.run import processor
from channelizer.run.extraction import load_plan_file
from channelizer.run.processor import ChannelRequest, extract_channels


def test_blocks_come_in_order_each_seen_by_side_first_on_another_thread():
    # a prefetching reader hands on every item once, in order (common practice for double buffering)
    seen, threads = [], set()

    def side(b):
        seen.append(b)
        threads.add(threading.current_thread().name)

    out = []
    for b in read_ahead(range(7), side):
        assert b in seen  # the side saw the block before the consumer
        out.append(b)
    assert out == list(range(7)) and seen == list(range(7))
    assert threading.main_thread().name not in threads


def test_errors_reach_the_consumer_at_their_block():
    # concurrent.futures re-raises a task's exception in the caller of result() (Python docs, from memory)
    def blocks():
        yield 1
        yield 2
        raise ChannelizerError("capture.sigmf-data: truncated")

    got = []
    with pytest.raises(ChannelizerError, match="truncated"):
        for b in read_ahead(blocks()):
            got.append(b)
    assert got == [1, 2]

    def side(b):
        if b == 3:
            raise ValueError("bad block 3")

    got = []
    with pytest.raises(ValueError, match="bad block 3"):
        for b in read_ahead(range(10), side):
            got.append(b)
    assert got == [0, 1, 2]


def test_a_consumer_that_stops_early_leaves_no_thread():
    # closing a generator runs its with-blocks' exits (PEP 342, from memory): the pool is shut down
    before = threading.active_count()
    gen = read_ahead(iter(range(100)))
    assert next(gen) == 0
    gen.close()
    assert threading.active_count() == before


def _extract(path, plan_path, out, **kw):
    plan, ident = load_plan_file(plan_path)
    reqs = [ChannelRequest("a", 0.0, plan, ident, plan_path), ChannelRequest("b", -300e3, plan, ident, plan_path)]
    res = extract_channels(open_capture(path), reqs, str(out), block_size=4096, **kw)
    data = [np.fromfile(out / f"{n}.sigmf-data", np.complex64) for n in ("a", "b")]
    return res, data


def test_pass_reading_ahead_equals_a_pass_reading_in_line(small_capture, plan_path, tmp_path, monkeypatch):
    # the reference is the pass as written before, reading in line (common practice: a refactor keeps outputs bit for bit)
    ahead, ahead_data = _extract(small_capture, plan_path, tmp_path / "ahead")

    def in_line(blocks, side=None):  # the pass as it was: read, feed the spectrum, run, in one thread
        for b in blocks:
            if side is not None:
                side(b)
            yield b

    monkeypatch.setattr(processor, "read_ahead", in_line)
    plain, plain_data = _extract(small_capture, plan_path, tmp_path / "plain")
    for x, y in zip(ahead_data, plain_data):
        assert x.size > 0 and np.array_equal(x, y)
    assert ahead.overview.segments == plain.overview.segments > 0
    assert np.array_equal(ahead.overview.psd, plain.overview.psd)
    # the option that keeps the pass on one thread gives the same pass
    one, one_data = _extract(small_capture, plan_path, tmp_path / "one", read_ahead=False)
    assert all(np.array_equal(x, y) for x, y in zip(one_data, plain_data))
    assert np.array_equal(one.overview.psd, plain.overview.psd)


def test_the_second_thread_follows_the_consumer_s_error_settings():
    # numpy.errstate is a context variable, so it holds for one thread only (numpy docs, from memory)
    def side(b):
        np.float32(3e38) * np.float32(10)  # overflows float32

    with np.errstate(over="raise"):
        with pytest.raises(FloatingPointError):
            list(read_ahead(range(2), side))
    with np.errstate(over="ignore"):
        assert list(read_ahead(range(2), side)) == [0, 1]


def test_long_outputs_spectrum_from_a_fixed_budget_of_segments(tmp_path):
    # the output spectrum's cost stays bounded: OUTPUT_SEGMENTS periodograms spread evenly over a
    # long output, each as scipy.signal.get_window's periodic Hann and numpy's FFT give it
    # (Welch 1967, modified periodogram averaged; from memory)
    import scipy.signal

    from channelizer.io.sigmf_writer import write_sigmf
    from channelizer.planning.planner import plan_chain
    from channelizer.planning.spec import ChainSpec

    fs = 1e6
    plan_file = tmp_path / "half.yaml"
    plan_file.write_text(plan_chain(ChainSpec(input_rate=fs, bandwidth=380e3, output_rate=500e3)).plan.to_yaml())
    n = 1_400_000
    rng = np.random.default_rng(5)
    x = (0.1 * (rng.standard_normal(n) + 1j * rng.standard_normal(n))).astype(np.complex64)
    base = tmp_path / "long"
    write_sigmf(base, x, datatype="cf32_le", fs=fs, center_frequency=100e6)
    plan, ident = load_plan_file(str(plan_file))
    res = extract_channels(open_capture(str(base) + ".sigmf-meta"), [ChannelRequest("c", 0.0, plan, ident, str(plan_file))],
                           str(tmp_path / "out"))
    y = np.fromfile(tmp_path / "out" / "c.sigmf-data", np.complex64)
    spec = res.channels[0].spectrum
    n_out = y.size
    assert n_out == 700_000  # a length-1.4M sequence decimated by 2 (common practice)
    nper = spec.nperseg
    # segments start every n_out // budget samples (wider than the half-overlap hop here)
    hop = n_out // processor.OUTPUT_SEGMENTS
    assert hop > nper // 2
    assert spec.segments == (n_out - nper) // hop + 1 <= processor.OUTPUT_SEGMENTS
    w = scipy.signal.get_window("hann", nper)
    segs = np.stack([y[j * hop : j * hop + nper] for j in range(spec.segments)]).astype(np.complex128)
    ref = np.fft.fftshift((np.abs(np.fft.fft(segs * w, axis=1)) ** 2).mean(axis=0) / (500e3 * np.dot(w, w)))
    assert np.allclose(spec.psd, ref, rtol=1e-4)
