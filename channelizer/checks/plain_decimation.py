"""A channel taken by plain decimation (mix, then keep every D-th sample, no filter):
the "before" beside the chain's "after", so that what the filters keep out is seen.

Keeping ``x[nD]`` folds every band ``fs / D`` wide onto the output band unattenuated
(the down-sampler's aliasing, common practice); the chain's output is the same
channel with those bands rejected.
"""

import numpy as np

from ..dsp.spectrum import WelchAccumulator
from ..errors import ChannelizerError

__all__ = ["plain_decimation_psd"]


def plain_decimation_psd(capture, *, offset, decimation, nperseg, block_size=1 << 20):
    """Welch PSD of ``capture`` mixed down by ``offset`` Hz and decimated by ``decimation``
    with no filter at all.

    Parameters
    ----------
    capture : channelizer.io.captures.Capture
    offset : float
        Channel centre minus capture centre, Hz.
    decimation : int
        Keep samples ``0, D, 2D, ...`` (the chain's overall integer decimation).
    nperseg : int
        Welch segment length at the output rate.

    Returns
    -------
    Psd
        On offsets from the channel centre (``center_frequency`` the channel's
        absolute centre when the capture states its own).
    """
    if isinstance(decimation, bool) or not isinstance(decimation, (int, np.integer)) or decimation < 1:
        raise ChannelizerError(f"decimation must be a positive integer, got {decimation!r}")
    fs = capture.sample_rate
    centre = (capture.center_frequency or 0.0) + offset
    acc = WelchAccumulator(fs=fs / decimation, nperseg=nperseg, center_frequency=centre)
    start = 0
    for block in capture.blocks(block_size):
        n = np.arange(start, start + block.size)
        keep = n % decimation == 0
        kept = n[keep]
        acc.update((block[keep] * np.exp(-2j * np.pi * offset / fs * kept)).astype(np.complex64))
        start += block.size
    if not acc.segments:
        raise ChannelizerError(f"{capture.path}: too short for a {nperseg}-point spectrum after decimation by {decimation}")
    return acc.result()
