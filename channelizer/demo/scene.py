"""The invented demo scene "Ridge 7": a synthetic complex-baseband capture.

Ridge 7 is a fictional hill-top relay site on an invented utility band.  The
capture holds narrowband FM voice channels on a 12.5 kHz raster, a QPSK data
carrier, a weak channel right beside a strong one, a 200 kHz wide noise-like
interferer placed where it folds onto a named channel after decimation, white
noise, a small carrier leak at DC and receiver IQ imbalance.  Everything is
drawn from ``np.random.default_rng`` seeded by the caller, so the same seed
always gives the same samples.

Levels are in dBFS: 0 dBFS is the mean power of a full-scale complex tone
(``|x| = 1``, I and Q in [-1, 1]).

This module only synthesises samples; it reads and writes no files.
"""

from dataclasses import dataclass
import math
import typing

import numpy as np

from ..errors import ChannelizerError
from ..units import format_hz
from .signals import _FM_BANDWIDTH, _FM_TX_EDGES, _RRC_ROLLOFF, _SYMBOL_RATE, _key_plan, _nbfm, _place, _plateau_power, _qpsk, _wideband_noise, apply_iq_imbalance, image_rejection_db
from .signals import _INTERFERER_BANDWIDTH, _INTERFERER_EDGE, _finite, _positive

__all__ = [
    "ChannelKind",
    "Scenario",
    "ScenarioChannel",
    "interferer_offset_for",
    "make_scenario",
]

ChannelKind = typing.Literal["nbfm-voice", "qpsk-data", "wideband-noise"]

# Front-end impairments of the scene.
_NOISE_DBFS_PER_HZ = -130.0  # white noise density before the IQ imbalance
_DC_LEAK_DBFS = -50.0  # LO leakage before the IQ imbalance
_IQ_GAIN = 1.01
_IQ_PHASE_DEG = 1.0
_PEAK_LIMIT = 0.9  # largest |I| or |Q| allowed; everything is scaled down if exceeded


_FOLD_TARGET = "ridge-ch3"
_FOLD_GUARD = 25e3  # clearance between interferer and target bands (two channel steps)
_DEFAULT_FS_OUT = 48e3  # output rate the default interferer position is chosen for

_USABLE_FRACTION = 0.45  # all content stays within +-0.45 fs
_MIN_DURATION = 0.05  # s; room for at least one burst of each keyed channel


@dataclass(frozen=True)
class _Plan:
    name: str
    offset: float  # Hz from the capture centre
    kind: str
    level_dbfs: float
    keyed: bool
    role: str


# The channel plan, as offsets from the capture centre.  The offsets were chosen
# so that, with the default interferer and a 48 ksps output, only the interferer
# folds onto ridge-ch3 when the decimation filter is left out: every other
# channel and the DC leak land at least 12.5 kHz away from ridge-ch3's centre
# after folding, and nothing sits on another signal's IQ image.
_PLAN = (
    _Plan("ridge-ch1", -487.5e3, "nbfm-voice", -32.0, False,
          "site repeater output, continuous carrier with voice"),
    _Plan("ridge-ch2", -100.0e3, "nbfm-voice", -41.0, True,
          "maintenance crew talk-group, keyed in bursts"),
    _Plan("ridge-ch3", +162.5e3, "nbfm-voice", -45.0, False,
          "dispatch channel, continuous; the interferer folds onto it"),
    _Plan("ridge-ch4", +612.5e3, "nbfm-voice", -24.0, False,
          "strong link from the co-sited high-power relay"),
    _Plan("ridge-ch5", +625.0e3, "nbfm-voice", -68.0, True,
          "distant mobile one channel step above ridge-ch4, keyed in bursts"),
    _Plan("ridge-data", -725.0e3, "qpsk-data", -38.0, False,
          "telemetry carrier, 25 ksym/s QPSK, root-raised-cosine roll-off 0.35"),
)
_INTERFERER_NAME = "ridge-hash"
_INTERFERER_LEVEL = -35.0


@dataclass(frozen=True)
class ScenarioChannel:
    """One emission in the scene.

    Attributes
    ----------
    name : str
        Invented name, e.g. ``ridge-ch1``.
    frequency : float
        Absolute centre frequency in Hz.
    bandwidth : float
        Occupied two-sided bandwidth in Hz; all but a small fraction of the
        emission's power lies within ``frequency +- bandwidth / 2``.
    kind : {'nbfm-voice', 'qpsk-data', 'wideband-noise'}
        What the emission is.
    level_dbfs : float
        Mean power in dBFS while the emission is on (inside ``keyed``), as it
        is in ``Scenario.samples`` (after IQ imbalance and any scaling).
    description : str
        One line of plain text.
    keyed : tuple of (float, float)
        Intervals in seconds from the start of the capture during which the
        emission is on at full power; key-up and key-down ramps lie outside
        them.  A continuous emission has the single interval ``(0, duration)``.
    """

    name: str
    frequency: float
    bandwidth: float
    kind: ChannelKind
    level_dbfs: float
    description: str
    keyed: tuple[tuple[float, float], ...] = ()


@dataclass(frozen=True)
class Scenario:
    """A synthesised capture and what is in it.

    Attributes
    ----------
    samples : numpy.ndarray of complex64
        The capture, I and Q within [-0.9, 0.9].
    fs : float
        Sample rate in Hz.
    center_frequency : float
        Frequency in Hz that baseband 0 Hz stands for.
    channels : list of ScenarioChannel
        The wanted emissions, in order of frequency.
    interferer : ScenarioChannel
        The wideband interferer.
    description : str
        A paragraph describing the invented scene.
    seed : int
        The seed the scene was drawn from.
    noise_dbfs_per_hz : float
        Density of the white noise floor as it is in ``samples``.
    dc_leak_dbfs : float
        Power of the carrier leak at 0 Hz as it is in ``samples``.
    iq_gain, iq_phase_deg : float
        The receiver's IQ imbalance (see :func:`apply_iq_imbalance`).
    """

    samples: np.ndarray
    fs: float
    center_frequency: float
    channels: list
    interferer: ScenarioChannel
    description: str
    seed: int
    noise_dbfs_per_hz: float
    dc_leak_dbfs: float
    iq_gain: float
    iq_phase_deg: float

    @property
    def duration(self):
        """Length of the capture in seconds."""
        return self.samples.size / self.fs

    def channel(self, name):
        """The channel (or the interferer) called ``name``."""
        for ch in [*self.channels, self.interferer]:
            if ch.name == name:
                return ch
        known = ", ".join(ch.name for ch in [*self.channels, self.interferer])
        raise ChannelizerError(f"channel: no channel named {name!r} (known: {known})")


# ----------------------------------------------------------------------------
# Public helpers


def interferer_offset_for(fs_out, *, target=_FOLD_TARGET, order=None):
    """Where to centre the interferer so that it folds onto a channel.

    Down-sampling to ``fs_out`` without an anti-alias filter maps every
    baseband offset ``f`` onto ``f mod fs_out`` (Oppenheim & Schafer,
    Discrete-Time Signal Processing, 3rd ed., sec. 4.6, from memory), so
    content at ``target + order * fs_out`` lands exactly on the target
    channel's centre once the channel has been shifted to 0 Hz.

    Parameters
    ----------
    fs_out : float
        Output rate of the chain in Hz.
    target : str
        Name of the channel the interferer should fold onto.
    order : int or None
        Which alias (non-zero integer, negative for below the channel).  None
        picks the smallest positive order that keeps the interferer band at
        least 25 kHz (two channel steps) clear of the target's band.

    Returns
    -------
    float
        The interferer centre as an offset from the capture centre, in Hz,
        for the ``interferer_offset`` argument of :func:`make_scenario`.
    """
    fs_out = _positive(fs_out, "fs_out")
    plans = {p.name: p for p in _PLAN}
    if target not in plans:
        raise ChannelizerError(
            f"target: no channel named {target!r} (known: {', '.join(plans)})"
        )
    plan = plans[target]
    if order is None:
        clearance = (_INTERFERER_BANDWIDTH + _bandwidth(plan.kind)) / 2 + _FOLD_GUARD
        order = math.ceil(clearance / fs_out)
    elif isinstance(order, bool) or not isinstance(order, (int, np.integer)) or order == 0:
        raise ChannelizerError(f"order: expected a non-zero integer, got {order!r}")
    return plan.offset + int(order) * fs_out


def make_scenario(*, fs=2.4e6, duration=4.0, center_frequency=161.0e6, seed=7,
                  interferer_offset=None):
    """Synthesise the Ridge 7 capture.

    Parameters
    ----------
    fs : float
        Complex sample rate in Hz; everything in the plan (up to 742 kHz from
        the centre) must lie within +-0.45 fs, so fs >= about 1.65 MHz.
    duration : float
        Length in seconds (at least 0.05).
    center_frequency : float
        Absolute frequency in Hz of baseband 0 Hz.
    seed : int
        Non-negative seed; ``np.random.SeedSequence(seed)`` is split into one
        ``np.random.default_rng`` stream per emission and one for the front
        end, so the same seed, rate and duration always give identical samples.
    interferer_offset : float or None
        Centre of the 200 kHz interferer as an offset from the capture centre
        in Hz.  None places it at ``interferer_offset_for(48e3)``, 306.5 kHz:
        ridge-ch3 plus three times 48 kHz, which folds onto ridge-ch3 after
        decimation by 50 to 48 ksps if the decimation filter is left out.  Its
        band must not overlap any channel.

    Returns
    -------
    Scenario

    Notes
    -----
    Each emission is synthesised at a low rate ``fs / L`` (integer ``L``),
    normalised to its level there, interpolated by ``L`` with a Kaiser-window
    low-pass (90 dB stopband) and mixed to its offset.  Noise, the DC leak and
    the IQ imbalance are then applied to the sum.  The cost is a few
    multiplies per output sample per emission.
    """
    fs = _positive(fs, "fs")
    duration = _positive(duration, "duration")
    center_frequency = _finite(center_frequency, "center_frequency")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ChannelizerError(f"seed: expected a non-negative integer, got {seed!r}")
    if duration < _MIN_DURATION:
        raise ChannelizerError(f"duration: {duration!r} s is shorter than {_MIN_DURATION} s")
    n = int(round(duration * fs))
    duration = n / fs
    limit = _USABLE_FRACTION * fs

    if interferer_offset is None:
        interferer_offset = interferer_offset_for(_DEFAULT_FS_OUT)
        default_interferer = True
    else:
        interferer_offset = _finite(interferer_offset, "interferer_offset")
        default_interferer = False

    for p in _PLAN:
        edge = abs(p.offset) + _bandwidth(p.kind) / 2
        if edge > limit:
            raise ChannelizerError(
                f"fs: {fs!r} Hz is too low for {p.name} at {format_hz(p.offset)} "
                f"(content must lie within +-0.45 fs; "
                f"need fs >= {format_hz(edge / _USABLE_FRACTION)})"
            )
    half = _INTERFERER_BANDWIDTH / 2 + _INTERFERER_EDGE
    if abs(interferer_offset) + half > limit:
        raise ChannelizerError(
            f"interferer_offset: {format_hz(interferer_offset)} puts the 200 kHz interferer "
            f"outside +-0.45 fs ({format_hz(limit)})"
        )
    for p in _PLAN:
        if abs(p.offset - interferer_offset) < half + _bandwidth(p.kind) / 2:
            raise ChannelizerError(
                f"interferer_offset: {format_hz(interferer_offset)} puts the interferer "
                f"over {p.name} at {format_hz(p.offset)}"
            )

    streams = [np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(len(_PLAN) + 2)]
    acc = np.zeros(n, dtype=np.complex128)
    keyed = {}
    for p, rng in zip(_PLAN, streams):
        if p.kind == "nbfm-voice":
            plateaus = _key_plan(rng, duration) if p.keyed else ((0.0, duration),)
            native, fs_c, pad = _nbfm(rng, n, fs, plateaus if p.keyed else None)
            edge = _FM_TX_EDGES[1]
        else:
            plateaus = ((0.0, duration),)
            native, fs_c, pad = _qpsk(rng, n, fs)
            edge = (1 + _RRC_ROLLOFF) * _SYMBOL_RATE / 2 + 2e3
        keyed[p.name] = plateaus
        power = _plateau_power(native, fs_c, pad, plateaus)
        native *= 10.0 ** (p.level_dbfs / 20.0) / math.sqrt(power)
        _place(acc, native, fs_c, pad, p.offset, fs, edge)

    rng_i, rng_front = streams[len(_PLAN)], streams[len(_PLAN) + 1]
    native, fs_c, pad = _wideband_noise(rng_i, n, fs)
    native *= 10.0 ** (_INTERFERER_LEVEL / 20.0) / math.sqrt(
        _plateau_power(native, fs_c, pad, ((0.0, duration),))
    )
    _place(acc, native, fs_c, pad, interferer_offset, fs, half)

    # Receiver front end: white noise, LO leak at DC, then IQ imbalance.
    sigma = math.sqrt(10.0 ** (_NOISE_DBFS_PER_HZ / 10.0) * fs / 2.0)
    acc += sigma * rng_front.standard_normal(2 * n).view(np.complex128)
    leak = 10.0 ** (_DC_LEAK_DBFS / 20.0) * np.exp(2j * np.pi * rng_front.random())
    acc += leak
    acc = apply_iq_imbalance(acc, gain=_IQ_GAIN, phase_deg=_IQ_PHASE_DEG)

    peak = max(float(np.max(np.abs(acc.real))), float(np.max(np.abs(acc.imag))))
    scale = min(1.0, _PEAK_LIMIT / peak) if peak > 0 else 1.0
    if scale < 1.0:
        acc *= scale
    samples = acc.astype(np.complex64)

    # Levels as they are in the samples: the IQ imbalance multiplies the wanted
    # signal's power by |a|^2 and white noise's by |a|^2 + |b|^2.
    phi = math.radians(_IQ_PHASE_DEG)
    a = (1 + _IQ_GAIN * np.exp(1j * phi)) / 2
    b = (1 - _IQ_GAIN * np.exp(-1j * phi)) / 2
    gain_db = 10 * math.log10(abs(a) ** 2) + 20 * math.log10(scale)
    noise_gain_db = 10 * math.log10(abs(a) ** 2 + abs(b) ** 2) + 20 * math.log10(scale)
    leak_out = (a * leak + b * np.conj(leak)) * scale

    channels = sorted(
        (
            ScenarioChannel(
                name=p.name,
                frequency=center_frequency + p.offset,
                bandwidth=_bandwidth(p.kind),
                kind=p.kind,
                level_dbfs=p.level_dbfs + gain_db,
                description=p.role,
                keyed=keyed[p.name],
            )
            for p in _PLAN
        ),
        key=lambda ch: ch.frequency,
    )
    role = "broadband hash from a failing switch-mode supply in the equipment hut"
    if default_interferer:
        target = next(p for p in _PLAN if p.name == _FOLD_TARGET)
        order = round((interferer_offset - target.offset) / _DEFAULT_FS_OUT)
        role += (f", centred {order} x {format_hz(_DEFAULT_FS_OUT)} above {_FOLD_TARGET} so that "
                 f"it folds onto {_FOLD_TARGET} after down-sampling to "
                 f"{format_hz(_DEFAULT_FS_OUT, 'sps')} without an anti-alias filter")
    interferer = ScenarioChannel(
        name=_INTERFERER_NAME,
        frequency=center_frequency + interferer_offset,
        bandwidth=_INTERFERER_BANDWIDTH,
        kind="wideband-noise",
        level_dbfs=_INTERFERER_LEVEL + gain_db,
        description=role,
        keyed=((0.0, duration),),
    )
    return Scenario(
        samples=samples,
        fs=float(fs),
        center_frequency=center_frequency,
        channels=channels,
        interferer=interferer,
        description=_describe(fs, duration, center_frequency, channels, interferer),
        seed=int(seed),
        noise_dbfs_per_hz=_NOISE_DBFS_PER_HZ + noise_gain_db,
        dc_leak_dbfs=20 * math.log10(abs(leak_out)),
        iq_gain=_IQ_GAIN,
        iq_phase_deg=_IQ_PHASE_DEG,
    )


# ----------------------------------------------------------------------------
# Private synthesis


def _bandwidth(kind):
    if kind == "nbfm-voice":
        return _FM_BANDWIDTH
    if kind == "qpsk-data":
        return (1 + _RRC_ROLLOFF) * _SYMBOL_RATE
    return _INTERFERER_BANDWIDTH


def _describe(fs, duration, center, channels, interferer):
    parts = []
    for ch in channels:
        what = {"nbfm-voice": "FM voice", "qpsk-data": "QPSK data"}[ch.kind]
        keyed = ", keyed" if ch.keyed != ((0.0, duration),) else ""
        parts.append(f"{ch.name} at {format_hz(ch.frequency, digits=8)} ({what}{keyed}, "
                     f"{ch.level_dbfs:.0f} dBFS)")
    return (
        "Ridge 7 is an invented hill-top relay site on an invented utility band. "
        f"This {duration:g} s capture at {format_hz(fs, 'sps')} is centred on "
        f"{format_hz(center, digits=8)} and holds "
        + "; ".join(parts)
        + ". The weak ridge-ch5 sits one 12.5 kHz step above the strong ridge-ch4. "
        f"A {format_hz(interferer.bandwidth)} wide noise-like interferer, "
        f"{interferer.name}, is centred on {format_hz(interferer.frequency, digits=8)} "
        f"({interferer.level_dbfs:.0f} dBFS): {interferer.description}. "
        "The receiver adds white noise, a small carrier leak at 0 Hz and IQ imbalance "
        f"(gain {_IQ_GAIN}, phase {_IQ_PHASE_DEG} degree, image rejection "
        f"{image_rejection_db(_IQ_GAIN, _IQ_PHASE_DEG):.1f} dB). No real site, operator or "
        "recording is depicted."
    )
