"""Signal makers for the demo scene: keyed FM voice, QPSK data, band-limited noise, IQ imbalance.

Each maker draws from the generator it is given, so a seed fixes the scene.  Levels
and shapes follow common practice: Carson's rule for the FM bandwidth, a root-raised
cosine pulse for the data, the image-rejection formula for the IQ imbalance.
"""

import math

import numpy as np
from scipy import signal

from ..errors import ChannelizerError

__all__ = ["apply_iq_imbalance", "image_rejection_db"]

# Wideband interferer.
_INTERFERER_BANDWIDTH = 200e3
_INTERFERER_EDGE = 5e3  # half transition width of its band-limiting filter, Hz
_INTERFERER_NATIVE_RATE = 400e3


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


_INTERP_ATTEN_DB = 90.0  # stopband of the interpolation filters placing each component


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
