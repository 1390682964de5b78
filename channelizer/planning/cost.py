"""What a chain costs to run, stage by stage.

Counts are per complex sample: one "multiply" is a coefficient times a complex
sample (two real multiplies, on I and Q).  The ``cpu`` objective counts what the
float engine (:mod:`channelizer.engines.float_chain`) does: every non-zero tap
of a FIR is multiplied (zero taps of half-bands are skipped, symmetry is not
exploited), a rational stage computes one phase (``len(h) / L`` taps) per
output, and a CIC runs as its boxcar-power FIR, ``N (R M - 1) + 1`` taps per
output, about ``N M`` multiplies per input sample.  The ``hardware`` objective
folds symmetric taps (one multiplier per coefficient pair, pre-adding the two
samples), treats the half-band centre tap 0.5 as a shift, and counts the
multipliers needed at the stated clock for both rails; there a CIC needs no
multiplier: N additions at its input rate and N at its output rate (Hogenauer
1981).  Both count the CIC's additions.  ``fir_multiplies_per_input_sample``
(:func:`fir_multiplies_per_input`) is the designer's measure with the CIC free;
``cpu`` ranks chains by it first (see :meth:`ChainCost.key`).
"""

from dataclasses import dataclass
from fractions import Fraction
import math

import numpy as np

from .hogenauer import CIC_GUARD_BITS
from .stages import CicStage, ResamplerStage, chain_rates

__all__ = ["StageCost", "ChainCost", "chain_cost", "fir_multiplies_per_input"]


@dataclass(frozen=True)
class StageCost:
    multiplies_per_input_sample: float  # per sample at the chain's input
    multiplies_per_second: float
    additions_per_second: float
    coefficients: int
    register_bits: int
    multipliers: int  # hardware multipliers at the clock, I and Q together
    fir_multiplies_per_input_sample: float = 0.0  # the same with the CIC free


@dataclass(frozen=True)
class ChainCost:
    stages: tuple
    objective: str

    @property
    def total(self):
        fields = StageCost.__dataclass_fields__
        return StageCost(**{k: sum(getattr(s, k) for s in self.stages) for k in fields})

    def key(self):
        """Ranking key: smaller is cheaper.

        ``cpu`` ranks by the FIR multiplies (CIC free) first, then by what the float
        engine computes, CIC included.  The engine's CIC work is about ``N M``
        multiplies per input sample whatever its decimation, so a count-first
        ranking mostly trades CIC order against FIR length.  On the hand-design
        specs it would choose another chain twice, at 1.9 and 2.7 times the FIR
        work, and those chains ran at 0.90 to 1.06 times the chosen ones' time
        (``channelizer bench`` times both: :func:`channelizer.bench.engine_cost.ranking_check`).
        """
        t = self.total
        if self.objective == "hardware":
            return (t.multipliers, t.register_bits, t.multiplies_per_second)
        return (t.fir_multiplies_per_input_sample, t.multiplies_per_input_sample, t.additions_per_second)


def _nonzero(taps):
    return int(np.count_nonzero(np.asarray(taps, dtype=float)))


def _fir_multiplies_per_output(stage, objective):
    nz = _nonzero(stage.taps)
    if objective == "hardware":
        if stage.kind == "halfband":
            return (nz - 1 + 1) // 2  # centre tap 0.5 is a shift
        return (nz + 1) // 2
    return nz


def exact_rate(value):
    """A rate in Hz as the exact decimal its float prints as (``61.44e6`` is 61440000)."""
    return Fraction(repr(float(value)))


def multipliers_needed(multiplies_per_output, output_rate, clock):
    """Hardware multipliers for both rails: ``ceil(2 x multiplies per second / clock)``.

    Computed in exact rational arithmetic: a float product that lands at
    1.0000000000000002 must not round up to a second multiplier.
    """
    need = 2 * Fraction(multiplies_per_output) * output_rate / clock
    return math.ceil(need) if need else 0


def chain_cost(stages, *, fs, objective="cpu", clock=None, input_bits=16, coefficient_bits=18):
    """Per-stage and total cost of a chain.

    Parameters
    ----------
    stages : sequence of stages
    fs : float
        Chain input rate, Hz.
    objective : {'cpu', 'hardware'}
    clock : float, optional
        Hardware clock in Hz; defaults to ``fs``.
    input_bits : int
        Sample width at the chain's input (for register counts).
    coefficient_bits : int
        Coefficient width (for register counts).

    References
    ----------
    R. E. Crochiere and L. R. Rabiner, "Interpolation and decimation of digital
    signals -- a tutorial review", Proc. IEEE 69(3):300-331, 1981: cost
    ``sum_i N_i F_i``.
    """
    clock = exact_rate(fs if clock is None else clock)
    rates = chain_rates(stages, fs=fs)
    exact = exact_rate(fs)
    out = []
    width = input_bits
    for st, rate in zip(stages, rates):
        exact = exact * st.interpolation / st.decimation  # this stage's output rate, exactly
        if isinstance(st, CicStage):
            out_rate = rate / st.decimation
            adds = 2 * (st.order * rate + st.order * out_rate)
            regs = st.register_bits or (input_bits + math.ceil(st.order * math.log2(st.decimation * st.differential_delay)))
            pruned = st.pruned_bits[: 2 * st.order] if st.pruned_bits else (0,) * (2 * st.order)
            # the registers as the bit-true chain builds them: one guard bit each (hogenauer.chain_cic)
            reg_bits = 2 * sum(regs + CIC_GUARD_BITS - p for p in pruned)
            # cpu: the float engine runs the CIC as its N (R M - 1) + 1-tap FIR
            mps = 0.0 if objective == "hardware" else float(st.num_taps) * out_rate
            out.append(StageCost(mps / fs, mps, adds, 0, reg_bits, 0, 0.0))
            width = regs - (st.pruned_bits[-1] if st.pruned_bits else 0)
            continue
        if isinstance(st, ResamplerStage):
            out_rate = rate * st.interpolation / st.decimation
            nz = _nonzero(st.taps)
            per_out = Fraction(nz, st.interpolation)
            if objective == "hardware":
                per_out = math.ceil(per_out / 2)
        else:
            out_rate = rate / st.decimation
            per_out = _fir_multiplies_per_output(st, objective)
            nz = _nonzero(st.taps)
        mps = float(per_out) * out_rate
        adds = 2 * max(nz - 1, 0) * out_rate / (st.interpolation if isinstance(st, ResamplerStage) else 1)
        reg_bits = 2 * len(st.taps) * width + nz * coefficient_bits
        mult = multipliers_needed(per_out, exact, clock)
        out.append(StageCost(mps / fs, mps, adds, len(st.taps), reg_bits, mult, mps / fs))
    return ChainCost(tuple(out), objective)


def fir_multiplies_per_input(stages, *, fs):
    """FIR multiplies per input sample with the CIC free (the ``cpu`` count of every other stage).

    The designer's measure of a chain: what a hardware CIC followed by software FIRs
    would cost, and the first entry of the ``cpu`` ranking key.
    """
    return chain_cost(stages, fs=fs, objective="cpu").total.fir_multiplies_per_input_sample
