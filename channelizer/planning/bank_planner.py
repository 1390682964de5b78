"""Planning a filter bank for a raster of channels, and whether it beats one chain each.

The bins are put on a grid that divides the raster spacing (``fs / M = S / j``),
so that every raster channel sits on a bin centre (residual 0, or one common
residual when the raster is offset from the grid).  For each grid and
oversampling ``O`` two splits of the work are designed:

``bank``
    the prototype rejects the neighbours itself (stopband from ``S - bw/2``);
    the fine stages only decimate to the output rate;
``fine``
    the prototype only keeps the bin decimation free of aliases (stopband from
    ``fs O / M - bw/2``); the fine stages reject the neighbours.

The prototype is a Kaiser-window low-pass (Kaiser 1974; order from
``kaiserord``; computed in :mod:`channelizer.planning.kaiser`) of length a multiple of ``M``; the fine stages come
from :func:`channelizer.planning.planner.plan_chain` at the bin rate.  The
cheapest design meeting ripple, alias and adjacent-channel rejection is then
compared with planning one chain per channel for the same request, both
costed as the float runners compute them (:func:`runner_cost`).

Cost per input sample of a bank: the multiplies of the bank as the engine runs
it (:func:`channelizer.planning.bank.bank_multiplies`: ``K O + M log2 M / D`` by
element-wise passes, Crochiere & Rabiner 1983, ch. 7; by FFT correlation, for
long prototypes, transforms whose count hardly depends on ``K``) plus every
channel's fine stages.
"""

from dataclasses import dataclass, field
import math

import numpy as np

from ..errors import ChannelizerError
from .bank import BankPlan, bank_multiplies, kept_bins
from .bank_response import predict_bank
from .cost import chain_cost
from .kaiser import kaiser_length, kaiser_lowpass
from .planner import MIN_OVERSAMPLING, Candidate, plan_chain
from .spec import ChainSpec

__all__ = ["BankSpec", "BankResult", "per_channel_chain", "plan_bank", "raster_offsets", "runner_cost"]

MAX_BINS = 16384
MAX_GRID_DIVISOR = 16
MAX_PROTOTYPE_TAPS = 1 << 16


@dataclass(frozen=True)
class BankSpec:
    """A raster of channels to serve: rates, width, spacing and targets.

    ``first`` and ``last`` are offsets in Hz from the capture centre; by default
    the raster runs through the centre and holds every channel whose passband
    fits in the captured band.  ``rejection_db`` is asked of both the alias and
    the adjacent-channel rejection.
    """

    input_rate: float
    bandwidth: float
    spacing: float
    output_rate: float | None = None
    first: float | None = None
    last: float | None = None
    ripple_db: float = 0.1
    rejection_db: float = 80.0
    input_bits: int = 16
    output_bits: int = 16

    def __post_init__(self):
        self.chain_spec()  # rates, ripple, rejection and bits checked as for a chain
        if not (isinstance(self.spacing, (int, float)) and math.isfinite(self.spacing) and self.spacing > 0):
            raise ChannelizerError(f"spacing must be a positive number of Hz, got {self.spacing!r}")
        if self.bandwidth >= self.spacing:
            raise ChannelizerError(
                f"bandwidth {self.bandwidth:g} Hz must be below the spacing {self.spacing:g} Hz (the channels would overlap)"
            )
        raster_offsets(self)

    @property
    def adjacent_edge(self):
        """Where the neighbours' passbands begin, from a channel's centre."""
        return self.spacing - self.bandwidth / 2

    def chain_spec(self, *, input_rate=None, output_rate=None, ripple_db=None, stopband_edge=None):
        return ChainSpec(
            input_rate=input_rate or self.input_rate,
            bandwidth=self.bandwidth,
            output_rate=output_rate if output_rate is not None else self.output_rate,
            ripple_db=ripple_db or self.ripple_db,
            rejection_db=self.rejection_db,
            input_bits=self.input_bits,
            output_bits=self.output_bits,
            stopband_edge=stopband_edge,
        )


def raster_offsets(spec):
    """Offsets of the raster's channels from the capture centre, lowest first."""
    fs, S, half = spec.input_rate, spec.spacing, spec.bandwidth / 2
    top = fs / 2 - half  # highest centre whose passband fits
    eps = 1e-9 * fs
    if spec.first is None and spec.last is None:
        n = int(math.floor(top / S + 1e-9))
        return [i * S for i in range(-n, n + 1)]
    for name, f in (("first", spec.first), ("last", spec.last)):
        if f is not None and abs(f) > top + eps:
            raise ChannelizerError(
                f"{name} channel at {f:+g} Hz: its passband leaves the captured band (centres must lie within +-{top:g} Hz)"
            )
    if spec.first is not None:
        lo = spec.first
        hi = spec.last if spec.last is not None else lo + math.floor((top - lo) / S + 1e-9) * S
    else:
        hi = spec.last
        lo = hi - math.floor((hi + top) / S + 1e-9) * S
    if hi < lo - eps:
        raise ChannelizerError(f"last {hi:+g} Hz lies below first {lo:+g} Hz")
    n = int(math.floor((hi - lo) / S + 1e-6))
    return [lo + i * S for i in range(n + 1)]


@dataclass
class BankResult:
    """The chosen plan (a :class:`BankPlan`, or a chain plan when chains are cheaper) and what else was weighed."""

    plan: object
    chosen: Candidate
    alternatives: list = field(default_factory=list)
    channels: int = 0


def _grids(spec):
    """Bin counts ``M`` whose grid ``fs / M`` divides the spacing."""
    out = []
    for j in range(1, MAX_GRID_DIVISOR + 1):
        m = spec.input_rate * j / spec.spacing
        M = round(m)
        if abs(m - M) < 1e-6 and 4 <= M <= MAX_BINS:
            out.append(M)
    if not out:
        raise ChannelizerError(
            f"the spacing {spec.spacing:g} Hz does not divide {spec.input_rate:g} Hz into a whole number of bins "
            f"(rate / spacing = {spec.input_rate / spec.spacing:.6g}, tried up to {MAX_GRID_DIVISOR} bins per channel)"
        )
    return out


def _oversamplings(M, fs, fp, need, most=2):
    """The smallest factors ``O`` of ``M`` whose bin rate carries the channel (at least ``need``)."""
    found = []
    for O in range(1, M + 1):
        fs_b = fs * O / M
        if M % O == 0 and fs_b >= need * (1 - 1e-9) and fs_b > 2 * fp:
            found.append(O)
            if len(found) == most:
                break
    return found


def _bin_map(offsets, fs, M):
    g = fs / M
    bins = [int(round(f / g)) % M for f in offsets]
    res = [f - (k * g - (fs if k * g >= fs / 2 else 0)) for f, k in zip(offsets, bins)]
    return bins, res


def _kaiser_prototype(fs, M, fp, fst, atten):
    n, beta = kaiser_length(atten, fst - fp, fs=fs)
    K = max(1, -(-n // M))
    return kaiser_lowpass(K * M, (fp + fst) / 2, beta=beta, fs=fs)


def _fine(spec, fs_b, out, mode):
    """Fine stages from the bin rate to ``out`` (empty when the bin rate is the output rate)."""
    if math.isclose(out, fs_b, rel_tol=1e-9):
        return (), ""
    edge = spec.adjacent_edge if mode == "fine" and spec.adjacent_edge < out / 2 else None
    try:
        res = plan_chain(spec.chain_spec(input_rate=fs_b, output_rate=out, ripple_db=spec.ripple_db / 2, stopband_edge=edge))
    except ChannelizerError as exc:
        return None, f"no fine stages ({exc})"
    return res.plan.stages, ""


def _design(spec, offsets, M, O, mode):
    fs, bw = spec.input_rate, spec.bandwidth
    fs_b = fs * O / M
    bins, res = _bin_map(offsets, fs, M)
    dmax = max(abs(r) for r in res)
    fp = bw / 2 + dmax
    fst = fs_b - fp if mode == "fine" else min(spec.adjacent_edge - dmax, fs_b - fp)
    label = f"bank M={M} O={O} (neighbours: {'prototype' if mode == 'bank' else 'fine stages'})"
    if fst <= fp:
        return Candidate(label, math.inf, reason=f"no transition band left ({fp:g} to {fst:g} Hz)")
    n_taps = kaiser_length(spec.rejection_db + 3.0, fst - fp, fs=fs)[0]
    if n_taps > MAX_PROTOTYPE_TAPS:
        return Candidate(label, math.inf, reason=f"prototype of about {n_taps} taps (transition {fst - fp:g} Hz)")
    out = spec.output_rate or fs_b / max(1, math.floor(fs_b / (MIN_OVERSAMPLING * bw) + 1e-9))
    if out > fs_b * (1 + 1e-9):
        return Candidate(label, math.inf, reason=f"bin rate {fs_b:g} Hz is below the output rate")
    stages, why = _fine(spec, fs_b, out, mode)
    if stages is None or (mode == "fine" and not stages):
        return Candidate(label, math.inf, reason=why or "no fine stages to reject the neighbours")
    atten = spec.rejection_db + 3.0
    for _ in range(4):
        h = _kaiser_prototype(fs, M, fp, fst, atten)
        pred = predict_bank(h, stages, fs=fs, bins=M, oversampling=O, bandwidth=bw, spacing=spec.spacing, residuals=res)
        short = spec.rejection_db - min(pred.alias_rejection_db, pred.adjacent_rejection_db)
        if short <= 0 and pred.passband_ripple_db <= spec.ripple_db:
            break
        atten += max(short, 0.0) + 2.0
    K = len(h) // M
    fine_cost = runner_cost(stages, fs=fs_b) * fs_b / fs
    nco = (fs_b / fs) if any(abs(r) > 1e-9 for r in res) else 0.0
    bank_cost = bank_multiplies(K, M, O, kept_bins(len(set(bins)), M))
    cost = bank_cost + len(offsets) * (fine_cost + nco)
    tail = " > ".join(_stage_label(st) for st in stages)
    layout = f"bank M={M} O={O} K={K}" + (f" > {tail}" if tail else "")
    cand = Candidate(layout, cost, stages=stages, prediction=pred)
    cand.meets = pred.passband_ripple_db <= spec.ripple_db and min(pred.alias_rejection_db, pred.adjacent_rejection_db) >= spec.rejection_db
    if not cand.meets:
        cand.reason = (
            f"ripple {pred.passband_ripple_db:.3f} dB, alias {pred.alias_rejection_db:.1f} dB, "
            f"adjacent {pred.adjacent_rejection_db:.1f} dB short of the targets"
        )
    cand.cost = {"plan": (h, M, O, bins, out, stages, pred, bank_cost, fine_cost + nco)}
    return cand


def runner_cost(stages, *, fs):
    """Multiplies per input sample as the float runners compute a chain.

    :func:`channelizer.planning.cost.chain_cost` (``cpu``), which counts every CIC
    as the boxcar-power FIR (``N (R M - 1) + 1`` taps per output) the float engine
    runs it as.
    """
    if not stages:
        return 0.0
    return chain_cost(stages, fs=fs).total.multiplies_per_input_sample


def _stage_label(st):
    kind = getattr(st, "kind", "")
    if kind == "cic":
        return f"CIC/{st.decimation}"
    if kind == "halfband":
        return "HB/2"
    if kind == "resampler":
        return f"x{st.interpolation}/{st.decimation}"
    return f"FIR/{st.decimation}"


def per_channel_chain(spec, output_rate):
    """The chain each channel would run without a bank (neighbours removed where the output band holds them)."""
    edge = spec.adjacent_edge if spec.adjacent_edge < output_rate / 2 else None
    return plan_chain(spec.chain_spec(output_rate=output_rate, stopband_edge=edge))


def _chains(spec, n, out):
    try:
        res = per_channel_chain(spec, out)
    except ChannelizerError as exc:
        return Candidate(f"{n} chains", math.inf, reason=f"no chain: {exc}"), None
    each = runner_cost(res.plan.stages, fs=spec.input_rate)
    return Candidate(f"{n} chains ({res.chosen.layout})", n * each, meets=True), res


def plan_bank(spec):
    """Plan a filter bank for every channel of ``spec``'s raster, or chains when cheaper.

    Parameters
    ----------
    spec : BankSpec

    Returns
    -------
    BankResult
        ``plan`` is a :class:`BankPlan` when the bank is the cheaper way to meet
        the targets, else the chain plan every channel would run; ``alternatives``
        hold the other designs, each with its reason.
    """
    if not isinstance(spec, BankSpec):
        raise TypeError("spec must be a BankSpec")
    offsets = raster_offsets(spec)
    fs, bw = spec.input_rate, spec.bandwidth
    need = spec.output_rate or MIN_OVERSAMPLING * bw
    tried = []
    for M in _grids(spec):
        dmax = max(abs(r) for r in _bin_map(offsets, fs, M)[1])
        for O in _oversamplings(M, fs, bw / 2 + dmax, need):
            for mode in ("bank", "fine"):
                tried.append(_design(spec, offsets, M, O, mode))
    good = sorted((c for c in tried if c.meets), key=lambda c: c.estimate)
    out = good[0].cost["plan"][4] if good else (spec.output_rate or need)
    chains, chain_res = _chains(spec, len(offsets), out)
    if not good and chain_res is None:
        why = "; ".join(f"{c.layout}: {c.reason}" for c in tried[:3])
        raise ChannelizerError(f"neither a bank nor a chain meets the targets ({why}; {chains.reason}); relax the targets")
    bank = good[0] if good else None
    if bank is not None and bank.estimate <= chains.estimate:
        chosen = bank
        chains.reason = f"chosen against: costs {chains.estimate - bank.estimate:.3g} more multiplies per input sample than the bank"
        bank.reason = f"chosen: {bank.estimate:.3g} multiplies per input sample for {len(offsets)} channels"
        plan = _to_plan(bank, spec, offsets, chains.estimate)
    else:
        chosen = chains
        chains.reason = f"chosen: {chains.estimate:.3g} multiplies per input sample for {len(offsets)} channels"
        if bank is not None:
            bank.reason = f"chosen against: costs {bank.estimate - chains.estimate:.3g} more multiplies per input sample than the chains"
        plan = chain_res.plan
    others = [c for c in good if c is not chosen and c is not bank]
    for c in others:
        c.reason = f"costs {c.estimate - chosen.estimate:.3g} more multiplies per input sample"
    alternatives = [c for c in (bank, chains) if c is not None and c is not chosen] + [chosen] + others
    alternatives += [c for c in tried if not c.meets]
    return BankResult(plan, chosen, alternatives, len(offsets))


def _to_plan(cand, spec, offsets, chains_cost):
    h, M, O, bins, out, stages, pred, bank_cost, per_channel = cand.cost["plan"]
    predicted = {
        "passband_ripple_db": round(pred.passband_ripple_db, 6),
        "alias_rejection_db": round(pred.alias_rejection_db, 3),
        "adjacent_rejection_db": round(pred.adjacent_rejection_db, 3),
        "worst_alias_hz": round(pred.worst_alias_hz, 3),
        "multiplies_per_input_sample": round(cand.estimate, 6),
        "bank_multiplies_per_input_sample": round(bank_cost, 6),
        "fine_multiplies_per_input_sample_each": round(per_channel, 6),
        "chains_multiplies_per_input_sample": round(chains_cost, 6) if math.isfinite(chains_cost) else -1.0,
    }
    spec_d = {
        "ripple_db": float(spec.ripple_db),
        "rejection_db": float(spec.rejection_db),
        "objective": "cpu",
        "bits": {"input": spec.input_bits, "output": spec.output_bits},
    }
    return BankPlan(
        input_rate=float(spec.input_rate),
        output_rate=float(out),
        bandwidth=float(spec.bandwidth),
        spacing=float(spec.spacing),
        first=float(offsets[0]),
        bins=M,
        oversampling=O,
        prototype=tuple(float(t) for t in np.asarray(h)),
        channel_bins=tuple(bins),
        spec=spec_d,
        stages=tuple(stages),
        predicted=predicted,
    )
