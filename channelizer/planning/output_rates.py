"""The decimations a spec's output rate asks for: an integer one, or an integer one
followed by a rational stage L/M (the nearest fraction within a tolerance where the
exact one needs too large an L).
"""

from fractions import Fraction
import math

from ..errors import ChannelizerError
from ..units import format_hz

__all__ = ["targets", "default_decimation", "MIN_OVERSAMPLING", "MAX_INTERPOLATION", "RATE_TOLERANCE",
           "MAX_RATIONAL_DECIMATION"]

#: Without an output rate, the planner picks the largest integer decimation whose
#: output rate is at least this multiple of the channel bandwidth: the transition band
#: from bw/2 to fs_out - bw/2 is then at least 25 % of the bandwidth wide.
MIN_OVERSAMPLING = 1.25
MAX_INTERPOLATION = 256
#: An output rate that is no fraction with a small enough L is met within this.
RATE_TOLERANCE = 1e-6
#: A rational stage decimates by at most this many times its L.
MAX_RATIONAL_DECIMATION = 8


def _exact_ratio(a, b):
    return Fraction(repr(float(a))) / Fraction(repr(float(b)))


def default_decimation(input_rate, bandwidth):
    """Largest integer decimation leaving an output rate >= MIN_OVERSAMPLING x bandwidth."""
    return max(1, int(math.floor(input_rate / (MIN_OVERSAMPLING * bandwidth) + 1e-9)))


def targets(spec):
    """(d_int, resampler (L, M) or None, output rate) options, best first."""
    fs = spec.input_rate
    if spec.output_rate is None:
        d = default_decimation(fs, spec.bandwidth)
        if spec.stopband_edge is not None:
            # the output band must reach beyond the stopband edge
            d = min(d, int(math.ceil(fs / (2.0 * spec.stopband_edge))) - 1)
            if d < 2 and default_decimation(fs, spec.bandwidth) >= 2:
                raise ChannelizerError(
                    f"stopband edge {format_hz(spec.stopband_edge)} needs an output rate above {format_hz(2 * spec.stopband_edge, 'sps')}, "
                    f"which leaves no decimation of {format_hz(fs, 'sps')} by 2 or more; move the edge below {format_hz(fs / 4)} "
                    "or give --output-rate"
                )
        if d < 2:
            raise ChannelizerError(
                f"bandwidth {format_hz(spec.bandwidth)} leaves no room to decimate {format_hz(fs, 'sps')} "
                f"(the output must be at least {MIN_OVERSAMPLING} x the bandwidth); give --output-rate or a narrower channel"
            )
        return [(d, None, fs / d)]
    ratio = _exact_ratio(fs, spec.output_rate)
    if ratio.denominator == 1:
        return [(int(ratio), None, spec.output_rate)]
    options = []
    for d_int in range(int(math.floor(ratio)), 0, -1):
        lm = _nearest_fraction(Fraction(d_int) / ratio)  # = L / M, below 1
        if lm is None:
            continue
        up, down = lm.numerator, lm.denominator
        if down > MAX_RATIONAL_DECIMATION * up:
            continue  # the integer stages should do the bulk of the decimation
        options.append((up, -d_int, d_int, (up, down)))
    if not options:
        best = Fraction(int(math.floor(ratio))) / ratio
        near = best.limit_denominator(MAX_INTERPOLATION * 2)
        got = fs / int(math.floor(ratio)) * float(near)
        raise ChannelizerError(
            f"output rate {format_hz(spec.output_rate, 'sps', digits=12)} is no ratio x L/M with L <= {MAX_INTERPOLATION} within "
            f"{RATE_TOLERANCE * 1e6:g} ppm; the nearest is {format_hz(got, 'sps', digits=12)} "
            f"({(got / spec.output_rate - 1) * 1e6:+.2f} ppm): ask for that rate"
        )
    options.sort()
    return [(d_int, lm, fs / d_int * lm[0] / lm[1]) for _, _, d_int, lm in options[:4]]


def _nearest_fraction(x):
    """``x`` itself when its numerator is at most MAX_INTERPOLATION, else the simplest
    fraction within RATE_TOLERANCE of it (a convergent of its continued fraction,
    the best approximations there are: Khinchin, *Continued Fractions*, 1964, from
    memory); None when there is none with a small enough numerator."""
    if x.numerator <= MAX_INTERPOLATION:
        return x
    a, b = x.numerator, x.denominator
    h0, h1, k0, k1 = 0, 1, 1, 0
    while b:
        q = a // b
        a, b = b, a - q * b
        h0, h1 = h1, q * h1 + h0
        k0, k1 = k1, q * k1 + k0
        if h1 > MAX_INTERPOLATION:
            return None
        c = Fraction(h1, k1)
        if c and abs(c / x - 1) <= RATE_TOLERANCE:
            return c
    return None


