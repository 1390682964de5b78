"""The reference every speed figure is a ratio against: one FIR meeting the same spec, run as ``scipy.signal.resample_poly`` / ``upfirdn`` would run it."""

import math

import numpy as np
import scipy
import scipy.signal

from ..errors import ChannelizerError

__all__ = ["reference_filter"]


def reference_filter(spec, *, fs):
    """Single-stage FIR for ``scipy.signal.resample_poly`` meeting ``spec``'s rejection.

    Kaiser window design: order and beta from ``scipy.signal.kaiserord`` for the
    rejection target and the transition band from ``bandwidth / 2`` to
    ``output_rate - bandwidth / 2`` (the first frequency that folds onto the
    passband), cutoff in its middle (``output_rate / 2``), at ``fs`` (the
    up-sampled rate; the integer decimations used here need no up-sampling).
    Kaiser's formula is an estimate, so the design is checked with
    ``scipy.signal.freqz`` and the target raised in 0.25 dB steps until the
    stopband meets it.

    Parameters
    ----------
    spec : ChainSpec
    fs : float
        Rate the filter runs at, Hz.

    Returns
    -------
    dict
        ``taps`` (float64 array), ``numtaps``, ``beta``, ``rejection_db`` and
        ``ripple_db`` as measured.

    References
    ----------
    J. F. Kaiser, "Nonrecursive digital filter design using the I0-sinh window
    function", Proc. IEEE ISCAS, 1974 (from memory); A. V. Oppenheim and
    R. W. Schafer, *Discrete-Time Signal Processing*, 3rd ed., 2010, sec. 7.6
    (the method ``scipy.signal.kaiserord`` follows).
    """
    fp = spec.bandwidth / 2.0
    fstop = spec.output_rate - fp
    width = (fstop - fp) / (fs / 2.0)
    cutoff = spec.output_rate / 2.0
    atten = float(spec.rejection_db)
    for _ in range(40):
        numtaps, beta = scipy.signal.kaiserord(atten, width)
        numtaps |= 1  # odd: a whole-sample delay
        taps = scipy.signal.firwin(numtaps, cutoff, window=("kaiser", beta), fs=fs)
        rej, rip = _measure_lowpass(taps, fp, fstop, fs=fs)
        if rej >= spec.rejection_db and rip <= spec.ripple_db:
            break
        atten += 0.25
    else:  # pragma: no cover - kaiserord is never that far off
        raise ChannelizerError(f"no Kaiser design reaches {spec.rejection_db:g} dB for the reference")
    return {"taps": taps, "numtaps": int(numtaps), "beta": float(beta), "rejection_db": rej, "ripple_db": rip}


def _measure_lowpass(taps, fp, fstop, *, fs):
    n = 1 << max(16, int(math.ceil(math.log2(len(taps) * 64))))
    w, h = scipy.signal.freqz(taps, worN=n, fs=fs)
    mag = np.abs(h)
    rej = -20.0 * math.log10(max(float(mag[w >= fstop].max()), 1e-300))
    pb = mag[w <= fp]
    rip = 20.0 * math.log10(float(pb.max()) / float(pb.min()))
    return rej, rip


def _reference_pass(capture, taps32, down, block):
    """resample_poly on each block (no state across blocks); returns (samples out, mean power)."""
    n_out = 0
    power = 0.0
    for x in capture.blocks(block):
        y = scipy.signal.resample_poly(x, 1, down, window=taps32)
        n_out += y.size
        power += float(np.vdot(y, y).real)
    return n_out, power / max(n_out, 1)
