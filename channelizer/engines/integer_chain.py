"""The bit-true integer chain built from a plan: widths, scaling and predicted noise.

:class:`IntegerChain` strings the integer stages of :mod:`channelizer.fixedpoint`
together the way hardware would build the plan: an optional NCO mixer, then every
stage of the plan, each with a stated input width, internal widths, output width
and a stated place where bits are dropped.  It streams (any block sizes give the
same samples, bit for bit), reports its widths as a :class:`BitWidthTable` and
predicts its own error against the ideal floating-point chain.

Widths at every point (``B_in``, ``B_out``: the plan's input and output bits;
``g``: ``internal_guard_bits``)
-------------------------------------------------------------------------------
* **Input**: ``B_in`` bits; full scale is ``2**(B_in - 1)``, as in
  :mod:`channelizer.datatypes` (``x / 2**(b-1)``).
* **After the NCO** (only when ``offset != 0``): the exact products
  ``I c + Q s`` (``B_in + A`` bits, ``A`` the table amplitude bits) are rounded
  half up to ``B_in + g`` bits.  One of the ``g`` guard bits is headroom, because
  rotating a full-scale complex sample can put ``sqrt(2)`` times full scale on one
  rail; the other ``g - 1`` are extra fraction bits.
* **After an intermediate stage**: ``B_out + g`` bits, again one headroom bit and
  ``g - 1`` extra fraction bits (full scale at ``2**(B_out + g - 2)``).  The
  headroom bit also holds the overshoot of a FIR (``sum |h| > 1``) on a
  worst-case input.
* **After the last stage**: exactly ``B_out`` bits, full scale ``2**(B_out - 1)``;
  anything beyond is saturated (and counted).

Where bits are dropped
----------------------
* CIC: Hogenauer's pruning truncates (floor, the arithmetic shift right of
  :class:`~channelizer.fixedpoint.IntegerCic`) the input of each integrator and
  comb by the counts of ``cic_registers(..., input_bits=<width in>,
  output_bits=<width out>)``; the registers wrap, which a CIC tolerates.  The
  final drop to the stage's output LSB is done here by **round half up** instead
  of truncation (the last comb's register is kept whole and shifted with
  ``+2**(s-1)``).  These widths come from
  :func:`~channelizer.planning.hogenauer.chain_cic`, the rule the plan's
  ``register_bits`` and ``pruned_bits`` are computed by
  (:func:`~channelizer.planning.hogenauer.planned_cic`), so without a mixer in front
  the chain builds exactly the widths the plan states.  Every register is **one bit wider** than Hogenauer's width:
  with pruning, an input held near its most negative value can make the floor
  errors carry the result one LSB below the bottom of the range, where the
  register would wrap to the top (``IntegerCic``'s documented edge case; seen
  for N = 5, R = 16).  With the guard bit the value is held, and the stage output
  saturates to its width instead of wrapping.
* FIR, half-band and resampler: exact products and sums (the accumulator holds the
  worst case), then **round half up** to the output LSB and saturate.
* NCO: the phase is **truncated** to the table's ``nco_table_bits`` (the table
  index is the accumulator's top bits); the table entries are rounded to nearest.

Scaling
-------
No stage changes the gain of the float chain except for two factors of the
integer path that are carried in :attr:`IntegerChain.output_scale` instead of
being compensated: the CIC gain ``(R M)^N`` is not a power of two in general, so
its output sits at ``(R M)^N / 2**ceil(N log2(R M))`` of the output full scale;
and the NCO table peak is ``2**(A-1) - 1``, not ``2**(A-1)``.

References
----------
E. B. Hogenauer, "An economical class of digital filters for decimation and
interpolation", IEEE Trans. ASSP 29(2):155-162, 1981.
H. T. Nicholas and H. Samueli, "An analysis of the output spectrum of direct
digital frequency synthesizers in the presence of phase-accumulator truncation",
Proc. 41st Annual Frequency Control Symposium, 1987, pp. 495-502 (from memory).
"""

from dataclasses import replace
import functools
import math
import numbers

import numpy as np

from ..errors import ChannelizerError
from ..units import format_hz
from ..dsp.fixedpoint import (
    IntegerCic,
    IntegerFir,
    IntegerResampler,
    PhaseAccumulatorNco,
)
from ..planning.quantize import QuantizedTaps, quantize_taps
from ..planning.hogenauer import _checked_int, chain_cic, point_bits
from ..planning.plan import Plan
from ..planning.response import normalised_response
from ..planning.stages import CicStage, ResamplerStage, chain_rates
from .bit_widths import BitWidthRow, BitWidthTable, NoiseTerm, _rounding_ms

__all__ = ["IntegerChain", "DEFAULT_COEFFICIENT_BITS"]

#: Coefficient width used when neither the stage nor ``plan.spec['bits']`` gives one
#: (the planner's default).
DEFAULT_COEFFICIENT_BITS = 18
#: Most points on the frequency grid of the coefficient-error bound.
_MAX_GRID = 1 << 18


# ----------------------------------------------------------------------------- tables


# ----------------------------------------------------------------------------- points


def _round_half_up(v, shift):
    if shift <= 0:
        return v
    return (v + (1 << (shift - 1))) >> shift


class _Saturator:
    """Clips to ``bits`` two's complement and counts the clipped values."""

    def __init__(self, bits):
        self.hi = 2 ** (bits - 1) - 1
        self.lo = -(2 ** (bits - 1))
        self.count = 0

    def __call__(self, v):
        if v.size:
            bad = np.count_nonzero((v > self.hi) | (v < self.lo))
            if bad:
                self.count += int(bad)
                v = np.clip(v, self.lo, self.hi)
        return v


class _NcoPoint:
    def __init__(self, nco, shift, bits):
        self.nco = nco
        self.shift = shift
        self.sat = _Saturator(bits)

    def __call__(self, x):
        return self.sat(_round_half_up(self.nco.mix(x), self.shift))

    def reset(self):
        self.nco.reset()
        self.sat.count = 0

    @property
    def saturated(self):
        return self.sat.count


class _CicPoint:
    def __init__(self, cic, shift, bits):
        self.cic = cic
        self.shift = shift
        self.sat = _Saturator(bits)

    def __call__(self, x):
        return self.sat(_round_half_up(self.cic(x), self.shift))

    def reset(self):
        self.cic.reset()
        self.sat.count = 0

    @property
    def saturated(self):
        return self.sat.count


class _FirPoint:
    def __init__(self, fir):
        self.fir = fir

    def __call__(self, x):
        return self.fir(x)

    def reset(self):
        self.fir.reset()

    @property
    def saturated(self):
        return self.fir.saturated


def _stage_taps(stage, index, bits_override, default_bits):
    """The integer coefficients of one FIR or resampler stage."""
    where = f"stage {index} ({stage.kind})"
    taps = np.asarray(stage.taps, dtype=np.float64)
    own = stage.coefficient_bits is not None and stage.coefficient_frac_bits is not None
    if own and bits_override in (None, stage.coefficient_bits):
        # Already quantised: the plan's integers are used as they are.
        frac, bits = stage.coefficient_frac_bits, stage.coefficient_bits
        ints = np.rint(np.ldexp(taps, frac))
        if not np.array_equal(np.ldexp(ints, -frac), taps):
            raise ChannelizerError(
                f"{where}: taps are not integers times 2^-{frac} as coefficient_frac_bits says"
            )
        lim = 2 ** (bits - 1)
        if ints.max() > lim - 1 or ints.min() < -lim:
            raise ChannelizerError(f"{where}: a coefficient does not fit the stage's {bits} bits")
        return QuantizedTaps(ints.astype(np.int64), frac, bits)
    bits = bits_override if bits_override is not None else (stage.coefficient_bits or default_bits)
    try:
        return quantize_taps(taps, bits)
    except ChannelizerError as exc:
        raise ChannelizerError(f"{where}: {exc}") from None


def _real(value, name):
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value):
        raise ChannelizerError(f"{name} must be a finite number of Hz, got {value!r}")
    return float(value)


# ----------------------------------------------------------------------------- chain


class IntegerChain:
    """Bit-true integer model of a planned chain; build it with :meth:`from_plan`.

    Attributes
    ----------
    plan : Plan
    offset, fs : float
        Frequency moved to 0 Hz by the NCO, and the input rate, in Hz.
    input_bits, output_bits : int
    names : tuple of str
        The chain's points after the input, in order (``'nco'`` first when mixing).
    coefficients : dict
        ``{name: QuantizedTaps}`` of every FIR, half-band and resampler stage.
    quantized_stages : tuple
        The plan's stages with the taps replaced by the quantised values (for
        :func:`channelizer.response.predict`).
    widths : BitWidthTable
    output_scale : float
        Full-scale units per output integer: ``out_int * output_scale`` compares
        with the float chain fed ``in_int / 2**(input_bits - 1)``.
    """

    def __init__(self, *_args, **_kwargs):
        raise TypeError("build an IntegerChain with IntegerChain.from_plan(plan, ...)")

    @classmethod
    def from_plan(cls, plan, *, offset=0.0, fs=None, coefficient_bits=None, nco_table_bits=12,
                  nco_amplitude_bits=18, accumulator_bits=32, internal_guard_bits=2):
        """Build the bit-true chain of ``plan``.

        Parameters
        ----------
        plan : Plan
        offset : float, optional
            Frequency in Hz (at the input) that the NCO moves to 0 Hz: the input is
            multiplied by ``exp(-2j pi offset n / fs)``.  0 leaves the NCO out.
        fs : float, optional
            Input rate in Hz; defaults to ``plan.input_rate``, and any other value is
            refused (the plan's filters are designed for that rate).
        coefficient_bits : int, optional
            Width of every FIR coefficient, overriding the plan.  By default a stage
            uses its own quantised integers when it has them (``coefficient_bits`` and
            ``coefficient_frac_bits`` set), else ``quantize_taps(taps, bits)`` with
            ``bits = plan.spec['bits']['coefficient']`` (or 18 when the plan has none).
        nco_table_bits, nco_amplitude_bits, accumulator_bits : int, optional
            NCO phase bits kept (table size ``2**nco_table_bits``), table amplitude
            width and phase accumulator width.
        internal_guard_bits : int, optional
            ``g >= 1`` bits added to the width after the NCO and after every
            intermediate stage: one headroom bit and ``g - 1`` fraction bits.

        Returns
        -------
        IntegerChain
        """
        if not isinstance(plan, Plan):
            raise ChannelizerError(f"expected a Plan, got {type(plan).__name__}")
        self = object.__new__(cls)
        offset = _real(offset, "offset")
        rate = float(plan.input_rate) if fs is None else _real(fs, "fs")
        if not math.isclose(rate, plan.input_rate, rel_tol=1e-9):
            raise ChannelizerError(f"fs {format_hz(rate, 'sps')} differs from the plan's input rate {format_hz(plan.input_rate, 'sps')}")
        if abs(offset) >= rate / 2:
            raise ChannelizerError(f"offset {format_hz(offset)} is outside +-fs/2 = +-{format_hz(rate / 2)}")
        g = _checked_int(internal_guard_bits, "internal_guard_bits", low=1, high=16)
        if coefficient_bits is not None:
            coefficient_bits = _checked_int(coefficient_bits, "coefficient_bits", low=2, high=32)
        bits = plan.spec["bits"]
        b_in, b_out = int(bits["input"]), int(bits["output"])
        default_coef = int(bits.get("coefficient", DEFAULT_COEFFICIENT_BITS))
        self.plan, self.offset, self.fs = plan, offset, rate
        self.input_bits, self.output_bits = b_in, b_out
        rates = chain_rates(plan.stages, fs=rate)

        points, names, rows, coefs, qstages = [], [], [], {}, []
        # NoiseTerm (already in full-scale^2), or (point, source, mean square in that
        # point's LSB^2, LSB in full-scale units).
        budget = []
        # The running point: width, exponent e (full scale <= 2**e) and LSB in full-scale units.
        width, e, scale = b_in, b_in - 1, 2.0 ** -(b_in - 1)
        rows.append(BitWidthRow("input", "input", rate, rate, b_in, b_in, 0, b_in, lsb=scale))

        if offset != 0.0:
            amp = _checked_int(nco_amplitude_bits, "nco_amplitude_bits", low=max(g, 2), high=32)
            nco = PhaseAccumulatorNco(offset, fs=rate, input_bits=b_in, accumulator_bits=accumulator_bits,
                                      table_bits=nco_table_bits, amplitude_bits=amp)
            peak = 2 ** (amp - 1) - 1
            w_out = b_in + g
            e_out = w_out - 2
            shift = e + (amp - 1) - e_out
            scale = scale * 2.0**shift / peak
            width, e = w_out, e_out
            points.append(_NcoPoint(nco, shift, w_out))
            names.append("nco")
            rows.append(BitWidthRow(
                "nco", "nco", rate, rate, b_in, w_out, 1, nco.output_bits, output_shift=shift,
                rounding=(f"phase truncated to the top {nco.table_bits} of {nco.accumulator_bits} accumulator "
                          f"bits; table entries rounded to {amp} bits; products rounded half up by {shift} bits"),
                overflow="saturate (cannot occur: the headroom bit holds the sqrt(2) peak of a rotation)",
                lsb=scale,
            ))
            delta = 2 * math.pi / 2**nco.table_bits
            # Phase truncation: the table angle lags the true phase by e ~ U[0, delta), so
            # the product carries x (e^{je} - 1): E|e^{je} - 1|^2 = 2 - 2 sin(delta)/delta
            # for |x| = 1, half of it per rail (uniform-error model, common practice; the
            # spur structure is Nicholas & Samueli 1987, from memory).
            budget.append(NoiseTerm("nco", f"phase truncation to {nco.table_bits} bits (full-scale tone)",
                                    1.0 - math.sin(delta) / delta))
            # Table rounding: each entry is off by U(-1/2, 1/2) of 1/peak: q^2/12 on cos and sin.
            budget.append(NoiseTerm("nco", f"{amp}-bit table rounding (full-scale tone)", 1.0 / (12.0 * peak**2)))
            budget.append(("nco", f"product rounding by {shift} bits", _rounding_ms(shift), scale))

        n_stages = len(plan.stages)
        for i, (st, r_in, r_out) in enumerate(zip(plan.stages, rates[:-1], rates[1:]), start=1):
            name = f"stage{i}_{st.kind}"
            last = i == n_stages
            w_out, head_out = point_bits(b_out, last=last, extra_bits=g)
            e_target = w_out - 1 - head_out
            head_in = width - 1 - e
            if isinstance(st, CicStage):
                # the widths the plan states (hogenauer.planned_cic) come from the same rule
                built = chain_cic(st.order, st.decimation, st.differential_delay, input_bits=width,
                                  output_bits=w_out, input_headroom_bits=head_in, output_headroom_bits=head_out)
                nominal, regs, shift = built.nominal, built.registers, built.round_shift
                cic = IntegerCic(st.order, st.decimation, st.differential_delay, input_bits=width,
                                 output_bits=regs.output_bits, registers=regs)
                points.append(_CicPoint(cic, shift, w_out))
                c = (nominal.gain - 1).bit_length()
                b_last = nominal.output_shift
                e_out = e + c - b_last
                new_scale = scale * 2.0**b_last / nominal.gain
                rows.append(BitWidthRow(
                    name, "cic", r_in, r_out, width, w_out, w_out - 1 - e_out, built.widest_bits,
                    integrator_bits=built.integrator_bits, comb_bits=built.comb_bits,
                    pruned_bits=tuple(nominal.discarded), register_bits=nominal.full_bits, output_shift=shift,
                    rounding=(f"floor at each integrator and comb (Hogenauer pruning); last comb rounded "
                              f"half up by {shift} bits to the output"),
                    overflow=("registers wrap (harmless in a CIC); one guard bit above Hogenauer's width; "
                              "output saturates"),
                    lsb=new_scale,
                ))
                # Hogenauer's variance of every truncation (output included), in output LSB^2,
                # plus the square of the mean error: the floor at integrator 1 has mean
                # -(2**B1 - 1)/2 input units and reaches the output with the DC gain (R M)^N
                # (the later sources see the combs' zeros at DC); the final half-up rounding
                # adds 2**-(s+1).
                d1 = nominal.discarded[0]
                bias = -(2.0**d1 - 1.0) / 2.0 * nominal.gain / 2.0**b_last
                bias += 2.0 ** -(shift + 1) if shift > 0 else 0.0
                budget.append((name, "pruning and output rounding (Hogenauer 1981) and their mean",
                               nominal.output_noise_variance + bias**2, new_scale))
                scale, e = new_scale, e_out
            else:
                q = _stage_taps(st, i, coefficient_bits, default_coef)
                shift = q.frac_bits + e - e_target
                if shift < 0:
                    shift = 0
                e_out = q.frac_bits + e - shift
                if isinstance(st, ResamplerStage):
                    fir = IntegerResampler(q.integers, q.frac_bits, st.interpolation, st.decimation,
                                           input_bits=width, output_bits=w_out, shift=shift)
                    up = st.interpolation
                else:
                    fir = IntegerFir(q.integers, q.frac_bits, st.decimation, input_bits=width,
                                     output_bits=w_out, shift=shift)
                    up = 1
                points.append(_FirPoint(fir))
                ints = [int(v) for v in q.integers]
                worst = max(sum(abs(v) for v in ints[p::up]) for p in range(up)) * 2 ** (width - 1)
                worst += (1 << (shift - 1)) if shift else 0
                new_scale = scale * 2.0 ** (shift - q.frac_bits)
                rows.append(BitWidthRow(
                    name, st.kind, r_in, r_out, width, w_out, w_out - 1 - e_out, worst.bit_length() + 1,
                    coefficient_bits=q.bits, coefficient_frac_bits=q.frac_bits, output_shift=shift,
                    rounding=(f"exact products and sums, then round half up by {shift} bits" if shift
                              else "exact products and sums; nothing dropped"),
                    overflow="saturate at the output (counted)",
                    lsb=new_scale,
                ))
                budget.append((name, f"output rounding by {shift} bits (q^2/12 and the half-up mean)",
                               _rounding_ms(shift), new_scale))
                coefs[name] = q
                qstages.append(replace(st, taps=tuple(float(v) for v in q.values),
                                       coefficient_bits=q.bits, coefficient_frac_bits=q.frac_bits))
                scale, e = new_scale, e_out
                names.append(name)
                width = w_out
                continue
            qstages.append(st)
            names.append(name)
            width = w_out

        self._points = points
        self.names = tuple(names)
        self.coefficients = coefs
        self.quantized_stages = tuple(qstages)
        self.widths = BitWidthTable(tuple(rows))
        self.output_scale = scale
        self._budget = tuple(
            t if isinstance(t, NoiseTerm) else NoiseTerm(t[0], t[1], t[2] * t[3] ** 2) for t in budget
        )
        return self

    # ------------------------------------------------------------------ streaming
    def _check(self, block):
        x = np.asarray(block)
        if x.ndim != 2 or x.shape[1] != 2:
            raise ChannelizerError(f"integer chain input must be an (n, 2) array of I and Q, got shape {x.shape}")
        if not np.issubdtype(x.dtype, np.integer):
            raise ChannelizerError(f"integer chain input must be integers, got dtype {x.dtype}")
        if x.size:
            lim = 2 ** (self.input_bits - 1)
            lo, hi = int(x.min()), int(x.max())
            if lo < -lim or hi > lim - 1:
                bad = lo if lo < -lim else hi
                raise ChannelizerError(f"integer chain input sample {bad} is outside the {self.input_bits}-bit range")
        return x.astype(np.int64, copy=False)

    def process(self, block):
        """Feed a block of ``(n, 2)`` integer I/Q samples; return the output samples it completes.

        Any split of a stream into blocks gives the same output samples, bit for bit.
        Returns an ``(m, 2)`` int64 array of ``output_bits``-bit values.
        """
        v = self._check(block)
        for p in self._points:
            v = p(v)
        return v

    def seek(self, index):
        """Start the NCO at the phase a stream from sample 0 has at sample ``index``."""
        for p in self._points:
            if isinstance(p, _NcoPoint):
                p.nco.seek(index)

    def cic_states(self):
        """Copies of every CIC's registers (their integrators carry the whole history)."""
        return [p.cic.state() for p in self._points if isinstance(p, _CicPoint)]

    def set_cic_states(self, states):
        """Resume every CIC from :meth:`cic_states` of the same chain."""
        for p, st in zip((p for p in self._points if isinstance(p, _CicPoint)), states):
            p.cic.set_state(st)

    def stage_outputs(self, block):
        """Like :meth:`process`, but return every point's output: ``{name: (m, 2) int64}``.

        The last entry is what :meth:`process` would return.  State advances as in
        :meth:`process`, so the two may be mixed on one stream.
        """
        v = self._check(block)
        out = {}
        for name, p in zip(self.names, self._points):
            v = p(v)
            out[name] = v
        return out

    def reset(self):
        """Return every stage to the all-zero state of a stream's start."""
        for p in self._points:
            p.reset()

    @property
    def saturated(self):
        """``{name: count}`` of output values clipped at each point since the start or ``reset()``."""
        return {name: p.saturated for name, p in zip(self.names, self._points)}

    # ------------------------------------------------------------------ noise
    @functools.cached_property
    def noise_budget(self):
        """The terms of :attr:`predicted_noise_rms`, as a tuple of :class:`NoiseTerm`.

        Every rounding point adds the mean square of its error (``q^2/12``, common
        practice, plus the mean of round half up) times the square of its LSB in
        full-scale units, carried to the output with unit gain (the later filters
        pass white noise with gain ``sum h^2 <= 1``, so this leans high).  Each CIC
        adds ``cic_registers(...).output_noise_variance`` (Hogenauer 1981) and the
        square of its truncation mean.  The NCO adds its phase-truncation and
        table-rounding errors for a full-scale tone.  The coefficient term is the
        bound ``max_f sum_paths |H_q(f) - H(f)|^2 / 2`` over the whole input band
        (every image path of a resampler), the float chain with the plan's taps
        against the quantised ones: by Parseval no input of full-scale complex
        power (``|x|^2 = 1``, 0 dBFS) can see more.
        """
        return self._budget + (NoiseTerm("coefficients", "coefficient quantisation bound (0 dBFS input)",
                                         self._coefficient_bound()),)

    @property
    def predicted_noise_rms(self):
        """Predicted RMS difference from the ideal float chain, per rail, in output full-scale units.

        ``sqrt`` of the sum of :attr:`noise_budget`.  The signal-dependent terms (NCO,
        coefficients) are those of a full-scale (0 dBFS) input inside the channel.
        """
        return math.sqrt(sum(t.variance for t in self.noise_budget))

    def _coefficient_bound(self):
        plan_stages = self.plan.stages
        if all(a is b or tuple(a.taps) == tuple(b.taps) for a, b in zip(plan_stages, self.quantized_stages)):
            return 0.0
        fs = self.fs
        rates = chain_rates(plan_stages, fs=fs)
        spacing = fs
        images = 1
        for st, r in zip(plan_stages, rates):
            if isinstance(st, CicStage):
                continue
            up = st.interpolation
            spacing = min(spacing, r * up / (8.0 * len(st.taps)))
            if isinstance(st, ResamplerStage):
                images = up
        n = int(min(max(math.ceil(fs / spacing), 4096), _MAX_GRID))
        f = (np.arange(n) / n - 0.5) * fs
        total = np.zeros(n)
        for k in range(images):
            h = normalised_response(plan_stages, f, fs=fs, image=k)
            hq = normalised_response(self.quantized_stages, f, fs=fs, image=k)
            total += np.abs(hq - h) ** 2
        return float(total.max()) / 2.0
