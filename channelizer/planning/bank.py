"""The bank plan: a polyphase DFT filter bank serving a raster of channels.

A bank plan holds the bank (prototype taps, number of bins ``M``, oversampling
``O``), the raster (first channel's offset from the capture centre, spacing,
count), the bin of every raster channel and the fine stages every channel runs
after its bin (at ``fs O / M``).  It round-trips exactly through YAML
(``BankPlan.to_yaml`` / ``BankPlan.from_yaml``) and is validated on loading like
a chain plan.  What the bank computes is described in
:mod:`channelizer.engines.filterbank`.
"""

from dataclasses import dataclass, field
import math

import numpy as np

from ..errors import ChannelizerError, shown
from .bank_response import prototype_magnitude
from .plan import Plan, PlanText, _Validator, _kind, _plain, stage_to_dict
from .stages import FirStage, ResamplerStage, chain_rates

__all__ = ["BankPlan", "BankFrontStage", "BANK_FORMAT", "is_bank_data", "bank_method", "fft_frame", "kept_bins",
           "bank_multiplies"]

BANK_FORMAT = "channelizer-bank/1"
MAX_CHANNELS = 100_000

#: The bank runs its branch filters by FFT correlation from this many taps per input
#: sample (``K O``) on; below it by element-wise passes, which are quicker there ...
FFT_FROM_TAPS = 12
#: ... except from ``FFT_WIDE_TAPS`` taps on with at least ``FFT_WIDE_BINS`` bins, where
#: the frames are large enough for the transforms to pay (timed on 2 cores: 192 bins,
#: ``O = 2``, ``K = 5`` run a quarter quicker by FFT; 64 bins or fewer run slower).
FFT_WIDE_TAPS = 8
FFT_WIDE_BINS = 128
#: The FFT path's frames are the power of two nearest (on a log scale) to this many
#: times ``K O`` rows, so that the overlap wastes at most a fifth of a frame.  Timed on
#: 2 cores: the 61.44 Msps bank (``K O = 36``) ran about a tenth quicker on 256 rows
#: than on 512 (its frame and residue products stay in cache), the 2.4 Msps bank
#: (``K O = 27``) a fifth slower on 128 than on 256 (a quarter of each frame is overlap).
FRAME_PER_TAP = 8


def bank_method(K, O, M):
    """How the bank engine runs ``K`` taps per branch, ``O``, ``M`` bins: ``'fft'`` or ``'direct'``."""
    taps = K * O
    return "fft" if taps >= FFT_FROM_TAPS or (taps >= FFT_WIDE_TAPS and M >= FFT_WIDE_BINS) else "direct"


def fft_frame(K, O):
    """``(N, S)``: the FFT path's frame length along time and new rows per frame.

    ``N`` is the power of two nearest to ``8 K O`` on a log scale (at least 64);
    ``S`` the largest multiple of ``O`` up to ``N - K O + 1`` (overlap-save keeps the
    rows free of wrap).
    """
    L = K * O
    N = max(64, 1 << round(math.log2(FRAME_PER_TAP * L)))
    return N, (N - L + 1) // O * O


def kept_bins(used, M):
    """Bins the engine computes for ``used`` distinct channel bins: all ``M`` once half are used."""
    return M if 2 * used >= M else used


def bank_multiplies(K, M, O, kept):
    """Multiplies per input sample of the bank as the engine runs it (its fine stages apart).

    Direct path: ``K O`` for the branches plus ``M log2 M / D`` for one ``M``-point
    FFT per output (its ``(M/2) log2 M`` complex products counted as two
    coefficient-by-sample multiplies each; Crochiere & Rabiner 1983, ch. 7).
    FFT path (:mod:`channelizer.engines.filterbank`), per frame of ``S`` new rows of
    ``D = M / O`` inputs, counted alike (an ``n``-point FFT as ``n log2 n``):
    ``D`` transforms of ``N`` points along time, ``N O D`` complex products, ``N O``
    transforms of ``D`` points and ``kept`` inverse transforms of ``N`` points, i.e.
    ``(N / S) (log2 N + 2 O + O log2 D + kept log2 N / D)``, whatever ``K``.  Both
    add the shift phase, a complex product per kept output: ``2 kept / D``, except
    the FFT path with ``O = 1``, which takes the shift as a roll of the frame.
    """
    D = M // O
    phase = 2.0 * kept / D
    if bank_method(K, O, M) == "direct":
        return K * O + M * math.log2(M) / D + phase
    N, S = fft_frame(K, O)
    return N / S * (math.log2(N) + 2 * O + O * math.log2(D) + kept * math.log2(N) / D) + (phase if O > 1 else 0.0)


def is_bank_data(data):
    """True when loaded plan data announces the bank format."""
    return isinstance(data, dict) and data.get("format") == BANK_FORMAT


@dataclass(frozen=True)
class BankFrontStage(FirStage):
    """The prototype decimating by ``M / O``, as the first stage of a channel's path.

    Its response is read from one dense FFT of the taps (see
    :func:`prototype_magnitude`) with the linear phase of a symmetric FIR,
    instead of a polynomial evaluation per frequency: thousands of taps at
    thousands of frequencies, once per channel, in the alias audit and plots.
    """

    def response(self, f, *, fs):
        cache = self.__dict__.setdefault("_magnitude", {})
        if fs not in cache:
            cache[fs] = prototype_magnitude(self.taps, fs=fs)
        f = np.asarray(f, dtype=float)
        return cache[fs](f) * np.exp(-1j * np.pi * f * (len(self.taps) - 1) / fs)


@dataclass(frozen=True)
class BankPlan(PlanText):
    """A planned filter bank for every channel of a raster.

    Attributes
    ----------
    input_rate, output_rate, bandwidth, spacing, first : float
        Hz; ``first`` is the first raster channel's offset from the capture centre.
    bins, oversampling : int
        ``M`` and ``O`` (the bank decimates by ``M / O``).
    prototype : tuple of float
        Low-pass of length ``K M`` at the input rate, unit gain at DC.
    channel_bins : tuple of int
        The bin of raster channel ``i`` (offset ``first + i spacing``).
    spec : dict
        As a chain plan's (``ripple_db``, ``rejection_db``, ``bits``, ...).
    stages : tuple
        Fine stages after the bin, at ``bin_rate``; may be empty.
    predicted : dict
        At least ``passband_ripple_db``, ``alias_rejection_db``,
        ``adjacent_rejection_db`` and ``multiplies_per_input_sample`` (all channels).
    """

    input_rate: float
    output_rate: float
    bandwidth: float
    spacing: float
    first: float
    bins: int
    oversampling: int
    prototype: tuple
    channel_bins: tuple
    spec: dict
    stages: tuple = ()
    predicted: dict = field(default_factory=dict)

    # -------------------------------------------------------------- raster
    @property
    def count(self):
        return len(self.channel_bins)

    @property
    def decimation(self):
        return self.bins // self.oversampling

    @property
    def bin_rate(self):
        """Sample rate of every bin's output, ``fs O / M``."""
        return self.input_rate * self.oversampling / self.bins

    def offsets(self):
        """Offset of every raster channel from the capture centre, Hz."""
        return [self.first + i * self.spacing for i in range(self.count)]

    def bin_centre(self, k):
        """Centre of bin ``k`` in Hz, folded into ``[-fs/2, fs/2)``."""
        f = k * self.input_rate / self.bins
        return f - self.input_rate if f >= self.input_rate / 2 else f

    def residuals(self):
        """Each channel's offset from its bin centre, Hz (its fine stages' mixing)."""
        return [off - self.bin_centre(k) for off, k in zip(self.offsets(), self.channel_bins)]

    def raster_index(self, offset):
        """``(index, nearest_offset)``: ``index`` is None when ``offset`` is off the raster."""
        i = round((offset - self.first) / self.spacing)
        i = min(max(i, 0), self.count - 1)
        near = self.first + i * self.spacing
        on = abs(offset - near) <= max(1e-3, 1e-12 * abs(offset))
        return (i if on else None), near

    def channel_plan(self):
        """The path one channel takes, as a chain plan (bank first stage + fine stages).

        The first stage is the prototype decimating by ``M / O`` at the bin centre;
        the residual mixing is not part of it, so the response is that of a channel
        on its bin centre (the audit, plots and delays use it; the alias bands, which
        depend on the rates only, are exact).
        """
        front = BankFrontStage(self.decimation, tuple(self.prototype), "fir", "channel")
        return Plan(self.input_rate, self.output_rate, self.bandwidth, dict(self.spec), (front,) + tuple(self.stages), dict(self.predicted))

    # ---------------------------------------------------------------- YAML
    def to_dict(self):
        return {
            "format": BANK_FORMAT,
            "input_rate": float(self.input_rate),
            "output_rate": float(self.output_rate),
            "bandwidth": float(self.bandwidth),
            "spec": _plain(self.spec),
            "raster": {"first": float(self.first), "spacing": float(self.spacing), "count": self.count},
            "bank": {"bins": self.bins, "oversampling": self.oversampling, "prototype": [float(t) for t in self.prototype]},
            "channel_bins": [int(k) for k in self.channel_bins],
            "stages": [stage_to_dict(st) for st in self.stages],
            "predicted": _plain(self.predicted),
        }

    @classmethod
    def from_dict(cls, data, *, source="bank plan"):
        v = _Validator(source)
        if not isinstance(data, dict):
            raise ChannelizerError(f"{source}: expected a mapping of plan keys, got {_kind(data)}")
        if data.get("format") != BANK_FORMAT:
            raise ChannelizerError(f"{source}: format must be {BANK_FORMAT!r}, got {shown(data.get('format'))}")
        fs = v.positive(data, "input_rate")
        out = v.positive(data, "output_rate")
        bw = v.positive(data, "bandwidth")
        if bw >= out:
            v.fail("bandwidth", f"{bw:g} must be below output_rate {out:g}")
        spec = v.spec(data)
        raster = v.mapping(data, "raster")
        first = v.number(raster, "first", "raster.first")
        spacing = v.positive(raster, "spacing", "raster.spacing")
        count = v.integer(raster, "count", "raster.count", lo=1, hi=MAX_CHANNELS)
        bank = v.mapping(data, "bank")
        M = v.integer(bank, "bins", "bank.bins", lo=2, hi=1 << 16)
        O = v.integer(bank, "oversampling", "bank.oversampling", lo=1, hi=M)
        if M % O:
            v.fail("bank.oversampling", f"{O} does not divide bank.bins {M}")
        proto = v.taps({"taps": bank.get("prototype")}, "bank")
        if len(proto) % M:
            v.fail("bank.prototype", f"length {len(proto)} is not a multiple of bank.bins {M}")
        bins = data.get("channel_bins")
        if not isinstance(bins, list) or len(bins) != count:
            v.fail("channel_bins", f"expected a list of {count} bin numbers (one per raster channel)")
        for i, k in enumerate(bins):
            if isinstance(k, bool) or not isinstance(k, int) or not 0 <= k < M:
                v.fail(f"channel_bins[{i}]", f"expected a bin number from 0 to {M - 1}, got {_kind(k)}")
        raw = data.get("stages", [])
        if not isinstance(raw, list):
            v.fail("stages", "expected a list (empty when the bin output is the channel)")
        stages = tuple(v.stage(s, i) for i, s in enumerate(raw))
        for i, st in enumerate(stages[:-1]):
            if isinstance(st, ResamplerStage):
                v.fail(f"stages[{i}]", "a resampler must be the last stage")
        rate = chain_rates(stages, fs=fs * O / M)[-1]
        if not math.isclose(rate, out, rel_tol=1e-9):
            v.fail("output_rate", f"the bank and stages give {rate:.9g} Hz, but output_rate says {out:g}")
        predicted = data.get("predicted", {})
        if not isinstance(predicted, dict):
            v.fail("predicted", "expected a mapping")
        for key in ("passband_ripple_db", "alias_rejection_db", "adjacent_rejection_db", "multiplies_per_input_sample"):
            v.number(predicted, key, f"predicted.{key}")
        plan = cls(fs, out, bw, spacing, first, M, O, proto, tuple(bins), spec, stages, dict(predicted))
        for off, res in zip(plan.offsets(), plan.residuals()):
            if abs(off) + bw / 2 > fs / 2 * (1 + 1e-12):
                v.fail("raster", f"the channel at {off:+g} Hz leaves the captured band (+-{fs / 2:g} Hz)")
            if abs(res) > fs / M:
                v.fail("channel_bins", f"the channel at {off:+g} Hz is {res:+g} Hz from its bin centre (bins are {fs / M:g} Hz apart)")
        return plan
