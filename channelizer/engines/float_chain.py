"""A planned chain as float runners: stages in series, channels sharing a front end.

``build_chain`` turns a plan's stages into the streaming runners of
:mod:`channelizer.engines.streaming` (mixing folded into the first stage);
``Chain`` runs them in series, ``ChannelBank`` and ``SharedFrontBank`` run many
channels from one block, channels sharing a first stage sharing one matrix product.
"""

from fractions import Fraction

import numpy as np

from ..errors import ChannelizerError
from ..planning.stages import CicStage, FirStage, ResamplerStage, is_halfband
from .streaming import FirDecimator, HalfbandDecimator, Mixer, MixingFirBank, MixingFirDecimator, _as_block
from .resampler import RationalResampler

__all__ = ["Chain", "ChannelBank", "SharedFrontBank", "build_chain"]


class Chain:
    """Stages run one after another on each block.

    Parameters
    ----------
    stages : sequence
        Runner objects with ``process``, ``interpolation``, ``decimation`` and
        ``delay`` (the classes of this module).

    Attributes
    ----------
    total_decimation : Fraction
        Input rate over output rate.
    delay_output_samples : float
        Group delay of the whole chain in output samples:
        ``sum_i delay_i * f_out / f_i`` with ``f_i`` the input rate of stage ``i``.

    Examples
    --------
    A channel 1.5 MHz above the centre of a 61.44 Msps capture, through a CIC
    (N = 5, R = 16, as its FIR) and a 63-tap channel filter decimating by 2:

    >>> import numpy as np, scipy.signal
    >>> from channelizer.stages import cic_taps
    >>> fs = 61.44e6
    >>> chain = Chain([MixingFirDecimator(cic_taps(5, 16), 16, offset=1.5e6, fs=fs),
    ...                FirDecimator(scipy.signal.firwin(63, 0.4), 2)])
    >>> chain.total_decimation
    Fraction(32, 1)
    >>> y = chain.process(np.zeros(4096, np.complex64))
    >>> y.size, y.dtype
    (128, dtype('complex64'))
    """

    def __init__(self, stages):
        stages = tuple(stages)
        if not stages:
            raise ChannelizerError("stages: a chain needs at least one stage")
        for i, st in enumerate(stages):
            for attr in ("process", "interpolation", "decimation", "delay"):
                if not hasattr(st, attr):
                    raise ChannelizerError(f"stages[{i}]: {type(st).__name__} has no {attr!r}; not a stage")
        self.stages = stages
        rate = Fraction(1)  # input rate of each stage relative to the chain's
        delay_in = Fraction(0)  # in chain input samples
        for st in stages:
            delay_in += Fraction(st.delay) / rate
            rate *= Fraction(st.interpolation, st.decimation)
        self.total_decimation = 1 / rate
        self.delay_output_samples = float(delay_in * rate)

    def process(self, block):
        """Run the next block through every stage; returns complex64 outputs."""
        y = _as_block(block)
        for st in self.stages:
            y = st.process(y)
        return y


class ChannelBank:
    """Several chains fed from the same input blocks.

    Parameters
    ----------
    chains : sequence of Chain
        One per channel.

    Notes
    -----
    The input block is converted to contiguous complex64 once and shared,
    read-only, by all chains, which run one after another.  Running them on a
    pool of two threads was measured on a 2-core machine (8 channels of a CIC
    76/16 and three half-bands, blocks of 2**16 to 2**20 samples) and was 5 to 50 %
    slower than in turn: the matrix products release the GIL, but the rest of each
    stage holds it in many short steps.
    """

    def __init__(self, chains):
        self.chains = tuple(chains)
        if not self.chains:
            raise ChannelizerError("chains: a channel bank needs at least one chain")

    def process(self, block):
        """Feed one block to every chain; returns a list of complex64 arrays, in order."""
        x = _as_block(block).view()
        x.setflags(write=False)
        return [c.process(x) for c in self.chains]


class SharedFrontBank:
    """Channels fed from one input, their first stages shared where they can be.

    Channels whose first stage is the same FIR or CIC (same taps and decimation)
    run it as one :class:`MixingFirBank`; the rest of each chain runs on its own.
    Each channel's output equals its own :func:`build_chain` chain.

    Parameters
    ----------
    channels : sequence of (stages, offset)
        Planned stages and the channel's offset in Hz from the capture centre.
    fs : float
        Capture sample rate in Hz.
    """

    def __init__(self, channels, *, fs, start_index=0):
        channels = list(channels)
        if not channels:
            raise ChannelizerError("channels: a bank needs at least one channel")
        groups = {}
        self._solo = {}
        for idx, (stages, offset) in enumerate(channels):
            stages = tuple(stages)
            first = stages[0]
            if isinstance(first, (CicStage, FirStage)):
                groups.setdefault(first, []).append((idx, stages, offset))
            else:
                self._solo[idx] = build_chain(stages, offset=offset, fs=fs, start_index=start_index)
        self._groups = []
        for first, members in groups.items():
            taps = first.taps() if isinstance(first, CicStage) else np.asarray(first.taps, dtype=float)
            front = MixingFirBank(taps, first.decimation, offsets=[m[2] for m in members], fs=fs, start_index=start_index)
            rests = []
            rate = fs / first.decimation
            for _, stages, _ in members:
                rests.append(build_chain(stages[1:], offset=0.0, fs=rate) if len(stages) > 1 else None)
            self._groups.append(([m[0] for m in members], front, rests))
        self.n_channels = len(channels)

    def process(self, block):
        """Feed one block; returns one complex64 array per channel, in order."""
        x = _as_block(block)
        out = [None] * self.n_channels
        for idx, chain in self._solo.items():
            out[idx] = chain.process(x)
        for members, front, rests in self._groups:
            for idx, y, rest in zip(members, front.process(x), rests):
                out[idx] = rest.process(y) if rest is not None else y
        return out


def build_chain(stages, *, offset, fs, start_index=0):
    """Runners for planned stages, the channel's mixing folded into the first one.

    Parameters
    ----------
    stages : sequence of CicStage, FirStage, ResamplerStage
        The planned chain (:mod:`channelizer.stages`).
    offset : float
        Channel centre in Hz relative to the capture centre.
    fs : float
        Capture sample rate in Hz.
    start_index : int, optional
        Absolute capture index of the first sample that will be fed.

    Returns
    -------
    Chain
        A CIC runs as its boxcar-power FIR (unit DC gain), half-band stages as
        :class:`HalfbandDecimator`, the first FIR stage as
        :class:`MixingFirDecimator` (a :class:`Mixer` is put first when the
        first stage is a resampler).
    """
    stages = tuple(stages)
    if not stages:
        raise ChannelizerError("stages: a chain needs at least one stage")
    runners = []
    for i, st in enumerate(stages):
        first = i == 0
        if isinstance(st, CicStage):
            taps, dec, half = st.taps(), st.decimation, False
        elif isinstance(st, FirStage):
            taps, dec, half = np.asarray(st.taps, dtype=float), st.decimation, st.kind == "halfband"
        elif isinstance(st, ResamplerStage):
            if first:
                runners.append(Mixer(offset, fs=fs, start_index=start_index))
            runners.append(RationalResampler(np.asarray(st.taps, dtype=float), st.interpolation, st.decimation))
            continue
        else:
            raise ChannelizerError(f"stages[{i}]: unknown stage type {type(st).__name__}")
        if first:
            runners.append(MixingFirDecimator(taps, dec, offset=offset, fs=fs, start_index=start_index))
        elif half and dec == 2 and is_halfband(taps):
            runners.append(HalfbandDecimator(taps))
        else:
            runners.append(FirDecimator(taps, dec))
    return Chain(runners)
