"""The planner's numpy-only filter design against scipy.signal and scipy.optimize.

The planner designs without importing scipy.signal or scipy.optimize (a second of
start-up each ``plan`` command); these tests hold its designs to those references:
Parks-McClellan against ``scipy.signal.remez``, Kaiser's formulas against
``scipy.signal.kaiser_beta`` / ``kaiserord``, the windowed sinc against
``scipy.signal.firwin``, the compensator's minimax fit against a linear programme
solved by ``scipy.optimize.linprog``.  Responses are measured with ``scipy.signal.freqz``.
"""

import numpy as np
import pytest
import scipy.optimize
import scipy.signal

from channelizer.planning.kaiser import kaiser_beta, kaiser_length, kaiser_lowpass
from channelizer.planning.minimax import linear_phase_basis, minimax_fit
from channelizer.planning import remez_exchange
from channelizer.planning.remez_exchange import equiripple_fit, lattice_grid, remez_bands
from channelizer.planning.stages import CicStage

# (numtaps, edges Hz, desired, weight, fs): type I and II low-passes, three bands, a
# passband gain of 5 (an interpolation filter), a long narrow-band filter
BAND_SPECS = [
    (31, [0, 0.1, 0.2, 0.5], [1, 0], [1, 1], 1.0),
    (32, [0, 0.1, 0.2, 0.5], [1, 0], [1, 10], 1.0),
    (101, [0, 1e3, 2e3, 5e3, 7e3, 10e3], [1, 0, 0], [1, 100, 100], 20e3),
    (255, [0, 0.02, 0.03, 0.5], [1, 0], [1, 50], 1.0),
    (943, [0, 5e3, 9e3, 200e3], [5, 0], [1, 30], 400e3),
]


def _weighted_error(h, edges, desired, weight, fs):
    """Largest weighted deviation of |H| from the bands, on 4000 points a band (freqz)."""
    worst = 0.0
    for i, (d, w) in enumerate(zip(desired, weight)):
        f = np.linspace(edges[2 * i], edges[2 * i + 1], 4000)
        _, resp = scipy.signal.freqz(h, worN=f, fs=fs)
        worst = max(worst, float(np.max(np.abs(np.abs(resp) - d)) * w))
    return worst


@pytest.mark.parametrize("numtaps, edges, desired, weight, fs", BAND_SPECS)
def test_remez_meets_scipy_remez(numtaps, edges, desired, weight, fs, monkeypatch):
    # the numpy exchange at every length (long designs otherwise go to the compiled one)
    monkeypatch.setattr(remez_exchange, "COMPILED_FROM", 10**9)
    # scipy.signal.remez (Parks & McClellan 1972, McClellan et al. 1973) on the same bands:
    # the same minimax error within half a percent (the grids differ by a fraction of a
    # grid step), and the same taps to a small fraction of the largest
    ref = scipy.signal.remez(numtaps, edges, desired, weight=weight, fs=fs, maxiter=200)
    got = remez_bands(numtaps, edges, desired, weight=weight, fs=fs)
    assert got.shape == (numtaps,)
    assert np.allclose(got, got[::-1], rtol=0, atol=1e-12 * np.max(np.abs(got)))  # linear phase
    e_ref = _weighted_error(ref, edges, desired, weight, fs)
    e_got = _weighted_error(got, edges, desired, weight, fs)
    assert e_got <= 1.005 * e_ref, (e_got, e_ref)
    assert e_got >= 0.9 * e_ref, (e_got, e_ref)  # no better than minimax can be, bar grid effects
    if numtaps != 101:  # scipy stops short of the three-band optimum there (our error is lower)
        assert np.max(np.abs(got - ref)) <= 1e-4 * np.max(np.abs(ref))


def test_remez_error_is_equiripple():
    # Alternation theorem (Parks & McClellan 1972): the error of the best length-41 fit
    # has at least r + 1 = 22 extrema of (nearly) the largest size; "nearly" as the
    # design grid of 16 points per extremal lets the peaks between its points rise a
    # few per cent (scipy.signal.remez's design shows the same)
    h = remez_bands(41, [0, 0.15, 0.25, 0.5], [1, 0], weight=[1, 1], fs=1.0)
    f = np.concatenate([np.linspace(0, 0.15, 3000), np.linspace(0.25, 0.5, 3000)])
    _, resp = scipy.signal.freqz(h, worN=f, fs=1.0)
    amp = np.real(resp * np.exp(2j * np.pi * f * 20))  # zero-phase amplitude
    err = amp - np.where(f <= 0.15, 1.0, 0.0)
    ext = [i for i in range(1, f.size - 1) if (err[i] - err[i - 1]) * (err[i + 1] - err[i]) <= 0] + [0, f.size - 1]
    assert sum(abs(err[i]) >= 0.95 * np.max(np.abs(err)) for i in ext) >= 22


def test_remez_refuses_edges_outside_the_band():
    with pytest.raises(ValueError, match="fs/2"):
        remez_bands(31, [0, 0.1, 0.2, 0.7], [1, 0], fs=1.0)


@pytest.mark.parametrize("atten", [10.0, 21.0, 30.0, 50.0, 60.0, 80.0, 120.0])
def test_kaiser_beta_matches_scipy(atten):
    # Kaiser 1974; Oppenheim & Schafer eq. (7.62), as scipy.signal.kaiser_beta computes it
    assert kaiser_beta(atten) == pytest.approx(scipy.signal.kaiser_beta(atten), rel=1e-12, abs=1e-12)


@pytest.mark.parametrize("atten, width, fs", [(60.0, 1e3, 48e3), (80.0, 0.01, 1.0), (100.0, 5e3, 2.4e6), (21.5, 100.0, 1e3)])
def test_kaiser_length_matches_scipy_kaiserord(atten, width, fs):
    # Oppenheim & Schafer eq. (7.63) through scipy.signal.kaiserord (width normalised to Nyquist)
    n, beta = kaiser_length(atten, width, fs=fs)
    n_ref, beta_ref = scipy.signal.kaiserord(atten, width / (fs / 2.0))
    assert n == n_ref
    assert beta == pytest.approx(beta_ref, rel=1e-12)


@pytest.mark.parametrize("numtaps, cutoff, beta, fs", [(63, 0.2, 5.0, 1.0), (64, 3e3, 8.0, 48e3), (1001, 1e4, 11.0, 2.4e6)])
def test_kaiser_lowpass_matches_scipy_firwin(numtaps, cutoff, beta, fs):
    ref = scipy.signal.firwin(numtaps, cutoff, window=("kaiser", beta), fs=fs)
    assert np.allclose(kaiser_lowpass(numtaps, cutoff, beta=beta, fs=fs), ref, rtol=0, atol=1e-14)


def _compensator_problem(n):
    """CIC droop compensation (Hogenauer 1981 response): 1/|H_cic| on the passband, 0 beyond."""
    cic = CicStage(decimation=16, order=4)
    fs_cic, fs, fp, fst = 16e6, 1e6, 100e3, 250e3
    lattice = 16 * n
    f_pb = lattice_grid(0.0, fp, fs=fs, lattice=lattice)
    f_sb = lattice_grid(fst, fs / 2.0, fs=fs, lattice=lattice)
    f = np.concatenate([f_pb, f_sb])
    want = np.concatenate([1.0 / np.abs(cic.response(f_pb, fs=fs_cic)), np.zeros(f_sb.size)])
    weight = np.concatenate([np.full(f_pb.size, 1.0 / 0.01), np.full(f_sb.size, 1.0 / 1e-3)])
    return f, want, weight, fs, lattice


def _linprog_minimax(n, f, want, weight, fs, cap_f=None, cap=None):
    """Rabiner (1972): minimise t subject to -t <= w (B a - d) <= t, solved by HiGHS."""
    b = linear_phase_basis(n, f, fs=fs)
    m = b.shape[1]
    bw = b * weight[:, None]
    rows = [np.hstack([bw, -np.ones((f.size, 1))]), np.hstack([-bw, -np.ones((f.size, 1))])]
    rhs = [want * weight, -want * weight]
    if cap_f is not None:
        bc = linear_phase_basis(n, cap_f, fs=fs)
        rows += [np.hstack([bc, np.zeros((cap_f.size, 1))]), np.hstack([-bc, np.zeros((cap_f.size, 1))])]
        rhs += [cap, cap]
    cost = np.zeros(m + 1)
    cost[-1] = 1.0
    res = scipy.optimize.linprog(cost, A_ub=np.vstack(rows), b_ub=np.concatenate(rhs),
                                 bounds=[(None, None)] * m + [(0, None)], method="highs")
    assert res.status == 0
    return res.x[-1]


@pytest.mark.parametrize("n", [15, 16, 31])
def test_exchange_fit_reaches_the_linear_programme_optimum(n):
    # the exchange's weighted minimax error on the grid against the exact optimum of the
    # same problem as a linear programme (scipy.optimize.linprog, HiGHS)
    f, want, weight, fs, lattice = _compensator_problem(n)
    _, err = equiripple_fit(n, fs=fs, f=f, desired=want, weight=weight, lattice=lattice)
    best = _linprog_minimax(n, f, want, weight, fs)
    assert err == pytest.approx(best, rel=2e-4)


def test_capped_fit_keeps_its_caps_and_matches_the_linear_programme():
    # a cap the exchange's fit breaks: the fit falls back to the linear programme,
    # keeps the cap and reaches the capped optimum (linprog on the same problem)
    n = 15
    f, want, weight, fs, lattice = _compensator_problem(n)
    keep = f <= 100e3  # passband only: the rest is free, and the fit swings there
    f, want, weight = f[keep], want[keep], weight[keep]
    cap_f = np.linspace(150e3, fs / 2.0, 200)
    free, _ = equiripple_fit(n, fs=fs, f=f, desired=want, weight=weight, lattice=lattice)
    _, free_resp = scipy.signal.freqz(free, worN=cap_f, fs=fs)
    cap = np.full(cap_f.size, 1.05)
    assert np.max(np.abs(free_resp)) > 1.05  # the cap binds
    h, err = minimax_fit(n, fs=fs, f=f, desired=want, weight=weight, cap_f=cap_f, cap=cap, lattice=lattice)
    _, resp = scipy.signal.freqz(h, worN=cap_f, fs=fs)
    assert np.max(np.abs(resp)) <= 1.05 * (1 + 1e-6)
    assert err == pytest.approx(_linprog_minimax(n, f, want, weight, fs, cap_f, cap), rel=1e-6)
