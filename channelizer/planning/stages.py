"""The stages a decimation chain is made of, and their frequency responses.

Each stage knows its own decimation, its impulse response at its own input rate
and its complex frequency response at any frequency in Hz.  Stages hold no
streaming state; the processor builds its own runners from them.
"""

from dataclasses import dataclass
from fractions import Fraction
import math
import typing

import numpy as np

__all__ = [
    "CicStage",
    "FirStage",
    "ResamplerStage",
    "Stage",
    "cic_taps",
    "fir_response",
    "is_halfband",
    "chain_rates",
]


def cic_taps(order, decimation, differential_delay=1):
    """Impulse response of a CIC decimator with unit DC gain.

    ``H(z) = [(1 - z^{-RM}) / (1 - z^{-1})]^N / (RM)^N`` (Hogenauer 1981): the N-fold
    convolution of a boxcar of length ``R M``, length ``N (R M - 1) + 1``.
    """
    box = np.ones(decimation * differential_delay)
    h = np.ones(1)
    for _ in range(order):
        h = np.convolve(h, box)
    return h / float(decimation * differential_delay) ** order


def fir_response(taps, f, *, fs):
    """Complex response ``sum_k h[k] exp(-2j pi f k / fs)`` at frequencies ``f`` (Hz).

    Notes
    -----
    At many frequencies per tap, Horner's rule in ``z^-1`` as ``scipy.signal.freqz``
    evaluates a ``worN`` array (one pass over the frequencies per tap).  At few
    frequencies per tap, where that loop's per-tap overhead dominates, the taps are
    split into ``Q`` blocks of ``B ~ sqrt(n)``: with ``k = q B + r``,
    ``H = sum_q z^{-B q} sum_r h[q B + r] z^{-r}``, one real matrix product and
    ``B + Q`` powers of ``z^-1`` per frequency.  Frequencies that repeat modulo
    ``fs`` (a chain's alias bands do, by the hundred) are evaluated once.  Either way the result agrees with
    ``freqz`` to about ``1e-13`` of ``sum |h|`` (numpy only: importing scipy.signal
    costs a command about a second of start-up).
    """
    f = np.asarray(f, dtype=float)
    b = np.asarray(taps, dtype=float).ravel()
    if f.size > _HORNER_ABOVE * b.size:
        # many frequencies: a chain's alias bands repeat modulo this filter's rate, so
        # each distinct one (to float64's resolution of the chain's frequencies) once
        u = np.mod(f.ravel(), fs)
        _, first, back = np.unique(np.round(u / (fs * _SAME_FREQUENCY)), return_index=True, return_inverse=True)
        if first.size <= f.size // 2:
            return fir_response(b, u[first], fs=fs)[back.ravel()].reshape(f.shape)
    w = 2 * np.pi * f.ravel() / fs
    if w.size > _HORNER_ABOVE * b.size:
        zm1 = np.exp(-1j * w)
        h = np.full(zm1.shape, b[-1], dtype=complex)
        for c in b[-2::-1]:
            h = c + h * zm1
        return h.reshape(f.shape)
    n = b.size
    blk = max(1, int(math.ceil(math.sqrt(n))))
    nq = -(-n // blk)
    hm = np.zeros(nq * blk)
    hm[:n] = b
    hm = hm.reshape(nq, blk).T  # (r, q)
    out = np.empty(w.size, dtype=complex)
    step = max(1, _RESPONSE_CHUNK // (blk + nq))
    for i in range(0, w.size, step):
        wi = w[i : i + step]
        inner = _powers(np.exp(-1j * wi), blk) @ hm  # (frequency, q): the inner sums
        out[i : i + step] = np.sum(inner * _powers(np.exp(-1j * blk * wi), nq), axis=1)
    return out.reshape(f.shape)


#: Frequencies closer than this fraction of the rate are one to :func:`fir_response`
#: (float64 holds a sum of rates near ``fs`` to about 1e-16 of it).
_SAME_FREQUENCY = 1e-13
#: :func:`fir_response` runs Horner's rule above this many frequencies per tap.
_HORNER_ABOVE = 4
#: Frequencies x (blocks + block length) evaluated at once by :func:`fir_response`.
_RESPONSE_CHUNK = 1 << 18


def _powers(z, count):
    """``z[:, None] ** arange(count)`` by repeated multiplication, as Horner's rule forms them."""
    p = np.empty((z.size, count), dtype=complex)
    p[:, :1] = 1.0
    if count > 1:
        p[:, 1:] = z[:, None]
        np.cumprod(p[:, 1:], axis=1, out=p[:, 1:])
    return p


def is_halfband(taps, *, atol=1e-12):
    """True when ``taps`` is a half-band impulse response.

    Half-band properties (Vaidyanathan & Nguyen 1987, from memory): odd length
    ``4K - 1``, centre tap 0.5, every other tap zero away from the centre, symmetric.
    """
    h = np.asarray(taps, dtype=float)
    n = h.size
    if n < 3 or n % 4 != 3:
        return False
    c = (n - 1) // 2
    even_offsets = np.abs(np.arange(n) - c) % 2 == 0
    even_offsets[c] = False
    return (
        abs(h[c] - 0.5) <= atol
        and np.all(np.abs(h[even_offsets]) <= atol)
        and np.allclose(h, h[::-1], rtol=0, atol=atol)
    )


@dataclass(frozen=True)
class CicStage:
    """Cascaded integrator-comb decimator (Hogenauer 1981).

    Attributes
    ----------
    decimation : int
        R.
    order : int
        N, the number of integrator and comb sections.
    differential_delay : int
        M, the comb delay in output samples.
    register_bits : int
        Full-precision register width ``B_in + ceil(N log2(R M))``.
    pruned_bits : tuple of int
        LSBs discarded at integrators 1..N, combs N+1..2N and the output
        (Hogenauer's pruning; ``2N + 1`` entries, empty when not computed).
    """

    decimation: int
    order: int
    differential_delay: int = 1
    register_bits: int = 0
    pruned_bits: tuple = ()
    kind: typing.ClassVar[str] = "cic"

    @property
    def interpolation(self):
        return 1

    def taps(self):
        """Unit-DC-gain boxcar-power impulse response."""
        return cic_taps(self.order, self.decimation, self.differential_delay)

    @property
    def num_taps(self):
        return self.order * (self.decimation * self.differential_delay - 1) + 1

    def _ratio(self, x):
        """``sin(pi x R M) / (R M sin(pi x))`` at ``x = f / fs``, its limit where ``sin(pi x) = 0``."""
        rm = self.decimation * self.differential_delay
        s = np.sin(np.pi * x)
        small = np.abs(s) < 1e-12
        m = np.round(x)
        return np.where(
            small,
            np.where((m * (rm - 1)) % 2 == 0, 1.0, -1.0),
            np.sin(np.pi * x * rm) / np.where(small, 1.0, rm * s),
        )

    def response(self, f, *, fs):
        """Closed-form response ``[sin(pi f R M / fs) / (R M sin(pi f / fs))]^N`` with its phase."""
        x = np.asarray(f, dtype=float) / fs
        rm = self.decimation * self.differential_delay
        phase = np.exp(-1j * np.pi * x * (rm - 1) * self.order)
        return self._ratio(x) ** self.order * phase

    def magnitude(self, f, *, fs):
        """``|response(f)|`` without forming the phase."""
        return np.abs(self._ratio(np.asarray(f, dtype=float) / fs)) ** self.order

    @property
    def delay(self):
        """Group delay in input samples: ``N (R M - 1) / 2``."""
        return self.order * (self.decimation * self.differential_delay - 1) / 2.0


@dataclass(frozen=True)
class FirStage:
    """A linear-phase FIR that may decimate.

    ``kind`` is ``'halfband'`` for a half-band decimator by 2, else ``'fir'``;
    ``role`` says why the stage is there (``'compensator'``, ``'channel'``,
    ``'halfband'``).  ``coefficient_bits`` is set when ``taps`` are quantised
    values (integers divided by ``2**coefficient_frac_bits``).
    """

    decimation: int
    taps: tuple
    kind: str = "fir"
    role: str = "channel"
    coefficient_bits: int | None = None
    coefficient_frac_bits: int | None = None

    @property
    def interpolation(self):
        return 1

    @property
    def num_taps(self):
        return len(self.taps)

    def response(self, f, *, fs):
        return fir_response(self.taps, f, fs=fs)

    @property
    def delay(self):
        return (len(self.taps) - 1) / 2.0


@dataclass(frozen=True)
class ResamplerStage:
    """Rational resampler: up by L (zeros), low-pass with gain L, down by M.

    ``taps`` run at L times the stage's input rate.
    """

    interpolation: int
    decimation: int
    taps: tuple
    coefficient_bits: int | None = None
    coefficient_frac_bits: int | None = None
    kind: typing.ClassVar[str] = "resampler"
    role: typing.ClassVar[str] = "resampler"

    @property
    def num_taps(self):
        return len(self.taps)

    def response(self, f, *, fs):
        """Response of the interpolation filter at ``f``, ``fs`` being the stage's input rate."""
        return fir_response(self.taps, f, fs=fs * self.interpolation)

    @property
    def delay(self):
        """Group delay in input samples of the stage."""
        return (len(self.taps) - 1) / 2.0 / self.interpolation


Stage = CicStage | FirStage | ResamplerStage


def chain_rates(stages, *, fs):
    """Input rate of every stage and the final output rate, as Fractions of ``fs``.

    Returns a list of ``len(stages) + 1`` rates in Hz (floats).
    """
    rates = [Fraction(fs).limit_denominator(10**9) if not float(fs).is_integer() else Fraction(int(fs))]
    for st in stages:
        rates.append(rates[-1] * st.interpolation / st.decimation)
    return [float(r) for r in rates]
