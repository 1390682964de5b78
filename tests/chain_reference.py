"""An independent model of a plan's chain, and of a bank plan's channel, for the tests:
mix, then scipy.signal.upfirdn.

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


def reference_bank_channel(plan, x, i):
    """Raster channel ``i`` of bank plan ``plan`` (the description in the docstring of
    channelizer.engines.filterbank): ``x`` mixed down by its bin centre, upfirdn with the
    prototype decimating by M/O, mixed by its residual at the bin rate, then upfirdn each
    fine stage (float64)."""
    k = plan.channel_bins[i]
    m = np.arange(len(x))
    y = scipy.signal.upfirdn(plan.prototype, np.asarray(x).astype(complex) * np.exp(-2j * np.pi * k * m / plan.bins), 1, plan.decimation)
    y = y[: len(x) // plan.decimation]
    r = plan.residuals()[i]
    y = y * np.exp(-2j * np.pi * r * np.arange(y.size) / plan.bin_rate)
    for st in plan.stages:
        up = getattr(st, "interpolation", 1)
        n = y.size
        y = scipy.signal.upfirdn(st.taps, y, up, st.decimation)[: n * up // st.decimation]
    return y
