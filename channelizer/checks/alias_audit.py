"""Which strong signals of a capture fold onto a channel, and how loud they arrive.

For each signal found in the input spectrum, the part of its band that the
channel's chain folds onto the passband is integrated through the plan's
composite response (``|H|^2`` times the measured input density) to predict the
level it reaches in the output, which is compared with the output's noise floor
in the passband.  That floor is the input's estimated noise density passed at
the chain's unit passband gain: measuring it on the output spectrum itself
would mix in the channel's own signal and, beyond a stopband edge, the
stopband's numerical floor.
"""

import math

import numpy as np

from ..planning.response import alias_intervals, composite_response, fold, image_step
from ..dsp.detection import detect_signals, estimate_noise_floor
from ..dsp.spectrum import power_db

__all__ = ["audit_channel"]


def audit_channel(psd, req, result=None, *, threshold_db=10.0):
    """Alias audit of one channel.

    Parameters
    ----------
    psd : channelizer.spectrum.Psd
        Input spectrum (absolute axis when the capture's centre is known).
    req : ChannelRequest
        The channel (offset from the capture centre, plan).
    result : ChannelResult, optional
        The extracted channel (unused; kept so callers can pass it).

    Returns
    -------
    list of dict
        One entry per folding signal, strongest first: the signal's centre,
        bandwidth and power, the plan's attenuation on its folding part, the
        predicted output level (dBFS and dBFS/Hz), where it lands in the
        channel, the output noise floor and whether it rises above it.
    """
    plan = req.plan
    fs = plan.input_rate
    fp = plan.bandwidth / 2
    chan_centre = psd.center_frequency + req.offset
    noise_out = power_db(estimate_noise_floor(psd))
    intervals = alias_intervals(plan.stages, fs=fs, bandwidth=plan.bandwidth)
    step = image_step(plan.stages, fs=fs)
    bin_hz = psd.bin_hz
    out = []
    for sig in detect_signals(psd, threshold_db=threshold_db):
        lo, hi = sig.lower_hz - chan_centre, sig.upper_hz - chan_centre
        # mixing folds input frequencies into [-fs/2, fs/2)
        if lo >= -fp and hi <= fp:
            continue  # the channel itself
        sel = (psd.freqs >= sig.lower_hz) & (psd.freqs <= sig.upper_hz)
        x = fold(psd.freqs[sel] - chan_centre, fs)
        dens = psd.psd[sel]
        total = 0.0
        worst_att, land = math.inf, 0.0
        for a, b, k in intervals:
            m = (x >= a) & (x <= b)
            if not np.any(m):
                continue
            h2 = np.abs(composite_response(plan.stages, x[m], fs=fs, image=k)) ** 2
            total += float(np.sum(dens[m] * h2) * bin_hz)
            att = -10 * math.log10(max(float(h2.max()), 1e-300))
            if att < worst_att:
                worst_att = att
                land = float(fold(np.mean(x[m]) + k * step, plan.output_rate))
        if total <= 0:
            continue
        level = 10 * math.log10(total)
        width = min(2 * fp, sig.occupied_bandwidth_hz)
        density = level - 10 * math.log10(max(width, bin_hz))
        entry = {
            "signal_center_hz": float(sig.center_hz),
            "signal_bandwidth_hz": float(sig.occupied_bandwidth_hz),
            "signal_power_dbfs": round(float(sig.power_dbfs), 2),
            "attenuation_db": round(worst_att, 2),
            "output_level_dbfs": round(level, 2),
            "output_level_dbfs_per_hz": round(density, 2),
            "landing_offset_hz": round(land, 1),
            "output_noise_floor_dbfs_per_hz": None if noise_out is None else round(noise_out, 2),
            "above_noise": bool(density > noise_out),
        }
        out.append(entry)
    out.sort(key=lambda e: -e["output_level_dbfs"])
    return out
