"""What the user asks of a decimation chain: rates, channel width and targets."""

from dataclasses import dataclass
import math
import typing

from ..errors import ChannelizerError
from ..units import format_hz

__all__ = ["ChainSpec", "Objective", "ripple_to_delta", "delta_to_ripple"]

Objective = typing.Literal["cpu", "hardware"]


def ripple_to_delta(ripple_db):
    """Peak passband deviation from a peak-to-peak ripple in dB.

    ``ripple_db = 20 log10((1 + d) / (1 - d))`` (common practice; e.g. d = 0.01 gives
    0.1737 dB).
    """
    g = 10.0 ** (ripple_db / 20.0)
    return (g - 1.0) / (g + 1.0)


def delta_to_ripple(delta):
    """Inverse of :func:`ripple_to_delta`."""
    return 20.0 * math.log10((1.0 + delta) / (1.0 - delta))


@dataclass(frozen=True)
class ChainSpec:
    """The targets a planned chain has to meet.

    Parameters
    ----------
    input_rate : float
        Complex sample rate of the capture in Hz.
    bandwidth : float
        Occupied two-sided bandwidth of the channel in Hz; the passband edge is
        ``bandwidth / 2``.
    output_rate : float or None
        Required output rate in Hz, or None to let the planner choose.
    ripple_db : float
        Largest peak-to-peak passband ripple in dB.
    rejection_db : float
        Smallest attenuation of anything that folds onto the passband, in dB.
    input_bits, output_bits : int
        Sample widths at the chain's input and output (two's complement).
    coefficient_bits : int
        FIR coefficient width used by the ``hardware`` objective.
    objective : {'cpu', 'hardware'}
        What the cost is: multiplies of a vectorised software implementation,
        or multipliers needed in hardware at ``clock``.
    clock : float or None
        Hardware clock in Hz (defaults to the input rate).
    stopband_edge : float or None
        When given (Hz from the channel centre), everything in the output band
        from this edge outwards is attenuated by ``rejection_db`` as well: the
        neighbours are removed, not only kept from folding onto the passband.
    """

    input_rate: float
    bandwidth: float
    output_rate: float | None = None
    ripple_db: float = 0.1
    rejection_db: float = 80.0
    input_bits: int = 16
    output_bits: int = 16
    coefficient_bits: int = 18
    objective: Objective = "cpu"
    clock: float | None = None
    stopband_edge: float | None = None

    def __post_init__(self):
        def positive(name, value):
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value <= 0:
                raise ChannelizerError(f"{name} must be a positive finite number of Hz, got {value!r}")

        positive("input rate", self.input_rate)
        positive("bandwidth", self.bandwidth)
        if self.output_rate is not None:
            positive("output rate", self.output_rate)
        if self.clock is not None:
            positive("clock", self.clock)
        if self.stopband_edge is not None:
            positive("stopband edge", self.stopband_edge)
            if self.stopband_edge <= self.bandwidth / 2:
                raise ChannelizerError(
                    f"stopband edge {format_hz(self.stopband_edge)} must lie beyond the passband edge {format_hz(self.bandwidth / 2)}"
                )
            which = "output" if self.output_rate else "input"
            top = (self.output_rate or self.input_rate) / 2
            if self.stopband_edge >= top:
                raise ChannelizerError(
                    f"stopband edge {format_hz(self.stopband_edge)} must lie below half the {which} rate ({format_hz(top)})"
                )
        if self.bandwidth >= self.input_rate:
            raise ChannelizerError(
                f"bandwidth {format_hz(self.bandwidth)} must be below the input rate {format_hz(self.input_rate, 'sps')}; "
                "ask for a narrower channel or a faster capture"
            )
        if self.output_rate is not None:
            if self.output_rate <= self.bandwidth:
                raise ChannelizerError(
                    f"output rate {format_hz(self.output_rate, 'sps')} must exceed the bandwidth {format_hz(self.bandwidth)} "
                    "(complex samples: the rate is the usable width); raise the output rate or narrow the channel"
                )
            if self.output_rate > self.input_rate:
                raise ChannelizerError(
                    f"output rate {format_hz(self.output_rate, 'sps')} is above the input rate {format_hz(self.input_rate, 'sps')}; "
                    "this tool only decimates"
                )
        for name in ("ripple_db", "rejection_db"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) or v <= 0:
                raise ChannelizerError(f"{name.replace('_', ' ')} must be a positive number of dB, got {v!r}")
        if self.ripple_db > 6:
            raise ChannelizerError(f"ripple {self.ripple_db:g} dB is too loose to be meant; use at most 6 dB")
        if self.rejection_db > 200:
            raise ChannelizerError(f"rejection {self.rejection_db:g} dB is beyond double precision; use at most 200 dB")
        for name in ("input_bits", "output_bits", "coefficient_bits"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, int) or not 2 <= v <= 32:
                raise ChannelizerError(f"{name.replace('_', ' ')} must be an integer from 2 to 32, got {v!r}")
        if self.objective not in typing.get_args(Objective):
            raise ChannelizerError(
                f"objective must be one of {', '.join(typing.get_args(Objective))}, got {self.objective!r}"
            )
        if self.objective == "hardware":
            # A b-bit coefficient set reaches at most about 6.02 b dB below its peak tap
            # (quantisation floor, common practice); leave 6 dB for the sum over taps.
            reach = 6.02 * self.coefficient_bits - 6.0
            if self.rejection_db > reach:
                need = math.ceil((self.rejection_db + 6.0) / 6.02)
                raise ChannelizerError(
                    f"rejection {self.rejection_db:g} dB is beyond what {self.coefficient_bits}-bit coefficients give "
                    f"(about {reach:.0f} dB); use at least {need} coefficient bits or a smaller rejection"
                )

    @property
    def passband_edge(self):
        """Passband edge in Hz (half the two-sided bandwidth)."""
        return self.bandwidth / 2.0

    @property
    def protected_edge(self):
        """Half-width of the band that intermediate stages keep free of aliases."""
        return self.stopband_edge if self.stopband_edge is not None else self.bandwidth / 2.0

    @property
    def passband_delta(self):
        return ripple_to_delta(self.ripple_db)

    @property
    def stopband_delta(self):
        return 10.0 ** (-self.rejection_db / 20.0)
