"""Tone sweeps through the filter-bank path: passband, bin edges, alias bands, neighbours.

Each tone ``exp(2j pi f m / fs)`` (amplitude 1, 0 dBFS) runs alone through the
real :class:`~channelizer.engines.filterbank.BankChannelizer` serving one
channel; once the filters have filled, the output is one tone whose amplitude
is the path's gain at ``f``, measured as the RMS of the output.  Tones go

- across the passband (ripple, relative to the tone at the channel centre);
- at the channel's bin edges, ``+-fs / (2M)`` from its bin centre, where the
  bank's bins meet (only those outside the passband count as rejection);
- on the neighbours' passbands ``+-S +- bw/2`` (adjacent-channel rejection);
- in every band that folds onto the passband (alias rejection), at the
  predicted worst frequency and spread over the bands.

Two channels are swept: the one nearest the capture centre and the one
farthest from its bin centre.
"""

from dataclasses import asdict, dataclass, field
import json
import math

import numpy as np

from ..engines.filterbank import BankChannelizer
from ..errors import ChannelizerError
from ..planning.bank_response import predict_bank
from ..planning.response import alias_intervals

__all__ = ["BankVerification", "verify_bank"]

SETTLE_OUTPUTS = 64  # output samples measured after the filters have filled


@dataclass
class BankVerification:
    measured_ripple_db: float
    measured_alias_db: float
    measured_adjacent_db: float
    predicted_ripple_db: float
    predicted_alias_db: float
    predicted_adjacent_db: float
    ripple_target_db: float
    rejection_target_db: float
    meets_spec: bool
    tones: list = field(default_factory=list)

    @property
    def verdict(self):
        """``'meets'`` or ``'does not meet'``, as a chain's verification states it."""
        return "meets" if self.meets_spec else "does not meet"

    def to_json(self, *, indent=1):
        return json.dumps(asdict(self), indent=indent) + "\n"

    def summary_lines(self):
        return [
            f"filter-bank path, {len(self.tones)} tones (passband, bin edges, neighbours, alias bands)",
            f"passband ripple      measured {self.measured_ripple_db:.4f} dB, predicted {self.predicted_ripple_db:.4f} dB, target {self.ripple_target_db:g} dB",
            f"alias rejection      measured {self.measured_alias_db:.2f} dB, predicted {self.predicted_alias_db:.2f} dB, target {self.rejection_target_db:g} dB",
            f"adjacent rejection   measured {self.measured_adjacent_db:.2f} dB, predicted {self.predicted_adjacent_db:.2f} dB, target {self.rejection_target_db:g} dB",
            f"verdict: {self.verdict} the spec",
        ]


def _gain(plan, index, u):
    """Measured gain of raster channel ``index`` for a unit tone ``u`` Hz from its centre."""
    fs = plan.input_rate
    delay_in = len(plan.prototype) + sum(len(getattr(st, "taps", ())) * plan.decimation for st in plan.stages) * 4
    n = int(delay_in + (SETTLE_OUTPUTS + 8) * fs / plan.output_rate)
    f = plan.offsets()[index] + u
    m = np.arange(n)
    x = np.exp(2j * np.pi * np.mod(f * m / fs, 1.0)).astype(np.complex64)
    runner = BankChannelizer(
        plan.prototype, plan.bins, plan.oversampling,
        channels=[(plan.channel_bins[index], plan.residuals()[index])], fine_stages=plan.stages, fs=fs,
    )
    y = runner.process(x)[0][-SETTLE_OUTPUTS:]
    return float(np.sqrt(np.mean(np.abs(y.astype(np.complex128)) ** 2)))


def _db(g, ref):
    return -20.0 * math.log10(max(g, 1e-15) / ref)


def verify_bank(plan, *, tones=8):
    """Sweep tones through the bank path of ``plan`` (a BankPlan); returns BankVerification."""
    if isinstance(tones, bool) or not isinstance(tones, int) or not 1 <= tones <= 1000:
        raise ChannelizerError(f"tones must be a whole number from 1 to 1000, got {tones!r}")
    fs, bw, S = plan.input_rate, plan.bandwidth, plan.spacing
    fp = bw / 2
    res = plan.residuals()
    offsets = plan.offsets()
    centre = min(range(plan.count), key=lambda i: abs(offsets[i]))
    edge = max(range(plan.count), key=lambda i: abs(res[i]))
    pred = predict_bank(plan.prototype, plan.stages, fs=fs, bins=plan.bins, oversampling=plan.oversampling,
                        bandwidth=bw, spacing=S, residuals=res)
    front = plan.channel_plan().stages
    bands = [(lo, hi) for lo, hi, _ in alias_intervals(front, fs=fs, bandwidth=bw)]
    rows, ripple, alias, adjacent = [], 0.0, math.inf, math.inf
    for index in sorted({centre, edge}):
        ref = _gain(plan, index, 0.0)
        pass_g = [_gain(plan, index, u) for u in np.linspace(-0.98 * fp, 0.98 * fp, tones + 1)]
        ripple = max(ripple, 20 * math.log10(max(pass_g + [ref]) / min(pass_g + [ref])))
        rows += [{"channel": index, "offset_hz": float(u), "kind": "passband", "gain_db": -_db(g, 1.0)}
                 for u, g in zip(np.linspace(-0.98 * fp, 0.98 * fp, tones + 1), pass_g)]
        half_bin = fs / plan.bins / 2
        edges = [plan.bin_centre(plan.channel_bins[index]) - offsets[index] + s * half_bin for s in (-1, 1)]
        neighbours = [s * S + d for s in (-1, 1) for d in np.linspace(-fp, fp, 5)]
        worst = [pred.worst_alias_hz] if math.isfinite(pred.worst_alias_hz) else []
        step = max(1, len(bands) // tones)
        aliased = worst + [0.5 * (lo + hi) for lo, hi in bands[::step]]
        for kind, us in (("bin edge", edges), ("neighbour", neighbours), ("alias", aliased)):
            for u in us:
                att = _db(_gain(plan, index, u), ref)
                rows.append({"channel": index, "offset_hz": float(u), "kind": kind, "attenuation_db": att})
                if kind == "neighbour" or (kind == "bin edge" and abs(u) > S - fp):
                    adjacent = min(adjacent, att)
                elif kind == "alias":
                    alias = min(alias, att)
    spec = plan.spec
    meets = ripple <= spec["ripple_db"] and min(alias, adjacent) >= spec["rejection_db"]
    return BankVerification(ripple, alias, adjacent, pred.passband_ripple_db, pred.alias_rejection_db,
                            pred.adjacent_rejection_db, spec["ripple_db"], spec["rejection_db"], bool(meets), rows)
