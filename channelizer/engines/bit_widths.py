"""The bit-true chain's bit-width table and its noise budget.

One row per register (NCO, CIC integrators and combs with Hogenauer's pruning, FIR
accumulators, outputs) with its width and the bits it drops; each dropped-bit source
adds a noise term whose variance follows from the rounding mode.
"""

from dataclasses import dataclass

from ..planning.hogenauer import CIC_GUARD_BITS

__all__ = ["BitWidthRow", "BitWidthTable", "NoiseTerm"]


@dataclass(frozen=True)
class BitWidthRow:
    """Widths at one point of the chain.

    Attributes
    ----------
    name : str
        ``'input'``, ``'nco'`` or ``'stage<i>_<kind>'`` (``i`` counts the plan's
        stages from 1; ``kind`` is ``cic``, ``fir``, ``halfband`` or ``resampler``).
    kind : str
    rate_in, rate_out : float
        Sample rates in Hz.
    input_bits, output_bits : int
        Two's-complement widths of the samples coming in and going out.
    headroom_bits : int
        Bits of the output above full scale (full scale is
        ``2**(output_bits - 1 - headroom_bits)``).
    accumulator_bits : int
        Widest register: the NCO product, the widest CIC register, or the width
        that holds a FIR's worst-case sum of products plus its rounding constant.
    integrator_bits, comb_bits : tuple of int
        CIC register widths after pruning (including the guard bit); empty otherwise.
    pruned_bits : tuple of int
        CIC: the ``2N + 1`` LSB counts of Hogenauer's pruning for this stage's
        widths (integrators, combs, output); empty otherwise.
    register_bits : int
        CIC: Hogenauer's full width ``B_in + ceil(N log2(R M))`` (the plan's
        ``register_bits``); each register is this plus the guard bit minus its
        pruned LSBs.  0 otherwise.
    coefficient_bits, coefficient_frac_bits : int or None
        FIR coefficients: width and fraction bits (value = integer * 2**-frac).
    output_shift : int
        Bits dropped at the stage output.
    rounding : str
        Where and how bits are dropped.
    overflow : str
        What happens beyond the range.
    lsb : float
        One output LSB in the float chain's full-scale units.
    """

    name: str
    kind: str
    rate_in: float
    rate_out: float
    input_bits: int
    output_bits: int
    headroom_bits: int
    accumulator_bits: int
    integrator_bits: tuple = ()
    comb_bits: tuple = ()
    pruned_bits: tuple = ()
    register_bits: int = 0
    coefficient_bits: int | None = None
    coefficient_frac_bits: int | None = None
    output_shift: int = 0
    rounding: str = "none"
    overflow: str = "none"
    lsb: float = 1.0


_CSV_COLUMNS = (
    "point", "kind", "rate_in_hz", "rate_out_hz", "input_bits", "output_bits", "headroom_bits",
    "accumulator_bits", "integrator_bits", "comb_bits", "pruned_bits", "coefficient_bits",
    "coefficient_frac_bits", "output_shift", "rounding", "overflow", "lsb_full_scale", "register_bits",
)


def _csv_cell(value):
    text = "" if value is None else str(value)
    if any(c in text for c in ',"\n'):
        text = '"' + text.replace('"', '""') + '"'
    return text


@dataclass(frozen=True)
class BitWidthTable:
    """The widths of every point of an :class:`IntegerChain`, input first."""

    rows: tuple

    def __iter__(self):
        return iter(self.rows)

    def __len__(self):
        return len(self.rows)

    def __getitem__(self, key):
        if isinstance(key, str):
            for row in self.rows:
                if row.name == key:
                    return row
            raise KeyError(key)
        return self.rows[key]

    def to_csv(self):
        """CSV text (RFC 4180 quoting), one row per point; lists are space separated."""
        lines = [",".join(_CSV_COLUMNS)]
        for r in self.rows:
            cells = (
                r.name, r.kind, repr(float(r.rate_in)), repr(float(r.rate_out)), r.input_bits,
                r.output_bits, r.headroom_bits, r.accumulator_bits,
                " ".join(map(str, r.integrator_bits)), " ".join(map(str, r.comb_bits)),
                " ".join(map(str, r.pruned_bits)), r.coefficient_bits, r.coefficient_frac_bits,
                r.output_shift, r.rounding, r.overflow, repr(float(r.lsb)), r.register_bits or "",
            )
            lines.append(",".join(_csv_cell(c) for c in cells))
        return "\n".join(lines) + "\n"

    def format(self):
        """A readable fixed-width table with the CIC registers and rounding spelled out."""
        head = (f"{'point':<16} {'rate in Hz':>12} {'rate out Hz':>12} {'in':>4} {'out':>4} "
                f"{'head':>4} {'acc':>4} {'coef':>9} {'drop':>4}")
        lines = [head, "-" * len(head)]
        for r in self.rows:
            coef = f"{r.coefficient_bits}/{r.coefficient_frac_bits}" if r.coefficient_bits else "-"
            lines.append(
                f"{r.name:<16} {r.rate_in:>12.6g} {r.rate_out:>12.6g} {r.input_bits:>4} {r.output_bits:>4} "
                f"{r.headroom_bits:>4} {r.accumulator_bits:>4} {coef:>9} {r.output_shift:>4}"
            )
            if r.integrator_bits:
                lines.append(f"{'':<18}full width {r.register_bits} (Hogenauer) + {CIC_GUARD_BITS} guard bit; "
                             f"each register is {r.register_bits + CIC_GUARD_BITS} minus its pruned LSBs")
                lines.append(f"{'':<18}integrator widths {' '.join(map(str, r.integrator_bits))}; "
                             f"comb widths {' '.join(map(str, r.comb_bits))}")
                lines.append(f"{'':<18}pruned LSBs (integrators, combs, output) {' '.join(map(str, r.pruned_bits))}")
            lines.append(f"{'':<18}bits dropped: {r.rounding}")
            lines.append(f"{'':<18}out of range: {r.overflow}")
        lines += [
            "",
            "in/out: sample widths (two's complement); head: output bits above full scale;",
            "acc: widest register; coef: coefficient bits/fraction bits (value = integer * 2^-frac);",
            "drop: LSBs dropped at the stage output.",
        ]
        return "\n".join(lines) + "\n"


@dataclass(frozen=True)
class NoiseTerm:
    """One source of difference from the ideal float chain.

    Attributes
    ----------
    point : str
        Where it arises (a :class:`BitWidthRow` name).
    source : str
        What it is.
    variance : float
        Mean-square error it adds at the output, per rail (I or Q), in output
        full-scale units squared.
    """

    point: str
    source: str
    variance: float


def _rounding_ms(shift):
    """Mean square of round-half-up on integers by ``shift`` bits, in output LSB^2.

    The dropped bits take ``2**shift`` equally likely values: the error has variance
    ``(1 - 2**(-2 shift)) / 12`` (the discrete form of q^2/12, common practice) and
    mean ``2**-(shift + 1)`` (half up is biased by the exact ties).
    """
    if shift <= 0:
        return 0.0
    return (1.0 - 2.0 ** (-2 * shift)) / 12.0 + 2.0 ** (-2 * (shift + 1))
