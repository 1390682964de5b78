"""Timing of an extracted channel: where its samples sit in the source and in time.

For a chain of stages ``y[n] = sum_k h[k] x[nD - k]`` (first output at input index 0,
see DEVELOPERS.md), output sample ``n`` is computed at source sample ``n * S`` with
``S = M / L`` the chain's overall step (source samples per output sample: the
product of the decimations over the product of the interpolations).  Its content
is the source's, late by the chain's group delay ``tau`` (linear-phase stages:
``(N - 1) / 2`` taps each, summed at the source rate).  The first outputs are
computed from a filter still partly filled with zeros: the chain has settled once
``n * S`` reaches the span of its composite impulse response.

These figures go into every recording's capture segment under our own
``channelizer:`` namespace, with ``core:datetime`` moved so that a sample's
timestamp is the time its content left the source (the source's time of sample 0,
plus ``(first source sample - tau) / fs``).
"""

from dataclasses import dataclass
import datetime as _dt
from fractions import Fraction
import math
import re

from ..planning.stages import chain_rates

__all__ = ["ChannelTiming", "channel_timing", "shift_datetime", "SETTLING_LABEL"]

#: ``core:label`` of the annotation marking the start-up samples.
SETTLING_LABEL = "chain settling"

_ISO = re.compile(r"^(\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2})(?:\.(\d+))?Z$")
_NS = 10**9


def shift_datetime(text, seconds):
    """An ISO-8601 UTC time (``...Z``, SigMF ``core:datetime``) moved by ``seconds``.

    Returns the new time with nanosecond digits, or None when ``text`` is not of
    the form SigMF prescribes (``YYYY-MM-DDTHH:MM:SS[.fff...]Z``).
    """
    m = _ISO.match(text) if isinstance(text, str) else None
    if not m:
        return None
    try:
        whole = _dt.datetime.strptime(m.group(1), "%Y-%m-%dT%H:%M:%S").replace(tzinfo=_dt.timezone.utc)
    except ValueError:
        return None
    frac = m.group(2) or "0"
    ns = int((frac + "0" * 9)[:9]) + int(round(seconds * _NS))
    # whole seconds from the epoch plus nanoseconds, kept as integers
    total = int(whole.timestamp()) * _NS + ns
    secs, rem = divmod(total, _NS)
    stamp = _dt.datetime.fromtimestamp(secs, tz=_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S")
    return f"{stamp}.{rem:09d}Z"


@dataclass(frozen=True)
class ChannelTiming:
    """Source-to-output mapping of one channel's chain.

    Attributes
    ----------
    fs : float
        Source sample rate, Hz.
    step : Fraction
        Source samples per output sample, ``M / L``.
    group_delay_source : float
        Group delay in source samples.
    settling : int
        Output samples computed while the chain's filters still hold the zeros
        they started with.
    skipped : int
        Output samples left out at the start (``settling`` under trimming, else 0).
    """

    fs: float
    step: Fraction
    group_delay_source: float
    settling: int
    skipped: int = 0

    @property
    def output_rate(self):
        return self.fs / float(self.step)

    @property
    def first_source_sample(self):
        """Source sample index at which the first written output is computed."""
        return self.skipped * self.step

    @property
    def group_delay_output(self):
        return self.group_delay_source / float(self.step)

    def datetime(self, source_datetime):
        """``core:datetime`` for the channel: source time of its first sample's content."""
        if source_datetime is None:
            return None
        shift = (float(self.first_source_sample) - self.group_delay_source) / self.fs
        return shift_datetime(source_datetime, shift)

    def capture_fields(self, source_datetime=None):
        """Fields for the channel's capture segment (``core:datetime`` when the source has one)."""
        first = self.first_source_sample
        fields = {
            "channelizer:source_sample_start": int(first) if first.denominator == 1 else float(first),
            "channelizer:source_sample_step": float(self.step),
            "channelizer:source_sample_step_ratio": f"{self.step.numerator}/{self.step.denominator}"
            if self.step.denominator != 1
            else str(self.step.numerator),
            "channelizer:group_delay_output_samples": self.group_delay_output,
            "channelizer:group_delay_source_samples": self.group_delay_source,
            "channelizer:group_delay_s": self.group_delay_source / self.fs,
            "channelizer:settling_samples": self.settling,
            "channelizer:settling_trimmed": self.skipped > 0,
        }
        stamp = self.datetime(source_datetime)
        if stamp is not None:
            fields["core:datetime"] = stamp
            fields["channelizer:datetime_basis"] = (
                "source core:datetime + (source_sample_start - group_delay_source_samples) / source rate:"
                " the time the content of sample 0 left the source"
            )
        return fields

    def annotations(self):
        """The annotation marking the start-up samples (none once they are trimmed)."""
        if self.skipped or not self.settling:
            return []
        return [
            {
                "core:sample_start": 0,
                "core:sample_count": int(self.settling),
                "core:label": SETTLING_LABEL,
                "core:comment": "computed while the chain's filters still held their initial zeros;"
                " not yet a faithful copy of the source",
            }
        ]


def _step(stages):
    step = Fraction(1)
    for st in stages:
        step *= Fraction(int(st.decimation), int(st.interpolation))
    return step


def channel_timing(stages, *, fs, trim=False):
    """The :class:`ChannelTiming` of a chain of ``stages`` fed at ``fs`` Hz.

    Parameters
    ----------
    stages : sequence of stages
        A plan's stages (``decimation``, ``interpolation``, ``num_taps``, ``delay``).
    fs : float
        Source sample rate, Hz.
    trim : bool
        Whether the start-up samples are left out of the recording.
    """
    rates = chain_rates(stages, fs=fs)
    delay = 0.0
    span = 0.0
    for st, rate in zip(stages, rates):
        per = fs / rate  # source samples per sample at this stage's input
        delay += st.delay * per
        span += (st.num_taps - 1) / st.interpolation * per
    step = _step(stages)
    settling = int(math.ceil(span / float(step) - 1e-9)) if span > 0 else 0
    return ChannelTiming(fs=float(fs), step=step, group_delay_source=delay, settling=settling, skipped=settling if trim else 0)
