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
import weakref

import numpy as np

from ..planning.response import alias_intervals, fold, image_step, normalised_response
from ..dsp.detection import detect_signals, estimate_noise_floor
from ..dsp.spectrum import power_db

__all__ = ["audit_channel", "audit_resolution", "format_attenuation", "ATTENUATION_CEILING_DB"]

#: Attenuations are not stated beyond this: the float32 samples the chain runs on
#: carry about 144 dB of dynamic range (2**-24, IEEE 754 single precision), and
#: arithmetic rounding in the stages leaves a floor near there; "> 150 dB" is all
#: that can be said of a larger figure.
ATTENUATION_CEILING_DB = 150.0

#: Bins per narrowest channel bandwidth in the audit's input spectrum.
BINS_PER_CHANNEL = 32

#: Longest Welch segment the audit uses (a spacing no finer than fs / 2**20).
MAX_SEGMENT = 1 << 20


def audit_resolution(bandwidths, *, fs, samples=None):
    """Bin spacing in Hz of the input spectrum for auditing channels of these bandwidths.

    A thirty-second of the narrowest channel, so that signals a fraction of a channel
    apart are told apart and a narrow signal's attenuation is not smeared over a
    bin wider than the channel; never finer than ``fs / 2**20``, nor than a
    spacing that leaves at least 8 Welch segments in ``samples``; never coarser
    than ``fs / 4096``.
    """
    r = min(bandwidths) / BINS_PER_CHANNEL
    r = max(r, fs / MAX_SEGMENT)
    if samples:
        r = max(r, 8.0 * fs / samples)
    return min(r, fs / 4096.0)


def format_attenuation(entry):
    """An audit entry's attenuation as text: ``'> 150 dB'`` beyond the ceiling."""
    if entry.get("attenuation_beyond_ceiling"):
        return f"> {ATTENUATION_CEILING_DB:.0f} dB"
    return f"{entry['attenuation_db']:.1f} dB"


def _worst_gain_db(stages, lo, hi, *, fs, image):
    """Largest gain (dB) of the normalised response over ``[lo, hi]``, on a dense grid."""
    f = np.linspace(lo, hi, 65)
    return 20 * math.log10(max(float(np.abs(normalised_response(stages, f, fs=fs, image=image)).max()), 1e-300))


_SHARED = []  # [(weak reference to the psd, threshold_db, signals, noise density)] of the spectrum last audited against


def _signals(psd, threshold_db):
    """The signals of ``psd`` and its noise density (dB), found once per spectrum.

    Every channel of a run is audited against the same input spectrum (a raster
    of hundreds through a filter bank): the detection is shared by identity of
    the spectrum object, which the audit only reads.
    """
    if _SHARED and _SHARED[0][0]() is psd and _SHARED[0][1] == threshold_db:
        return _SHARED[0][2], _SHARED[0][3]
    noise = estimate_noise_floor(psd)
    found = detect_signals(psd, threshold_db=threshold_db)  # its own floor: the same estimate, inf allowed
    _SHARED[:] = [(weakref.ref(psd), threshold_db, found, power_db(noise))]
    return found, _SHARED[0][3]


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
    signals, noise_out = _signals(psd, threshold_db)
    intervals = alias_intervals(plan.stages, fs=fs, bandwidth=plan.bandwidth)
    starts = np.array([a for a, _, _ in intervals], dtype=float)
    ends = np.array([b for _, b, _ in intervals], dtype=float)
    step = image_step(plan.stages, fs=fs)
    bin_hz = psd.bin_hz
    out = []
    for sig in signals:
        lo, hi = sig.lower_hz - chan_centre, sig.upper_hz - chan_centre
        # mixing folds input frequencies into [-fs/2, fs/2)
        if lo >= -fp and hi <= fp:
            continue  # the channel itself
        sel = (psd.freqs >= sig.lower_hz) & (psd.freqs <= sig.upper_hz)
        x = fold(psd.freqs[sel] - chan_centre, fs)
        dens = psd.psd[sel]
        total = 0.0
        worst_att, land, path = math.inf, 0.0, 0
        # only the bands that reach the signal's span (a bank's channel has hundreds)
        near = np.flatnonzero((ends >= x.min()) & (starts <= x.max())) if x.size else ()
        for a, b, k in (intervals[i] for i in near):
            m = (x >= a) & (x <= b)
            if not np.any(m):
                continue
            h2 = np.abs(normalised_response(plan.stages, x[m], fs=fs, image=k)) ** 2
            total += float(np.sum(dens[m] * h2) * bin_hz)
            # the worst over the signal's part of this band, not only at the bin centres
            edge_lo = max(a, float(x[m].min()) - bin_hz / 2)
            edge_hi = min(b, float(x[m].max()) + bin_hz / 2)
            att = -_worst_gain_db(plan.stages, edge_lo, edge_hi, fs=fs, image=k)
            if att < worst_att:
                worst_att, path = att, k
                land = float(fold(np.mean(x[m]) + k * step, plan.output_rate))
        if total <= 0:
            continue
        beyond = worst_att > ATTENUATION_CEILING_DB
        # a level below what float32 arithmetic holds is not stated either
        level = max(10 * math.log10(total), float(sig.power_dbfs) - ATTENUATION_CEILING_DB)
        width = min(2 * fp, sig.occupied_bandwidth_hz)
        density = level - 10 * math.log10(max(width, bin_hz))
        entry = {
            "signal_center_hz": float(sig.center_hz),
            "signal_bandwidth_hz": float(sig.occupied_bandwidth_hz),
            "signal_power_dbfs": round(float(sig.power_dbfs), 2),
            "attenuation_db": round(min(worst_att, ATTENUATION_CEILING_DB), 2),
            "attenuation_beyond_ceiling": bool(beyond),
            "output_level_dbfs": round(level, 2),
            "output_level_dbfs_per_hz": round(density, 2),
            "landing_offset_hz": round(land, 1),
            "path": "alias" if path == 0 else f"image {path} of the rational stage",
            "output_noise_floor_dbfs_per_hz": None if noise_out is None else round(noise_out, 2),
            "above_noise": bool(density > noise_out),
        }
        out.append(entry)
    out.sort(key=lambda e: -e["output_level_dbfs"])
    return out
