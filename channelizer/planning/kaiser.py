"""Kaiser-window low-pass design on numpy alone: the window's shape and length from the
attenuation wanted, and the windowed ideal low-pass.

References
----------
J. F. Kaiser, "Nonrecursive digital filter design using the I0-sinh window function",
Proc. IEEE Int. Symp. Circuits and Systems, 1974, pp. 20-23.
A. V. Oppenheim and R. W. Schafer, *Discrete-Time Signal Processing*, 3rd ed., 2010,
eqs. (7.62) and (7.63).
"""

import math

import numpy as np

__all__ = ["kaiser_beta", "kaiser_length", "kaiser_lowpass"]


def kaiser_beta(atten_db):
    """Kaiser's shape parameter for a stopband ``atten_db`` dB down (O&S eq. 7.62).

    ``0.1102 (A - 8.7)`` above 50 dB, ``0.5842 (A - 21)^0.4 + 0.07886 (A - 21)``
    from 21 to 50 dB, 0 below.
    """
    a = float(atten_db)
    if a > 50.0:
        return 0.1102 * (a - 8.7)
    if a > 21.0:
        return 0.5842 * (a - 21.0) ** 0.4 + 0.07886 * (a - 21.0)
    return 0.0


def kaiser_length(atten_db, width, *, fs):
    """Length and shape of a Kaiser-window low-pass (O&S eq. 7.63).

    Parameters
    ----------
    atten_db : float
        Stopband attenuation and passband ripple, as ``-20 log10(delta)``.
    width : float
        Transition width, Hz.
    fs : float
        Sample rate, Hz.

    Returns
    -------
    (numtaps, beta) : (int, float)
        ``numtaps = ceil((A - 7.95) / (2.285 pi width / (fs / 2)) + 1)``.
    """
    if atten_db < 8.0:
        raise ValueError(f"attenuation {atten_db:g} dB is below the 8 dB the Kaiser length formula holds for")
    if not 0.0 < width < fs / 2.0:
        raise ValueError(f"transition width {width:g} Hz must lie in (0, fs/2 = {fs / 2.0:g}) Hz")
    numtaps = (atten_db - 7.95) / (2.285 * math.pi * width / (fs / 2.0)) + 1
    return int(math.ceil(numtaps)), kaiser_beta(atten_db)


def kaiser_lowpass(numtaps, cutoff, *, beta, fs):
    """Windowed ideal low-pass with unit DC gain: ``2 fc sinc(2 fc (n - c)) w[n] / sum``.

    ``fc = cutoff / fs``, ``c = (numtaps - 1) / 2`` and ``w`` the Kaiser window of shape
    ``beta`` (``numpy.kaiser``); scaled so that the taps sum to 1.
    """
    if not 0.0 < cutoff < fs / 2.0:
        raise ValueError(f"cutoff {cutoff:g} Hz must lie in (0, fs/2 = {fs / 2.0:g}) Hz")
    fc = cutoff / fs
    n = np.arange(numtaps) - (numtaps - 1) / 2.0
    h = 2.0 * fc * np.sinc(2.0 * fc * n) * np.kaiser(numtaps, beta)
    return h / np.sum(h)
