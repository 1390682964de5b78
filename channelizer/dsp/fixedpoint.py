"""Bit-true integer stages: CIC, FIR decimator, rational resampler and NCO mixer.

Each stage is an object that holds its own state, so feeding a stream in blocks of
any size gives exactly the samples one call on the whole stream gives.

Conventions shared by every stage
---------------------------------
* Samples are integers; every result is a ``numpy.int64`` array.
* Time runs along axis 0.  Any trailing shape is carried through unchanged, so the
  I and Q rails travel together as an ``(n, 2)`` array (column 0 is I, column 1 is
  Q); a single real rail is an ``(n,)`` array.  The trailing shape is fixed by the
  first block a stage sees.
* A decimating stage computes ``y[n]`` from the inputs up to index ``n D`` (the
  first output belongs to input 0; decimation keeps samples ``0, D, 2D, ...`` of
  the filtered stream) and emits ``y[n]`` once the inputs up to ``n D + D - 1``
  have arrived: ``N`` samples fed in total give ``floor(N / D)`` outputs.  A
  resampler by ``up / down`` emits ``floor(N up / down)``.
* Inputs are checked against the stage's ``input_bits`` two's-complement range.

Integer arithmetic wraps modulo ``2**64`` in numpy (silently, for arrays); the CIC
relies on that, see :class:`IntegerCic`.  The FIR stages instead check before
running that no sum can leave the int64 range.
"""

from fractions import Fraction
import math
import numbers

import numpy as np

from ..errors import ChannelizerError
from . import wide_int
from ..planning.hogenauer import CicRegisters, cic_registers, _checked_int as _int

__all__ = [
    "IntegerCic",
    "IntegerFir",
    "IntegerResampler",
    "PhaseAccumulatorNco",
]

_INT64_MAX = 2**63 - 1


def _read_only(a):
    a = np.array(a, dtype=np.int64, copy=True)
    a.setflags(write=False)
    return a


class _SampleGate:
    """Checks incoming blocks: integer dtype, range of ``bits``, fixed trailing shape."""

    def __init__(self, bits, stage, *, trailing=None):
        self.bits = bits
        self.stage = stage
        self.trailing = trailing
        self.fixed_trailing = trailing is not None

    def __call__(self, x):
        x = np.asarray(x)
        if x.ndim == 0:
            raise ChannelizerError(f"{self.stage} input must have a time axis, got a scalar")
        if not np.issubdtype(x.dtype, np.integer):
            raise ChannelizerError(f"{self.stage} input must be integers, got dtype {x.dtype}")
        if self.trailing is not None and x.shape[1:] != self.trailing:
            raise ChannelizerError(
                f"{self.stage} input has trailing shape {x.shape[1:]}, expected {self.trailing}"
            )
        if x.size:
            lo, hi = int(x.min()), int(x.max())
            if lo < -(2 ** (self.bits - 1)) or hi > 2 ** (self.bits - 1) - 1:
                bad = lo if lo < -(2 ** (self.bits - 1)) else hi
                raise ChannelizerError(
                    f"{self.stage} input sample {bad} is outside the {self.bits}-bit range"
                )
        self.trailing = x.shape[1:]  # a rejected block leaves the stage as it was
        return x.astype(np.int64, copy=False)

    def reset(self):
        if not self.fixed_trailing:
            self.trailing = None


def _wrap(v, width):
    """Reduce int64 values to ``width``-bit two's complement (a register of that width)."""
    if width >= 64:
        return v
    sign = 1 << (width - 1)
    return ((v & ((1 << width) - 1)) ^ sign) - sign


# ----------------------------------------------------------------------------- CIC


class IntegerCic:
    """Bit-true CIC decimator with Hogenauer's pruned registers.

    N integrators at the input rate, keep every R-th sample, N combs with delay M
    at the output rate.  The input of register j is truncated (arithmetic shift
    right, the floor) by the bits that stage discards beyond the previous one, and
    the register wraps at its width in two's complement.  The output is the last
    comb's value shifted right to the output LSB: ``output_bits`` wide.

    Parameters
    ----------
    order, decimation, differential_delay : int
        ``N``, ``R`` and ``M``.
    input_bits, output_bits : int
        Two's-complement sample widths.
    registers : CicRegisters, optional
        Register widths for these parameters; by default
        ``cic_registers(order, decimation, differential_delay, input_bits=...,
        output_bits=...)``.

    Notes
    -----
    Wrap-around is harmless in a CIC (Hogenauer 1981): the output is a sum of
    register values whose true result fits the full width, and every operation is
    a ring operation modulo ``2**width``.  numpy's int64 ``cumsum`` and subtraction
    wrap modulo ``2**64``; since ``2**w`` divides ``2**64`` for ``w <= 64``,
    ``(a + b mod 2**64) mod 2**w == (a + b) mod 2**w``, so reducing a block's
    cumulative sum to w bits once at the end equals wrapping after every addition.
    The shift that follows needs only the value modulo ``2**w``: for
    ``v = a + k 2**w``, ``floor(v / 2**s) = floor(a / 2**s) + k 2**(w - s)``, which
    is correct modulo ``2**(w - s)``, the next register's width.  Registers are
    still reduced to their widths after each stage so their contents equal the
    hardware's.

    Pruning has one edge case, reproduced here as the hardware would show it: the
    truncations round down, so when ``(R M)^N`` is a power of two and the input
    stays at its most negative value for a whole impulse response, the exact result
    sits on the bottom of the full range and the truncation error can carry it one
    LSB past, where it wraps to the top.  Without pruning the output is exact.

    References
    ----------
    E. B. Hogenauer, "An economical class of digital filters for decimation and
    interpolation", IEEE Trans. ASSP 29(2):155-162, 1981.
    """

    def __init__(self, order, decimation, differential_delay=1, *, input_bits, output_bits,
                 registers=None):
        expected = cic_registers(order, decimation, differential_delay,
                                 input_bits=input_bits, output_bits=output_bits)
        if registers is None:
            registers = expected
        else:
            _check_registers(registers, expected)
        # Up to 64 bits, int64 arithmetic wrapping modulo 2**64 is exact (see Notes);
        # wider registers run on 32-bit limbs (wide_int): exact, a few times slower.
        self._limbs = wide_int.limbs_for(max(registers.widths))
        self.registers = registers
        self.order = registers.order
        self.decimation = registers.decimation
        self.differential_delay = registers.differential_delay
        self.input_bits = registers.input_bits
        self.output_bits = registers.output_bits
        d = registers.discarded
        self._shifts = (d[0],) + tuple(d[j] - d[j - 1] for j in range(1, len(d)))
        self._gate = _SampleGate(self.input_bits, "CIC")
        self.reset()

    def reset(self):
        """Return to the all-zero state of a stream's start."""
        self._gate.reset()
        self._pending = None
        self._integrators = None
        self._combs = None

    def state(self):
        """A copy of the registers (integrators, combs, held input) to resume from."""
        if self._pending is None:
            return None
        return (self._pending.copy(), [v.copy() for v in self._integrators], [v.copy() for v in self._combs])

    def set_state(self, state):
        """Resume from :meth:`state` of a CIC of the same parameters (``None``: the start)."""
        if state is None:
            self.reset()
            return
        pending, integrators, combs = state
        self._gate.trailing = pending.shape[1:]
        self._pending = pending.copy()
        self._integrators = [v.copy() for v in integrators]
        self._combs = [v.copy() for v in combs]

    def __call__(self, x):
        """Feed a block of input samples; return the outputs it completes."""
        x = self._gate(x)
        trailing = self._gate.trailing
        n, r, m = self.order, self.decimation, self.differential_delay
        if self._pending is None:
            k = self._limbs
            zeros = np.zeros(trailing, np.int64)
            self._pending = np.zeros((0,) + trailing, np.int64)
            self._integrators = [wide_int.split(zeros, k) for _ in range(n)]
            self._combs = [wide_int.split(np.zeros((m,) + trailing, np.int64), k) for _ in range(n)]
        buf = np.concatenate([self._pending, x]) if self._pending.size else x
        used = buf.shape[0] // r * r
        self._pending = buf[used:].copy()
        if used == 0:
            return np.zeros((0,) + trailing, np.int64)
        if self._limbs == 1:
            return self._run_int64(buf[:used])
        return self._run_limbs(buf[:used])

    def _run_int64(self, v):
        n, r, m = self.order, self.decimation, self.differential_delay
        widths, shifts = self.registers.widths, self._shifts
        for i in range(n):
            v = np.cumsum(v >> shifts[i], axis=0, dtype=np.int64)
            v += self._integrators[i][0]
            v = _wrap(v, widths[i])
            self._integrators[i] = [v[-1].copy()]
        v = v[::r]  # this block starts at a multiple of R: keeps samples 0, R, 2R, ...
        for i in range(n):
            u = v >> shifts[n + i]
            ext = np.concatenate([self._combs[i][0], u])
            self._combs[i] = [ext[-m:].copy()]
            v = _wrap(u - ext[: u.shape[0]], widths[n + i])
        return v >> shifts[2 * n]

    def _run_limbs(self, x):
        n, r, m = self.order, self.decimation, self.differential_delay
        widths, shifts = self.registers.widths, self._shifts
        v = wide_int.split(x, self._limbs)
        for i in range(n):
            v = wide_int.cumsum(wide_int.shift_right(v, shifts[i]))
            v = wide_int.wrap(wide_int.add(v, [s[None] for s in self._integrators[i]]), widths[i])
            self._integrators[i] = [l[-1].copy() for l in v]
        v = wide_int.take(v, slice(None, None, r))
        for i in range(n):
            u = wide_int.shift_right(v, shifts[n + i])
            ext = [np.concatenate([c, l]) for c, l in zip(self._combs[i], u)]
            self._combs[i] = [e[-m:].copy() for e in ext]
            v = wide_int.wrap(wide_int.sub(u, wide_int.take(ext, slice(0, u[0].shape[0]))), widths[n + i])
        return wide_int.join(wide_int.shift_right(v, shifts[2 * n]), exact=self.output_bits > 64)


def _check_registers(registers, expected):
    if not isinstance(registers, CicRegisters):
        raise ChannelizerError(f"CIC registers must be CicRegisters, got {type(registers).__name__}")
    for name in ("order", "decimation", "differential_delay", "input_bits", "output_bits"):
        if getattr(registers, name) != getattr(expected, name):
            raise ChannelizerError(
                f"CIC registers {name}={getattr(registers, name)} does not match the stage's "
                f"{getattr(expected, name)}"
            )
    n = registers.order
    d = registers.discarded
    if len(d) != 2 * n + 1 or any(not isinstance(b, int) or b < 0 for b in d):
        raise ChannelizerError(f"CIC registers discarded {d} must be {2 * n + 1} counts >= 0")
    if any(d[j] > d[j + 1] for j in range(2 * n)):
        raise ChannelizerError(f"CIC registers discarded {d} must not decrease stage to stage")
    if registers.full_bits < expected.full_bits:
        raise ChannelizerError(
            f"CIC registers full_bits={registers.full_bits} is below the "
            f"{expected.full_bits} bits the gain needs"
        )
    if tuple(registers.widths) != tuple(registers.full_bits - b for b in d[:-1]):
        raise ChannelizerError(f"CIC registers widths {registers.widths} do not match full_bits - discarded")
    if registers.output_shift != d[-1]:
        raise ChannelizerError(f"CIC registers output_shift={registers.output_shift} differs from discarded[-1]")
    if registers.full_bits - d[-1] > registers.output_bits:
        raise ChannelizerError(
            f"CIC output needs {registers.full_bits - d[-1]} bits but output_bits={registers.output_bits}"
        )


# ----------------------------------------------------------------------------- FIR


class _IntegerPolyphase:
    """``y[n] = round(sum_k h[k] v[n down - k] / 2**shift)``, ``v`` = input up-sampled by ``up``.

    Output ``n`` uses tap phase ``p = n down mod up`` and input ``q = floor(n down / up)``:
    ``y[n] = sum_j h[p + j up] x[q - j]``.  Outputs ``n`` and ``n + P`` with
    ``P = up / gcd(up, down)`` share the phase and their inputs are ``down / gcd``
    apart, so each of the P output classes is a strided slice of the input history.
    """

    def __init__(self, integers, frac_bits, up, down, *, input_bits, output_bits, shift, stage):
        h = np.asarray(integers)
        if h.ndim != 1 or h.size == 0:
            raise ChannelizerError(f"{stage} taps must be a non-empty 1-D array, got shape {h.shape}")
        if not np.issubdtype(h.dtype, np.integer):
            raise ChannelizerError(f"{stage} taps must be integers, got dtype {h.dtype}")
        self.integers = _read_only(h)
        self.frac_bits = _int(frac_bits, f"{stage} frac_bits", low=0)
        self.input_bits = _int(input_bits, f"{stage} input_bits", low=1, high=63)
        self.output_bits = _int(output_bits, f"{stage} output_bits", low=1, high=64)
        self.shift = self.frac_bits if shift is None else _int(shift, f"{stage} shift", low=0, high=62)
        self._up, self._down = up, down
        g = math.gcd(up, down)
        self._classes = up // g
        self._stride = down // g
        taps = [int(t) for t in self.integers]
        self._phases = [
            [(j, np.int64(taps[k])) for j, k in enumerate(range(p, len(taps), up)) if taps[k]]
            for p in range(up)
        ]
        self._span = -(-len(taps) // up)  # inputs one output can reach
        worst = max(sum(abs(int(c)) for _, c in ph) for ph in self._phases) * 2 ** (self.input_bits - 1)
        worst += (1 << (self.shift - 1)) if self.shift else 0
        if worst > _INT64_MAX:
            raise ChannelizerError(
                f"{stage} with {self.input_bits}-bit input and taps summing to "
                f"{worst.bit_length()} bits overflows int64; use fewer input or coefficient bits"
            )
        self._gate = _SampleGate(self.input_bits, stage)
        self.reset()

    def reset(self):
        """Return to the all-zero state of a stream's start."""
        self._gate.reset()
        self._history = None
        self._base = 1 - self._span  # absolute input index of _history[0]
        self._n_in = 0
        self._n_out = 0
        self.saturated = 0

    def __call__(self, x):
        """Feed a block of input samples; return the outputs it completes."""
        x = self._gate(x)
        trailing = self._gate.trailing
        if self._history is None:
            self._history = np.zeros((self._span - 1,) + trailing, np.int64)
        buf = np.concatenate([self._history, x])
        self._n_in += x.shape[0]
        up, down = self._up, self._down
        n0 = self._n_out
        n1 = self._n_in * up // down
        count = n1 - n0
        acc = np.zeros((count,) + trailing, np.int64)
        for offset in range(min(self._classes, count)):
            n = n0 + offset
            phase, q = n * down % up, n * down // up
            t = len(range(offset, count, self._classes))
            target = acc[offset :: self._classes]
            for j, c in self._phases[phase]:
                start = q - j - self._base
                target += c * buf[start : start + (t - 1) * self._stride + 1 : self._stride]
        if self.shift:
            acc += 1 << (self.shift - 1)
            acc >>= self.shift
        hi = 2 ** (self.output_bits - 1) - 1
        lo = -hi - 1
        if count:
            clipped = np.count_nonzero((acc > hi) | (acc < lo))
            if clipped:
                self.saturated += int(clipped)
                np.clip(acc, lo, hi, out=acc)
        self._n_out = n1
        keep_from = n1 * down // up - (self._span - 1)
        self._history = buf[keep_from - self._base :].copy()
        self._base = keep_from
        return acc


class IntegerFir(_IntegerPolyphase):
    """Bit-true FIR decimator with rounding and saturation.

    ``y[n] = sat(floor((sum_k h[k] x[n D - k] + 2**(s-1)) / 2**s))``: round half up
    (add half an output LSB, then arithmetic shift right by ``s``), then saturate to
    ``output_bits`` two's complement.  No rounding when ``s = 0``.

    Parameters
    ----------
    integers : array_like of int
        Integer taps ``h[k]`` (e.g. ``quantize_taps(...).integers``).
    frac_bits : int
        Fraction bits of the taps.
    decimation : int
        ``D >= 1``.
    input_bits, output_bits : int
        Two's-complement sample widths.
    shift : int, optional
        ``s``; by default ``frac_bits``, so the output has the input's scale.

    Attributes
    ----------
    saturated : int
        Output values (each rail counted) clipped since the start or ``reset()``.

    Notes
    -----
    Exact in int64: the constructor raises when the worst-case sum
    ``sum |h| 2**(input_bits - 1)`` plus the rounding constant could leave int64.
    Cost per output: one multiply-add per non-zero tap (zero taps of a half-band
    are skipped).
    """

    def __init__(self, integers, frac_bits, decimation, *, input_bits, output_bits, shift=None):
        self.decimation = _int(decimation, "FIR decimation", low=1)
        super().__init__(integers, frac_bits, 1, self.decimation, input_bits=input_bits,
                         output_bits=output_bits, shift=shift, stage="FIR")


class IntegerResampler(_IntegerPolyphase):
    """Bit-true rational resampler by ``up / down`` with rounding and saturation.

    The samples of ``scipy.signal.upfirdn(h, x, up, down)`` (up-sample by zero
    stuffing, filter, keep every ``down``-th), then rounded half up by ``s`` bits
    and saturated as in :class:`IntegerFir`.  Fed ``N`` samples in total it emits
    the first ``floor(N up / down)`` of them; the filter tail of a finished stream
    is not emitted.

    Parameters
    ----------
    integers : array_like of int
        Integer taps at the up-sampled rate.
    frac_bits : int
        Fraction bits of the taps.
    up, down : int
        Interpolation and decimation factors, each ``>= 1`` (not reduced, as in upfirdn).
    input_bits, output_bits : int
        Two's-complement sample widths.
    shift : int, optional
        ``s``; by default ``frac_bits``.

    References
    ----------
    P. P. Vaidyanathan, Multirate Systems and Filter Banks, Prentice Hall, 1993
    (polyphase structure).
    """

    def __init__(self, integers, frac_bits, up, down, *, input_bits, output_bits, shift=None):
        self.up = _int(up, "resampler up", low=1)
        self.down = _int(down, "resampler down", low=1)
        super().__init__(integers, frac_bits, self.up, self.down, input_bits=input_bits,
                         output_bits=output_bits, shift=shift, stage="resampler")


# ----------------------------------------------------------------------------- NCO


class PhaseAccumulatorNco:
    """Phase-accumulator oscillator with a full cosine/sine table, for mixing to zero.

    The phase word is ``round(frequency / fs * 2**accumulator_bits) mod
    2**accumulator_bits``; the accumulator is 0 at the first sample and adds the word
    once per sample.  Its top ``table_bits`` bits index tables of ``2**table_bits``
    entries ``round(cos(2 pi i / 2**table_bits) * (2**(amplitude_bits-1) - 1))``
    (and sine), with no quarter-wave folding.

    Parameters
    ----------
    frequency : float
        Frequency in Hz to move to 0 Hz.
    fs : float
        Sample rate in Hz.
    input_bits : int, optional
        Width of the I and Q samples fed to :meth:`mix`.
    accumulator_bits, table_bits, amplitude_bits : int, optional

    Notes
    -----
    Truncating the phase to ``P = table_bits`` bits gives spurs no higher than
    ``-6.02 P + 3.92`` dBc (Nicholas & Samueli, Proc. 41st Annual Frequency Control
    Symposium, 1987, pp. 495-502, from memory).
    """

    def __init__(self, frequency, *, fs, input_bits=16, accumulator_bits=32, table_bits=12,
                 amplitude_bits=16):
        for name, value in (("NCO frequency", frequency), ("NCO fs", fs)):
            if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value):
                raise ChannelizerError(f"{name} must be a finite number of Hz, got {value!r}")
        if fs <= 0:
            raise ChannelizerError(f"NCO fs must be positive, got {fs!r}")
        self.accumulator_bits = _int(accumulator_bits, "NCO accumulator_bits", low=2, high=64)
        self.table_bits = _int(table_bits, "NCO table_bits", low=2,
                               high=min(20, self.accumulator_bits))
        self.amplitude_bits = _int(amplitude_bits, "NCO amplitude_bits", low=2, high=32)
        self.input_bits = _int(input_bits, "NCO input_bits", low=1, high=64 - self.amplitude_bits)
        self.fs = float(fs)
        self.frequency = float(frequency)
        size = 2**self.accumulator_bits
        self.phase_word = round(Fraction(float(frequency)) / Fraction(float(fs)) * size) % size
        peak = 2 ** (self.amplitude_bits - 1) - 1
        angle = 2 * np.pi * np.arange(2**self.table_bits) / 2**self.table_bits
        self.cosine_table = _read_only(np.rint(np.cos(angle) * peak))
        self.sine_table = _read_only(np.rint(np.sin(angle) * peak))
        self._gate = _SampleGate(self.input_bits, "NCO", trailing=(2,))
        self.reset()

    @property
    def output_bits(self):
        """Width of the mixed I and Q: ``input_bits + amplitude_bits``."""
        return self.input_bits + self.amplitude_bits

    @property
    def actual_frequency(self):
        """Frequency in Hz the phase word gives, in ``[-fs/2, fs/2)``."""
        size = 2**self.accumulator_bits
        word = self.phase_word - size if self.phase_word >= size // 2 else self.phase_word
        return word / size * self.fs

    def reset(self):
        """Set the accumulator back to 0 for a new stream."""
        self._phase = 0

    def seek(self, index):
        """Set the accumulator to where a stream starting at sample 0 has it at ``index``.

        ``index * phase_word mod 2**accumulator_bits``, exact in integers (a chunk
        of a capture starts with the phase the whole stream has there).
        """
        self._phase = (int(index) * self.phase_word) % 2**self.accumulator_bits

    def _indices(self, count):
        a = self.accumulator_bits
        k = np.arange(count, dtype=np.uint64)
        phase = np.uint64(self._phase) + np.uint64(self.phase_word) * k  # wraps mod 2**64
        if a < 64:
            phase &= np.uint64(2**a - 1)
        self._phase = (self._phase + self.phase_word * count) % 2**a
        return (phase >> np.uint64(a - self.table_bits)).astype(np.intp)

    def mix(self, iq):
        """Multiply ``I + jQ`` by ``exp(-j phase)``: returns ``(n, 2)`` int64 I and Q.

        ``I' = I c + Q s`` and ``Q' = Q c - I s`` with ``c, s`` the table entries;
        each fits ``input_bits + amplitude_bits`` bits.  The phase carries on from
        the previous call.
        """
        x = self._gate(iq)
        idx = self._indices(x.shape[0])
        c, s = self.cosine_table[idx], self.sine_table[idx]
        i, q = x[:, 0], x[:, 1]
        return np.stack([i * c + q * s, q * c - i * s], axis=1)
