"""Register growth and register pruning of a CIC decimator (Hogenauer 1981).

Everything here is exact integer arithmetic: the bit counts come from integer
comparisons, never from rounding a floating-point logarithm.

References
----------
E. B. Hogenauer, "An economical class of digital filters for decimation and
interpolation", IEEE Trans. ASSP 29(2):155-162, 1981.
"""

from dataclasses import dataclass
import functools
import math
import numbers

import numpy as np

from ..errors import ChannelizerError

__all__ = ["CicRegisters", "cic_registers", "ChainCic", "chain_cic", "planned_cic", "point_bits",
           "CIC_GUARD_BITS", "INTERMEDIATE_EXTRA_BITS"]

MAX_ORDER = 10
#: Bits a built CIC carries above Hogenauer's width in every register (see ``chain_cic``).
CIC_GUARD_BITS = 1
#: Bits the bit-true chain carries beyond the plan's output width between two stages:
#: one headroom bit above full scale and the rest below the output LSB.
INTERMEDIATE_EXTRA_BITS = 2


@dataclass(frozen=True)
class CicRegisters:
    """Bit widths of a (possibly pruned) CIC decimator.

    Stages are numbered as in Hogenauer (1981): integrators ``1..N``, combs
    ``N+1..2N``, the output truncation ``2N+1``.  Tuples are indexed from 0, so
    ``discarded[j - 1]`` belongs to stage ``j``.

    Attributes
    ----------
    order, decimation, differential_delay : int
        ``N``, ``R`` and ``M``.
    input_bits, output_bits : int
        Two's-complement widths of the input and output samples.
    full_bits : int
        Width that holds the unpruned result: ``input_bits + ceil(N log2(R M))``.
    gain : int
        DC gain ``(R M)^N``.
    discarded : tuple of int
        ``2N + 1`` counts of least-significant bits dropped, measured from the
        full-precision LSB: at integrators ``1..N``, combs ``N+1..2N`` and the output.
    widths : tuple of int
        ``2N`` register widths, ``full_bits - discarded[j]`` for the integrators
        then the combs.
    output_shift : int
        ``discarded[2N]``: the full-precision result is shifted right by this much.
    variance_terms : tuple of int
        ``F_j^2``, the sum of squares of the impulse response from error source
        ``j`` to the output, for ``j = 1..2N+1`` (``F_{2N+1}^2 = 1``).
    """

    order: int
    decimation: int
    differential_delay: int
    input_bits: int
    output_bits: int
    full_bits: int
    gain: int
    discarded: tuple
    widths: tuple
    output_shift: int
    variance_terms: tuple

    @property
    def output_noise_variance(self):
        """Predicted variance of the truncation noise at the output, in output LSB^2.

        ``sum_j F_j^2 sigma_j^2`` with ``sigma_j^2 = 2^(2 B_j) / 12`` for every source
        that discards bits (Hogenauer 1981, eqs. for the total error variance),
        divided by the output LSB squared ``2^(2 B_{2N+1})``.  A source whose count
        equals the previous stage's drops nothing new and adds nothing.  With the
        pruning rule every register source adds at most ``1/(2N)`` of the output's
        own ``1/12``, so the total is at most ``2/12``.
        """
        out = self.output_shift
        total = 0.0
        previous = 0
        for b, f2 in zip(self.discarded, self.variance_terms):
            if b > previous:
                total += f2 * 2.0 ** (2 * (b - out)) / 12.0
            previous = b
        return total


def _checked_int(value, name, *, low=1, high=None):
    """``value`` as an int in ``low..high``, else a ChannelizerError naming it."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise ChannelizerError(f"{name} must be an integer, got {value!r}")
    value = int(value)
    if value < low or (high is not None and value > high):
        limit = f"{low}..{high}" if high is not None else f">= {low}"
        raise ChannelizerError(f"{name} must be {limit}, got {value}")
    return value


def _ceil_log2(n):
    """``ceil(log2 n)`` for a positive integer, exactly."""
    return (n - 1).bit_length()


#: Primes below 2**31: sums of squares are formed modulo each in int64 and joined by
#: the Chinese remainder theorem.
_PRIMES = (2147483647, 2147483629, 2147483587, 2147483579, 2147483563, 2147483549, 2147483543,
           2147483497, 2147483489, 2147483477, 2147483423, 2147483399, 2147483353, 2147483323,
           2147483269, 2147483249)


@functools.lru_cache(maxsize=64)
def _variance_terms(order, rm):
    """``F_j^2`` for ``j = 1..2N+1``; depends on ``N`` and ``R M`` only.

    The integrator terms in exact integers without Python-level loops over the
    impulse response: ``h_N = boxcar(RM) (1 - z^{-RM})^{N-1}`` is ``(-1)^l C(N-1, l)``
    on the l-th block of ``RM`` samples, and ``h_j`` is the running sum of ``h_{j+1}``
    (one integrator more).  Each ``sum h_j^2`` is formed modulo primes below 2**31
    in int64 and rebuilt by the Chinese remainder theorem, with as many primes as a
    float64 estimate of its size asks for; the result is checked against that
    estimate, and :func:`_variance_terms_direct` (the paper's binomial sums) answers
    where the check fails.
    """
    n = order
    base = np.repeat(np.array([(-1) ** l * math.comb(n - 1, l) for l in range(n)]), rm)
    approx = []
    h = base.astype(float)
    for _ in range(n):  # j = N .. 1
        approx.append(float(np.dot(h, h)))
        h = np.cumsum(h)[:-1]
    approx = approx[::-1]
    if not all(math.isfinite(a) and a > 0 for a in approx):
        return _variance_terms_direct(order, rm)
    need = max(int(math.log2(max(approx))) + 12, 31)
    primes = _PRIMES[: -(-need // 30)]
    if len(primes) * 30 < need:
        return _variance_terms_direct(order, rm)
    residues = []
    for p in primes:
        h = base % p
        row = []
        for _ in range(n):
            row.append(int(np.sum(h * h % p) % p))
            h = np.cumsum(h)[:-1] % p
        residues.append(row[::-1])
    modulus = math.prod(primes)
    terms = []
    for j in range(n):
        x = 0
        for p, row in zip(primes, residues):
            q = modulus // p
            x += row[j] * q * pow(q, -1, p)
        x %= modulus
        if abs(x - approx[j]) > 1e-6 * approx[j]:
            return _variance_terms_direct(order, rm)
        terms.append(x)
    for j in range(n + 1, 2 * n + 1):
        terms.append(math.comb(2 * (2 * n + 1 - j), 2 * n + 1 - j))  # sum_k C(m, k)^2 = C(2m, m)
    terms.append(1)
    return tuple(terms)


def _variance_terms_direct(order, rm):
    """``F_j^2`` for ``j = 1..2N+1``; depends on ``N`` and ``R M`` only.

    Integrators (Hogenauer 1981, impulse response from source j to the output):
    ``h_j(k) = sum_{l=0}^{floor(k/RM)} (-1)^l C(N, l) C(N - j + k - RM l, k - RM l)``
    for ``k = 0 .. N RM - N + j - 1``; combs: ``h_j(k) = (-1)^k C(2N + 1 - j, k)``.
    Exact Python integers held in object arrays.
    """
    n = order
    terms = []
    for j in range(1, n + 1):
        length = n * rm - n + j
        # c(m) = C(N - j + m, m): the response of N - j + 1 cascaded integrators.
        c = np.empty(length, dtype=object)
        c[:] = [math.comb(n - j + m, m) for m in range(length)]
        h = np.zeros(length, dtype=object)
        for l in range(n + 1):
            start = rm * l
            if start >= length:
                break
            h[start:] += (-1) ** l * math.comb(n, l) * c[: length - start]
        terms.append(int(np.dot(h, h)))
    for j in range(n + 1, 2 * n + 1):
        terms.append(math.comb(2 * (2 * n + 1 - j), 2 * n + 1 - j))  # sum_k C(m, k)^2 = C(2m, m)
    terms.append(1)
    return tuple(terms)


def cic_registers(order, decimation, differential_delay=1, *, input_bits, output_bits, prune=True):
    """Register widths of a CIC decimator by Hogenauer's growth and pruning rules.

    Parameters
    ----------
    order : int
        Number of integrator/comb pairs ``N``, 1 to 10.
    decimation : int
        Rate change ``R >= 1``.
    differential_delay : int, optional
        Comb delay ``M >= 1`` in output samples.
    input_bits, output_bits : int
        Two's-complement widths of the input and the output samples.
    prune : bool, optional
        When False, no register is pruned and only the output is truncated.

    Returns
    -------
    CicRegisters

    Notes
    -----
    The full width is ``input_bits + ceil(N log2(R M))``; the paper's ``Bmax`` is
    one less (the MSB index).  The output discards ``B_{2N+1} = Bmax - Bout + 1``
    bits.  Every earlier source j discards
    ``B_j = floor(-log2 F_j + log2 sigma_{T,2N+1} + 0.5 log2(6 / N))`` bits with
    ``sigma_{T,2N+1}^2 = 2^(2 B_{2N+1}) / 12``, clamped at 0, so that it adds at
    most ``1/(2N)`` of the output truncation variance.  That expression simplifies
    to ``B_{2N+1} - log2(2 N F_j^2) / 2``, and its floor is evaluated exactly as
    ``B_{2N+1} - ceil(ceil(log2(2 N F_j^2)) / 2)``.  When ``output_bits >=
    full_bits`` nothing is discarded.  The counts never decrease from one stage to
    the next: a register cannot regain bits its input has lost, so where the rule
    gives fewer bits than the previous stage (it can when ``R M <= 2``) the previous
    count is kept.

    References
    ----------
    E. B. Hogenauer, "An economical class of digital filters for decimation and
    interpolation", IEEE Trans. ASSP 29(2):155-162, 1981.

    Examples
    --------
    >>> r = cic_registers(3, 8, input_bits=12, output_bits=12)
    >>> r.full_bits, r.discarded
    (21, (0, 3, 4, 5, 6, 7, 9))
    """
    n = _checked_int(order, "CIC order", high=MAX_ORDER)
    r = _checked_int(decimation, "CIC decimation")
    m = _checked_int(differential_delay, "CIC differential_delay")
    b_in = _checked_int(input_bits, "CIC input_bits")
    b_out = _checked_int(output_bits, "CIC output_bits")
    if not isinstance(prune, bool):
        raise ChannelizerError(f"CIC prune must be True or False, got {prune!r}")
    gain = (r * m) ** n
    full = b_in + _ceil_log2(gain)
    f2 = _variance_terms(n, r * m)
    b_last = max(full - b_out, 0)
    dropped = []
    lsb = 0
    for j in range(2 * n):
        if prune:
            half_log = (_ceil_log2(2 * n * f2[j]) + 1) // 2  # ceil(ceil(log2 X) / 2)
            # A register cannot hold bits its input has already lost: where the rule
            # asks for fewer bits than the stage before dropped (only when R M <= 2),
            # keep the earlier count.
            lsb = max(lsb, b_last - half_log)
        dropped.append(lsb)
    discarded = tuple(dropped) + (b_last,)
    return CicRegisters(
        order=n,
        decimation=r,
        differential_delay=m,
        input_bits=b_in,
        output_bits=b_out,
        full_bits=full,
        gain=gain,
        discarded=discarded,
        widths=tuple(full - b for b in discarded[:-1]),
        output_shift=b_last,
        variance_terms=f2,
    )


@dataclass(frozen=True)
class ChainCic:
    """A CIC as the bit-true chain builds it: Hogenauer's registers and one guard bit.

    The plan file, ``show``, the bit-true chain and the export all take their CIC
    widths from this one object (:func:`chain_cic`, :func:`planned_cic`).

    Attributes
    ----------
    nominal : CicRegisters
        Hogenauer's widths and pruning for the widths entering and leaving the CIC.
        ``nominal.full_bits`` is the plan's ``register_bits`` and
        ``nominal.discarded`` its ``pruned_bits``.
    registers : CicRegisters
        The registers the integer model runs: every one ``CIC_GUARD_BITS`` wider
        than Hogenauer's, and the result taken whole from the last comb.
    round_shift : int
        Bits dropped, rounding half up, from the last comb to the stage output
        (``nominal.output_shift`` minus the last comb's count).
    input_bits, output_bits, output_headroom_bits : int
        The words entering and leaving, and the output bits above full scale.
    """

    nominal: CicRegisters
    registers: CicRegisters
    round_shift: int
    input_bits: int
    output_bits: int
    output_headroom_bits: int

    @property
    def full_bits(self):
        """Width of an unpruned register as built: Hogenauer's plus the guard bit."""
        return self.registers.full_bits

    @property
    def integrator_bits(self):
        """Widths of integrators ``1..N`` after pruning."""
        return self.registers.widths[: self.nominal.order]

    @property
    def comb_bits(self):
        """Widths of combs ``N+1..2N`` after pruning."""
        return self.registers.widths[self.nominal.order :]

    @property
    def widest_bits(self):
        """The widest register (the first integrator)."""
        return max(self.registers.widths)

    def describe(self):
        """One line: the widths as built, for tables."""
        return (f"registers {self.widest_bits} down to {min(self.registers.widths)} bits "
                f"(Hogenauer's {self.nominal.full_bits} + {CIC_GUARD_BITS} guard, pruned)")


def point_bits(output_bits, *, last, extra_bits=INTERMEDIATE_EXTRA_BITS):
    """``(width, headroom bits)`` of the word leaving a stage of the bit-true chain.

    The last stage leaves exactly ``output_bits``; an intermediate one leaves
    ``output_bits + extra_bits``: one bit of headroom above full scale and
    ``extra_bits - 1`` fraction bits below the output LSB.
    """
    return (output_bits, 0) if last else (output_bits + extra_bits, 1)


def chain_cic(order, decimation, differential_delay=1, *, input_bits, output_bits,
              input_headroom_bits=0, output_headroom_bits=0):
    """The CIC the bit-true chain builds between two words of the given widths.

    Parameters
    ----------
    order, decimation, differential_delay : int
        ``N``, ``R`` and ``M``.
    input_bits, output_bits : int
        Widths of the words entering and leaving.
    input_headroom_bits, output_headroom_bits : int, optional
        Bits of each word above full scale.

    Returns
    -------
    ChainCic

    Notes
    -----
    Hogenauer's rule (:func:`cic_registers`) is applied for an output of
    ``output_bits - output_headroom_bits + input_headroom_bits`` bits, so that the
    CIC's full scale lands on the output's.  Every register is then one bit wider
    (``CIC_GUARD_BITS``): with pruning, an input held at its most negative value
    can make the floor errors carry the result one LSB below the bottom of
    Hogenauer's range, where the register would wrap to the top (seen for N = 5,
    R = 16).  The last comb is kept whole and rounded half up to the output.
    """
    ob = output_bits - output_headroom_bits + input_headroom_bits
    nominal = cic_registers(order, decimation, differential_delay, input_bits=input_bits, output_bits=max(ob, 1))
    n2 = 2 * nominal.order
    d = nominal.discarded
    last_comb = d[n2 - 1]
    full = nominal.full_bits + CIC_GUARD_BITS
    discarded = tuple(d[:n2]) + (last_comb,)
    regs = CicRegisters(
        order=nominal.order,
        decimation=nominal.decimation,
        differential_delay=nominal.differential_delay,
        input_bits=nominal.input_bits,
        output_bits=full - last_comb,
        full_bits=full,
        gain=nominal.gain,
        discarded=discarded,
        widths=tuple(full - b for b in discarded[:-1]),
        output_shift=last_comb,
        variance_terms=nominal.variance_terms,
    )
    return ChainCic(nominal, regs, d[n2] - last_comb, input_bits, output_bits, output_headroom_bits)


def planned_cic(order, decimation, differential_delay=1, *, bits, first=True, last=False):
    """The CIC of a plan as the bit-true chain builds it without a mixer in front.

    ``bits`` is the spec's ``{'input': ..., 'output': ...}``; ``first`` and ``last``
    say where the CIC sits.  The first stage takes the input word; a later one the
    intermediate word of :func:`point_bits`.  (A mixer in front widens the word
    entering the CIC; the chain then states its own widths.)
    """
    if first:
        w_in, h_in = int(bits["input"]), 0
    else:
        w_in, h_in = point_bits(int(bits["output"]), last=False)
    w_out, h_out = point_bits(int(bits["output"]), last=last)
    return chain_cic(order, decimation, differential_delay, input_bits=w_in, output_bits=w_out,
                     input_headroom_bits=h_in, output_headroom_bits=h_out)
