"""An independent model of a plan's chain for the tests: mix, then scipy.signal.upfirdn.

The definition (DEVELOPERS.md, "Stage semantics"): ``y[n] = sum_k h[k] x[nD - k]``,
first output at input index 0, a stage fed N samples emits floor(N L / M).  The CIC
is its impulse response, a boxcar of length R M convolved N times (Hogenauer 1981,
eq. 1), scaled to unit gain at DC.
"""

import numpy as np
import scipy.signal


def reference_chain(plan, x, offset, *, fs):
    """``x`` mixed down by ``offset`` Hz at ``fs`` Hz, then every stage by upfirdn (float64)."""
    n = np.arange(len(x))
    y = np.asarray(x).astype(np.complex128) * np.exp(-2j * np.pi * offset * n / fs)
    n_in = len(x)
    for st in plan.stages:
        if st.kind == "cic":
            h = np.ones(1)
            for _ in range(st.order):
                h = np.convolve(h, np.ones(st.decimation * st.differential_delay))
            h /= h.sum()
            up, down = 1, st.decimation
        elif st.kind == "resampler":
            h, up, down = np.asarray(st.taps), st.interpolation, st.decimation
        else:
            h, up, down = np.asarray(st.taps), 1, st.decimation
        y = scipy.signal.upfirdn(h, y, up, down)[: (n_in * up) // down]
        n_in = (n_in * up) // down
    return y
