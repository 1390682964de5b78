"""The overview spectrum from a budget of spaced segments, against scipy.signal.welch."""

import numpy as np
import pytest
import scipy.signal

from channelizer.dsp.spaced_welch import SpacedWelch

FS = 1.0e6


def _noise_and_tone(n, seed=3):
    rng = np.random.default_rng(seed)
    x = (rng.standard_normal(n) + 1j * rng.standard_normal(n)) * 0.01
    x += 0.3 * np.exp(2j * np.pi * 0.123 * np.arange(n))
    return x.astype(np.complex64)


def _welch(x, nperseg, noverlap):
    # scipy.signal.welch, two-sided density, as the module docstring states
    f, p = scipy.signal.welch(x, FS, "hann", nperseg, noverlap, detrend=False, return_onesided=False, scaling="density")
    return np.fft.fftshift(p)


def test_short_stream_is_the_ordinary_overlapped_welch():
    x = _noise_and_tone(40 * 256)
    acc = SpacedWelch(fs=FS, nperseg=256, total=x.size, segments=10_000)
    acc.update(x)
    got = acc.result()
    assert acc.hop == 128 and got.segments == (x.size - 256) // 128 + 1
    np.testing.assert_allclose(got.psd, _welch(x, 256, 128), rtol=2e-4)


def test_long_stream_averages_the_grid_segments_only():
    n, nper, budget = 200_000, 256, 50
    x = _noise_and_tone(n)
    acc = SpacedWelch(fs=FS, nperseg=nper, total=n, segments=budget)
    acc.update(x)
    got = acc.result()
    hop = n // budget
    starts = range(0, n - nper + 1, hop)
    picked = np.concatenate([x[s : s + nper] for s in starts])
    # non-overlapping segments laid end to end: welch with noverlap 0 averages exactly them
    np.testing.assert_allclose(got.psd, _welch(picked, nper, 0), rtol=2e-4)
    assert got.segments == len(starts) <= budget
    assert got.dof == pytest.approx(2 * got.segments)  # Welch 1967: 2 per segment without overlap


def test_any_block_split_and_any_partition_give_the_same_sums():
    n, nper = 123_457, 512
    x = _noise_and_tone(n, seed=8)
    whole = SpacedWelch(fs=FS, nperseg=nper, total=n, segments=37)
    whole.update(x)
    split = SpacedWelch(fs=FS, nperseg=nper, total=n, segments=37)
    cuts = [0, 1, 700, 701, 5000, 60_000, 99_999, n]
    for a, b in zip(cuts[:-1], cuts[1:]):
        if split.needs(b - a):
            split.update(x[a:b])
        else:
            split.skip(b - a)
    parts = SpacedWelch(fs=FS, nperseg=nper, total=n, segments=37)
    for a, b in ((0, 40_000), (40_000, 90_000), (90_000, n)):
        piece = SpacedWelch(fs=FS, nperseg=nper, total=n, segments=37)
        starts = list(piece.starts(a, b))
        piece.add_segments(np.array([x[s : s + nper] for s in starts]).reshape(-1, nper))
        parts.merge(piece.state())
    for other in (split, parts):
        assert other.segments == whole.segments
        np.testing.assert_allclose(other.result().psd, whole.result().psd, rtol=1e-5)


def test_overlapped_segments_survive_any_block_split():
    # short stream: hop = nperseg / 2, so two segments can be pending at a block's end
    n, nper = 20_000, 256
    x = _noise_and_tone(n, seed=11)
    whole = SpacedWelch(fs=FS, nperseg=nper, total=n, segments=10_000)
    whole.update(x)
    rng = np.random.default_rng(2)
    cuts = np.unique(np.concatenate(([0, n], rng.integers(0, n, 40), [100, 101, 102, 300])))
    split = SpacedWelch(fs=FS, nperseg=nper, total=n, segments=10_000)
    for a, b in zip(cuts[:-1], cuts[1:]):
        split.update(x[a:b])
    assert split.segments == whole.segments == (n - nper) // (nper // 2) + 1
    np.testing.assert_allclose(split.result().psd, whole.result().psd, rtol=1e-5)
