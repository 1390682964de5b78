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
from scipy import signal

from ..errors import ChannelizerError
from ..units import format_hz

__all__ = [
    "ChannelKind",
    "Scenario",
    "ScenarioChannel",
    "apply_iq_imbalance",
    "image_rejection_db",
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

# Narrowband FM voice (common practice for 12.5 kHz channelling).
_FM_DEVIATION = 2.5e3  # peak deviation, Hz
_FM_BANDWIDTH = 11.0e3  # occupied bandwidth: Carson 2 * (2.5 kHz + 3 kHz)
_FM_TX_EDGES = (5.5e3, 7.0e3)  # transmitter filter pass / stop edges, Hz
_VOICE_BAND = (300.0, 3000.0)
_FM_NATIVE_RATE = 48e3  # lowest rate each FM channel is synthesised at
_KEY_RAMP = 4e-3  # raised-cosine key-up / key-down ramp, s

# Data carrier.
_SYMBOL_RATE = 25e3
_RRC_ROLLOFF = 0.35
_RRC_SPAN = 8  # symbols either side of the pulse centre
_DATA_NATIVE_RATE = 100e3

# Wideband interferer.
_INTERFERER_BANDWIDTH = 200e3
_INTERFERER_EDGE = 5e3  # half transition width of its band-limiting filter, Hz
_INTERFERER_NATIVE_RATE = 400e3
_FOLD_TARGET = "ridge-ch3"
_FOLD_GUARD = 25e3  # clearance between interferer and target bands (two channel steps)
_DEFAULT_FS_OUT = 48e3  # output rate the default interferer position is chosen for

_INTERP_ATTEN_DB = 90.0  # stopband of the interpolation filters placing each component
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


def image_rejection_db(gain, phase_deg):
    """Image rejection of a receiver with IQ gain and phase imbalance.

    Parameters
    ----------
    gain : float
        Ratio of the Q branch gain to the I branch gain (1 is perfect).
    phase_deg : float
        Quadrature phase error in degrees (0 is perfect).

    Returns
    -------
    float
        ``10 log10((1 + 2 g cos(phi) + g^2) / (1 - 2 g cos(phi) + g^2))`` in dB;
        ``inf`` for a perfect receiver.

    Notes
    -----
    For the model of :func:`apply_iq_imbalance` a tone ``x`` becomes
    ``a x + b conj(x)`` with ``a = (1 + g e^{j phi}) / 2`` and
    ``b = (1 - g e^{-j phi}) / 2``; the ratio ``|a|^2 / |b|^2`` is the formula
    above.  With g = 1.01 and phi = 1 degree it gives 39.96 dB.

    References
    ----------
    .. [1] B. Razavi, RF Microelectronics, 2nd ed., Prentice Hall, 2011,
       sec. 4.2 (image rejection of quadrature receivers; from memory).
    """
    g = _positive(gain, "gain")
    phi = math.radians(_finite(phase_deg, "phase_deg"))
    num = 1.0 + 2.0 * g * math.cos(phi) + g * g
    den = 1.0 - 2.0 * g * math.cos(phi) + g * g
    if den <= 0.0:
        return math.inf
    return 10.0 * math.log10(num / den)


def apply_iq_imbalance(x, *, gain, phase_deg):
    """Apply receiver IQ gain and phase imbalance to complex samples.

    The I branch is the reference; the Q branch has gain ``g`` and a phase
    error ``phi``::

        I' = I
        Q' = g (Q cos(phi) + I sin(phi))

    so a tone ``cos(w t) + j sin(w t)`` becomes
    ``cos(w t) + j g sin(w t + phi)``.

    Parameters
    ----------
    x : array_like of complex
        Input samples; not modified.
    gain : float
        Q-to-I gain ratio g (> 0).
    phase_deg : float
        Quadrature phase error phi in degrees.

    Returns
    -------
    numpy.ndarray
        The impaired samples, complex64 for complex64 input and complex128
        otherwise.

    Notes
    -----
    Equivalent to ``a x + b conj(x)`` with ``a = (1 + g e^{j phi}) / 2`` and
    ``b = (1 - g e^{-j phi}) / 2``; the image appears ``image_rejection_db``
    below the wanted signal and the wanted signal's power changes by
    ``|a|^2`` (+0.04 dB for g = 1.01, phi = 1 degree).

    References
    ----------
    .. [1] M. Valkama, M. Renfors and V. Koivunen, "Advanced methods for I/Q
       imbalance compensation in communication receivers", IEEE Trans. Signal
       Processing 49(10):2335-2344, 2001 (signal model; from memory).
    """
    g = _positive(gain, "gain")
    phi = math.radians(_finite(phase_deg, "phase_deg"))
    x = np.asarray(x)
    if not np.iscomplexobj(x):
        raise ChannelizerError(f"apply_iq_imbalance: samples must be complex, got {x.dtype}")
    out_dtype = np.complex64 if x.dtype == np.complex64 else np.complex128
    i = x.real
    q = x.imag
    out = np.empty(x.shape, dtype=out_dtype)
    out.real = i
    out.imag = g * (q * math.cos(phi) + i * math.sin(phi))
    return out


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


def _finite(value, name):
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise ChannelizerError(f"{name}: expected a number, got {value!r}")
    value = float(value)
    if not math.isfinite(value):
        raise ChannelizerError(f"{name}: {value!r} is not finite")
    return value


def _positive(value, name):
    value = _finite(value, name)
    if value <= 0:
        raise ChannelizerError(f"{name}: {value!r} must be greater than zero")
    return value


def _bandwidth(kind):
    if kind == "nbfm-voice":
        return _FM_BANDWIDTH
    if kind == "qpsk-data":
        return (1 + _RRC_ROLLOFF) * _SYMBOL_RATE
    return _INTERFERER_BANDWIDTH


def _native_grid(n, fs, native_rate):
    """Integer interpolation factor, native rate, lead-in and length for n output samples."""
    factor = max(1, int(fs // native_rate))
    fs_c = fs / factor
    pad = int(math.ceil(0.025 * fs_c)) + 2
    length = -(-n // factor) + 2 * pad + 1
    return factor, fs_c, pad, length


def _key_plan(rng, duration):
    """Full-power intervals of a keyed channel; the capture opens with the carrier off."""
    plateaus = []
    t = rng.uniform(0.1, 0.25) * min(duration, 2.0)
    while True:
        start = t + _KEY_RAMP
        stop = start + rng.uniform(0.6, 1.6)
        if start >= duration:
            break
        plateaus.append((start, min(stop, duration)))
        t = stop + _KEY_RAMP + rng.uniform(0.2, 0.7)
    return tuple(plateaus)


def _key_envelope(t, plateaus):
    """0..1 keying envelope with raised-cosine ramps just outside each plateau."""
    env = np.zeros(t.size)
    for start, stop in plateaus:
        env[(t >= start) & (t <= stop)] = 1.0
        up = (t > start - _KEY_RAMP) & (t < start)
        env[up] = 0.5 - 0.5 * np.cos(np.pi * (t[up] - start + _KEY_RAMP) / _KEY_RAMP)
        down = (t > stop) & (t < stop + _KEY_RAMP)
        env[down] = 0.5 + 0.5 * np.cos(np.pi * (t[down] - stop) / _KEY_RAMP)
    return env


def _plateau_power(x, fs_c, pad, plateaus):
    t = (np.arange(x.size) - pad) / fs_c
    inside = np.zeros(x.size, dtype=bool)
    for start, stop in plateaus:
        inside |= (t >= start) & (t < stop)
    return float(np.mean(np.abs(x[inside]) ** 2))


def _voice(rng, t, fs_c):
    """A voice-like audio signal in 300-3000 Hz with a syllabic envelope, peak 1."""
    n = t.size
    # Syllables: raised-cosine bursts of 120-300 ms, gaps of 30-150 ms, and a
    # longer pause between phrases now and then.
    env = np.zeros(n)
    s = t[0] + rng.uniform(0.0, 0.2)
    while s < t[-1]:
        length = rng.uniform(0.12, 0.30)
        i0, i1 = np.searchsorted(t, [s, s + length])
        if i1 > i0:
            env[i0:i1] = rng.uniform(0.4, 1.0) * np.sin(np.pi * np.linspace(0, 1, i1 - i0)) ** 2
        s += length + (rng.uniform(0.3, 0.8) if rng.random() < 0.15 else rng.uniform(0.03, 0.15))
    # A few harmonics of a slowly wandering pitch, weighted like formants.
    f0 = rng.uniform(100.0, 220.0)
    wander = np.sin(2 * np.pi * rng.uniform(0.5, 1.5) * t + rng.uniform(0, 2 * np.pi))
    pitch = f0 * (1 + 0.06 * wander)
    phase = 2 * np.pi * np.cumsum(pitch) / fs_c
    tones = np.zeros(n)
    for k in rng.choice(np.arange(2, 16), size=5, replace=False):
        if _VOICE_BAND[0] < k * f0 < _VOICE_BAND[1]:
            weight = rng.uniform(0.3, 1.0) / np.sqrt(k)
            tones += weight * np.sin(k * phase + rng.uniform(0, 2 * np.pi))
    hiss = 0.3 * rng.standard_normal(n)
    sos = signal.butter(4, _VOICE_BAND, btype="bandpass", fs=fs_c, output="sos")
    audio = signal.sosfilt(sos, env * (tones + hiss))
    if not np.any(audio):
        return audio
    # Transmitter deviation limiter: soft clipping then the audio band filter
    # again, so loud syllables swing close to the peak deviation (common practice).
    audio = np.tanh(3.0 * audio / np.max(np.abs(audio)))
    audio = signal.sosfilt(sos, audio)
    return audio / np.max(np.abs(audio))


def _nbfm(rng, n, fs, plateaus):
    """One FM voice channel at its native rate; keyed on ``plateaus`` unless None."""
    _, fs_c, pad, length = _native_grid(n, fs, _FM_NATIVE_RATE)
    t = (np.arange(length) - pad) / fs_c
    audio = _voice(rng, t, fs_c)
    phase = 2 * np.pi * _FM_DEVIATION * np.cumsum(audio) / fs_c + rng.uniform(0, 2 * np.pi)
    x = np.exp(1j * phase)
    if plateaus is not None:
        x *= _key_envelope(t, plateaus)
    # Transmitter channel filter: keeps the emission inside its 12.5 kHz slot.
    numtaps, beta = signal.kaiserord(80.0, (_FM_TX_EDGES[1] - _FM_TX_EDGES[0]) / (fs_c / 2))
    taps = signal.firwin(numtaps | 1, sum(_FM_TX_EDGES) / 2, window=("kaiser", beta), fs=fs_c)
    return signal.oaconvolve(x, taps, mode="same"), fs_c, pad


def _rrc_pulse(tau, symbol_period, rolloff):
    """Root-raised-cosine pulse at times ``tau`` (unit energy per symbol up to a constant).

    Closed form from J. G. Proakis and M. Salehi, Digital Communications,
    5th ed., 2008, sec. 9.2 (from memory).
    """
    x = np.asarray(tau, dtype=float) / symbol_period
    a = rolloff
    out = np.empty_like(x)
    centre = np.abs(x) < 1e-9
    corner = np.abs(np.abs(x) - 1 / (4 * a)) < 1e-9
    rest = ~(centre | corner)
    xr = x[rest]
    out[rest] = (np.sin(np.pi * xr * (1 - a)) + 4 * a * xr * np.cos(np.pi * xr * (1 + a))) / (
        np.pi * xr * (1 - (4 * a * xr) ** 2)
    )
    out[centre] = 1 - a + 4 * a / np.pi
    out[corner] = a / np.sqrt(2) * (
        (1 + 2 / np.pi) * np.sin(np.pi / (4 * a)) + (1 - 2 / np.pi) * np.cos(np.pi / (4 * a))
    )
    return out


def _qpsk(rng, n, fs):
    """The QPSK telemetry carrier at its native rate (any ratio of rate to symbol rate)."""
    _, fs_c, pad, length = _native_grid(n, fs, _DATA_NATIVE_RATE)
    t = (np.arange(length) - pad) / fs_c
    period = 1.0 / _SYMBOL_RATE
    first = int(math.floor(t[0] / period)) - _RRC_SPAN - 1
    count = int(math.ceil(t[-1] / period)) + _RRC_SPAN + 2 - first
    bits = rng.integers(0, 2, size=(count, 2))
    symbols = ((1 - 2 * bits[:, 0]) + 1j * (1 - 2 * bits[:, 1])) / math.sqrt(2)  # Gray map
    nearest = np.floor(t / period).astype(np.int64)
    x = np.zeros(length, dtype=np.complex128)
    for j in range(-_RRC_SPAN, _RRC_SPAN + 1):
        k = nearest + j
        x += symbols[k - first] * _rrc_pulse(t - k * period, period, _RRC_ROLLOFF)
    return x, fs_c, pad


def _wideband_noise(rng, n, fs):
    """Complex Gaussian noise band-limited to 200 kHz at its native rate."""
    _, fs_c, pad, length = _native_grid(n, fs, _INTERFERER_NATIVE_RATE)
    width = 2 * _INTERFERER_EDGE / (fs_c / 2)
    numtaps, beta = signal.kaiserord(80.0, width)
    taps = signal.firwin(numtaps | 1, _INTERFERER_BANDWIDTH / 2, window=("kaiser", beta), fs=fs_c)
    white = rng.standard_normal(2 * length).view(np.complex128)
    return signal.oaconvolve(white, taps, mode="same"), fs_c, pad


def _place(acc, native, fs_c, pad, offset, fs, edge):
    """Interpolate a native-rate component to fs, shift it by ``offset`` and add it to acc.

    ``native[pad]`` is the sample at t = 0; ``edge`` is the component's one-sided
    band edge in Hz, so the interpolation filter passes ``edge`` and stops from
    ``fs_c - edge``.
    """
    factor = int(round(fs / fs_c))
    n = acc.size
    if factor > 1:
        numtaps, beta = signal.kaiserord(_INTERP_ATTEN_DB, (fs_c - 2 * edge) / (fs / 2))
        taps = signal.firwin(numtaps | 1, fs_c / 2, window=("kaiser", beta), fs=fs) * factor
        y = signal.upfirdn(taps, native, up=factor)
        start = (taps.size - 1) // 2 + pad * factor
    else:
        y = native
        start = pad
    y = y[start:start + n]
    # Numerically controlled oscillator, one block at a time:
    # exp(j w (s + m)) = exp(j w s) exp(j w m).
    cycles = offset / fs
    block = 1 << 16
    base = np.exp(2j * np.pi * cycles * np.arange(block))
    for s in range(0, n, block):
        e = min(s + block, n)
        acc[s:e] += y[s:e] * (np.exp(2j * np.pi * ((cycles * s) % 1.0)) * base[: e - s])


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
