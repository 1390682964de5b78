"""Predicted figures of a filter-bank channel: ripple, alias and adjacent-channel rejection.

A channel at residual ``r`` from its bin centre sees, at offset ``u`` from its
own centre, ``H(u + r) F(u)``: the prototype ``H`` (input rate) shifted by the
residual, times its fine stages' composite response ``F`` (bin rate; see
:mod:`channelizer.engines.filterbank`).  The bands that fold onto the passband
depend on the rates only and are those of the equivalent chain (prototype
decimating by ``M / O``, then the fine stages), :func:`response.alias_intervals`.
"""

from dataclasses import dataclass

import numpy as np

from .response import alias_intervals, composite_response
from .stages import FirStage

__all__ = ["BankPrediction", "predict_bank", "prototype_magnitude"]


def prototype_magnitude(taps, *, fs, points=None):
    """``|H(f)|`` of a long FIR as a function of ``f`` (Hz), from one dense FFT.

    The FFT grid has at least 16 points per tap (no fewer than 2**18): between
    grid points ``|H|`` is linearly interpolated, which is well inside a dB
    over the stopband lobes (each about ``fs / len(taps)`` wide).
    """
    h = np.asarray(taps, dtype=float)
    n = points or max(1 << 18, 1 << int(np.ceil(np.log2(16 * h.size))))
    mag = np.abs(np.fft.fft(h, n))
    grid = np.arange(n + 1) * (fs / n)
    mag = np.append(mag, mag[0])

    def at(f):
        return np.interp(np.mod(np.asarray(f, dtype=float), fs), grid, mag)

    return at


@dataclass(frozen=True)
class BankPrediction:
    """Worst figures over the channels' residuals (dB; rejection relative to the gain at the centre)."""

    passband_ripple_db: float
    alias_rejection_db: float
    adjacent_rejection_db: float
    worst_alias_hz: float


def _samples(lo, hi, step):
    n = int(min(4000, max(16, np.ceil((hi - lo) / step) + 1)))
    return np.linspace(lo, hi, n)


def _pick(residuals, most=7):
    """The distinct residuals, at most ``most`` of them spread over the range, extremes kept."""
    r = np.unique(np.round(np.asarray(residuals, dtype=float), 6))
    if r.size <= most:
        return r
    return r[np.unique(np.linspace(0, r.size - 1, most).round().astype(int))]


def predict_bank(prototype, stages, *, fs, bins, oversampling, bandwidth, spacing, residuals):
    """Ripple, alias and adjacent-channel rejection of a bank's channels, worst over residuals.

    Parameters
    ----------
    prototype : sequence of float
    stages : sequence of stages
        Fine stages after the bin.
    fs : float
        Input rate in Hz.
    bins, oversampling : int
    bandwidth, spacing : float
        Channel width and raster spacing in Hz.
    residuals : sequence of float
        Each channel's offset from its bin centre.

    Returns
    -------
    BankPrediction
        ``adjacent_rejection_db`` is the smallest attenuation over the two
        neighbours' passbands ``[+-spacing - bw/2, +-spacing + bw/2]``.
    """
    stages = tuple(stages)
    D = bins // oversampling
    fs_b = fs * oversampling / bins
    mag = prototype_magnitude(prototype, fs=fs)
    fp = bandwidth / 2.0
    step = fs / (8.0 * len(prototype))
    equivalent = (FirStage(D, tuple(prototype)),) + stages
    intervals = alias_intervals(equivalent, fs=fs, bandwidth=bandwidth)
    by_image = {}
    for lo, hi, k in intervals:
        by_image.setdefault(k, []).append(_samples(lo, hi, step))
    pb = np.linspace(-fp, fp, 1025)
    adj = np.concatenate([_samples(s * spacing - fp, s * spacing + fp, step) for s in (-1, 1)])
    ripple, alias, adjacent, worst_f = 0.0, np.inf, np.inf, float("nan")

    def path(u, r, image=0):
        return mag(u + r) * np.abs(composite_response(stages, u, fs=fs_b, image=image))

    for r in _pick(residuals):
        dc = path(np.array([0.0]), r)[0]
        g = path(pb, r)
        ripple = max(ripple, 20 * np.log10(g.max() / g.min()))
        adjacent = min(adjacent, float(np.min(-20 * np.log10(np.maximum(path(adj, r), 1e-300) / dc))))
        for k, parts in by_image.items():
            u = np.concatenate(parts)
            att = -20 * np.log10(np.maximum(path(u, r, k), 1e-300) / dc)
            i = int(np.argmin(att))
            if att[i] < alias:
                alias, worst_f = float(att[i]), float(u[i])
    return BankPrediction(float(ripple), float(alias), float(adjacent), worst_f)
