"""The polyphase DFT bank against an independent reference written from its description.

Reference (the module docstring of channelizer.engines.filterbank): bin ``k`` is
the input mixed by ``exp(-2j pi k m / M)`` then ``scipy.signal.upfirdn(h, ., 1, D)``;
a channel then mixes by its residual at the bin rate and runs its fine stages,
each again an ``upfirdn``.  Only numpy and scipy.signal are used here.
"""

import numpy as np
import pytest
import scipy.signal

from channelizer.errors import ChannelizerError
from channelizer.engines import filterbank
from channelizer.engines.filterbank import BankChannelizer, PolyphaseBank, compiled_kernel
from channelizer.planning.bank import bank_method
from channelizer.planning.stages import FirStage

# the compiled branch sums need numba (the fast extra); without it their cases are skipped
COMPILED = pytest.param("compiled", marks=pytest.mark.skipif(compiled_kernel() is None, reason="numba (the fast extra) is not installed"))


@pytest.fixture
def rng():
    return np.random.default_rng(14)


def noise(rng, n):
    return rng.standard_normal(n) + 1j * rng.standard_normal(n)


def bin_reference(h, x, k, M, D):
    """Bin ``k``: mix by the bin centre, filter, keep every D-th (Crochiere & Rabiner 1983, ch. 7)."""
    m = np.arange(x.size)
    return scipy.signal.upfirdn(h, x * np.exp(-2j * np.pi * k * m / M), 1, D)[: x.size // D]


def assert_bins_equal_reference(y, h, x, M, O, keep):
    """Every kept bin of ``y`` (outputs by bins) against :func:`bin_reference`, to float32 rounding."""
    D = M // O
    bins = range(M) if keep is None else keep
    assert y.shape == (x.size // D, len(bins))  # floor(N / D) outputs (common practice)
    for i, k in enumerate(bins):
        ref = bin_reference(h, x, k, M, D)
        assert np.max(np.abs(y[:, i] - ref)) < 1e-5 * np.max(np.abs(ref))


def feed(runner, x, sizes):
    out, i, k = [], 0, 0
    while i < x.size:
        out.append(runner.process(x[i : i + sizes[k % len(sizes)]]))
        i += sizes[k % len(sizes)]
        k += 1
    return out


@pytest.mark.parametrize("method", ["fft", "direct", COMPILED])
@pytest.mark.parametrize("M,O,K", [(16, 2, 3), (16, 4, 2), (12, 3, 4), (8, 1, 5), (8, 1, 27)])
def test_every_bin_equals_mix_and_upfirdn(rng, M, O, K, method):
    h = scipy.signal.firwin(K * M, 1.0 / M)
    x = noise(rng, 1500)
    bank = PolyphaseBank(h, M, O, method=method)
    y = np.concatenate(feed(bank, x.astype(np.complex64), [7, 300, 1, 64]))
    D = M // O
    assert y.shape == (x.size // D, M)  # floor(N / D) outputs (common practice)
    for k in range(M):
        ref = bin_reference(h, x, k, M, D)
        assert np.max(np.abs(y[:, k] - ref)) < 1e-5 * np.max(np.abs(ref))


@pytest.mark.parametrize("method", ["fft", "direct", COMPILED])
def test_output_does_not_depend_on_block_size(rng, method):
    h = scipy.signal.firwin(6 * 32, 1.0 / 32)
    x = noise(rng, 5000).astype(np.complex64)
    a = np.concatenate(feed(PolyphaseBank(h, 32, 2, keep=[0, 5, 31], method=method), x, [5000]))
    b = np.concatenate(feed(PolyphaseBank(h, 32, 2, keep=[0, 5, 31], method=method), x, [1, 17, 999, 3]))
    assert a.shape == b.shape == (5000 // 16, 3)
    np.testing.assert_allclose(a, b, rtol=0, atol=1e-6)
    if method == "compiled":  # each output row is summed on its own, in one order
        assert np.array_equal(a, b)


def test_a_tone_on_a_bin_centre_comes_out_of_that_bin_only():
    # a tone at bin 3's centre reaches bin 3 at the prototype's DC gain (1) and the
    # other bins through its stopband (Vaidyanathan 1993, ch. 8, from memory)
    M, O = 32, 2
    h = scipy.signal.firwin(8 * M, 1.0 / M, window=("kaiser", 8.0))
    n = np.arange(8192)
    x = np.exp(2j * np.pi * 3 * n / M)
    y = np.concatenate(feed(PolyphaseBank(h, M, O), x, [4096]))
    steady = np.abs(y[64:])
    assert np.allclose(steady[:, 3], 1.0, atol=1e-3)
    others = np.delete(steady, [2, 3, 4], axis=1)
    assert others.max() < 1e-3


def test_channels_equal_bin_then_fine_chain(rng):
    fs, M, O = 96_000.0, 24, 2
    D = M // O
    h = scipy.signal.firwin(5 * M, 1.0 / M)
    fine = (FirStage(2, tuple(scipy.signal.firwin(31, 0.4))),)
    fs_b = fs / D
    channels = [(0, 0.0), (5, 250.0), (23, -1000.0)]
    runner = BankChannelizer(h, M, O, channels=channels, fine_stages=fine, fs=fs)
    x = noise(rng, 4800)
    outs = feed(runner, x.astype(np.complex64), [480, 7, 2000])
    for i, (k, residual) in enumerate(channels):
        y = np.concatenate([o[i] for o in outs])
        b = bin_reference(h, x, k, M, D)
        mixed = b * np.exp(-2j * np.pi * residual * np.arange(b.size) / fs_b)
        ref = scipy.signal.upfirdn(fine[0].taps, mixed, 1, 2)[: b.size // 2]
        assert y.shape == ref.shape
        assert np.max(np.abs(y - ref)) < 1e-5 * np.max(np.abs(ref))


def test_bad_layouts_are_refused():
    with pytest.raises(ChannelizerError, match="multiple of the oversampling"):
        PolyphaseBank(np.ones(30), 10, 3)
    with pytest.raises(ChannelizerError, match="not a multiple of 8 bins"):
        PolyphaseBank(np.ones(30), 8, 2)
    with pytest.raises(ChannelizerError, match="keep"):
        PolyphaseBank(np.ones(32), 8, 2, keep=[8])
    with pytest.raises(ChannelizerError, match="method"):
        PolyphaseBank(np.ones(32), 8, 2, method="blas")


def test_compiled_without_numba_says_how_to_install_it(monkeypatch):
    # where numba is missing, 'compiled' is refused with the install line, and 'auto'
    # takes the path the planner's cost model counts (bank_method)
    monkeypatch.setattr(filterbank, "_KERNEL", [None])
    with pytest.raises(ChannelizerError, match=r"needs numba.*pip install '\.\[fast\]'"):
        PolyphaseBank(np.ones(32), 8, 2, method="compiled")
    assert PolyphaseBank(np.ones(8 * 27), 8, 1).method == bank_method(27, 1, 8)
    assert PolyphaseBank(np.ones(64 * 40), 64, 2).method == bank_method(40, 2, 64) == "fft"
    # numba installed but unable to set up its loops (numba raises RuntimeError where it finds
    # no folder to cache them in): the reason is given, and 'auto' takes the numpy paths
    import builtins

    real_import = builtins.__import__

    def no_cache_folder(name, globals=None, locals=None, fromlist=(), level=0):
        if level and fromlist and "branch_kernel" in fromlist:
            raise RuntimeError("cannot cache function 'branch_sums': no locator available")
        return real_import(name, globals, locals, fromlist, level)

    monkeypatch.setattr(filterbank, "_KERNEL", [])
    monkeypatch.setattr(filterbank, "_KERNEL_WHY", filterbank._KERNEL_WHY)
    monkeypatch.setattr(builtins, "__import__", no_cache_folder)
    with pytest.raises(ChannelizerError, match=r"compiled.*not available.*could not set up.*no locator"):
        PolyphaseBank(np.ones(32), 8, 2, method="compiled")
    assert PolyphaseBank(np.ones(8 * 27), 8, 1).method == bank_method(27, 1, 8)
    assert "no locator" in filterbank.why_not_compiled()  # the bench's engine line says it too


@pytest.mark.skipif(compiled_kernel() is None, reason="numba (the fast extra) is not installed")
def test_auto_compiles_short_banks_only():
    # K O taps per input sample: up to COMPILED_UP_TO_TAPS compiled, beyond it as bank_method says
    limit = filterbank.COMPILED_UP_TO_TAPS
    assert PolyphaseBank(np.ones(8 * limit), 8, 1).method == "compiled"
    assert PolyphaseBank(np.ones(8 * (limit + 1)), 8, 1).method == bank_method(limit + 1, 1, 8) == "fft"


@pytest.mark.parametrize("M,O,K", [(16, 1, 14), (16, 4, 4), (18, 3, 5)])
def test_kept_bins_equal_the_same_bins_of_the_whole_bank(rng, M, O, K):
    # a subset of bins is those columns of the whole bank, on either branch-filter path
    # (the DFT of a subset of outputs is that subset: common practice)
    h = scipy.signal.firwin(K * M, 1.0 / M)
    x = noise(rng, 3000).astype(np.complex64)
    keep = [0, 3, 4, 5, M - 1]
    whole = np.concatenate(feed(PolyphaseBank(h, M, O, method="direct"), x, [3000]))
    for method in ("fft", "direct") + (("compiled",) if compiled_kernel() else ()):
        part = np.concatenate(feed(PolyphaseBank(h, M, O, keep=keep, method=method), x, [700, 5]))
        np.testing.assert_allclose(part, whole[:, keep], rtol=0, atol=1e-5)


@pytest.mark.parametrize("workers", [1, 2])
def test_residue_passes_in_pieces_equal_mix_and_upfirdn(rng, monkeypatch, workers):
    # the FFT path takes the M-point DFT as O transforms of M/O points over a few rows
    # of a frame at a time; forced here into passes of 8 rows, with kept bins in every
    # residue class (M = 24, O = 6: bin k in class k mod 6), in one or two threads;
    # reference: mixing plus scipy.signal.upfirdn (Crochiere & Rabiner 1983, ch. 7)
    monkeypatch.setattr(filterbank, "CHUNK", 8 * 24)
    monkeypatch.setattr(filterbank, "FFT_WORKERS", workers)
    M, O, K = 24, 6, 5
    h = scipy.signal.firwin(K * M, 1.0 / M)
    x = noise(rng, 9000)
    keep = [23, 0, 5, 7, 10, 13, 20]
    bank = PolyphaseBank(h, M, O, keep=keep, method="fft")
    assert bank._N > bank._chunk  # several passes per frame
    y = np.concatenate(feed(bank, x.astype(np.complex64), [4000, 3, 4997]))
    assert_bins_equal_reference(y, h, x, M, O, keep)


# How each path splits a block between two threads, forced to its finest: the FFT path in
# batches of 3 frames through each step, the compiled path in runs of 4 O rows (the least),
# each thread copying the stretch of history and block its rows read.
SPLITS = [
    pytest.param("fft", "BATCH", 3, "_batch", lambda O: 3, id="fft-batches-of-3-frames"),
    pytest.param(
        "compiled", "KERNEL_RUN", 1, "_chunk", lambda O: 4 * O, id="compiled-runs-of-4O-rows",
        marks=pytest.mark.skipif(compiled_kernel() is None, reason="numba (the fast extra) is not installed"),
    ),
]


@pytest.mark.parametrize("method,knob,value,attr,expect", SPLITS)
@pytest.mark.parametrize("M,O,K,keep", [(16, 1, 14, None), (16, 1, 14, [1, 2, 9]), (24, 6, 5, [23, 0, 5, 7, 13]), (12, 3, 4, [11, 0])])
def test_blocks_split_between_two_threads_equal_mix_and_upfirdn(rng, monkeypatch, M, O, K, keep, method, knob, value, attr, expect):
    # blocks of uneven sizes (pieces that straddle the history and the block, a last piece
    # shorter than the others); reference: mixing plus scipy.signal.upfirdn
    # (Crochiere & Rabiner 1983, ch. 7)
    monkeypatch.setattr(filterbank, knob, value)
    monkeypatch.setattr(filterbank, "FFT_WORKERS", 2)
    h = scipy.signal.firwin(K * M, 1.0 / M)
    x = noise(rng, 40000)
    bank = PolyphaseBank(h, M, O, keep=keep, method=method)
    assert getattr(bank, attr) == expect(O)
    y = np.concatenate(feed(bank, x.astype(np.complex64), [17000, 5, 3, 22992]))
    assert_bins_equal_reference(y, h, x, M, O, keep)
