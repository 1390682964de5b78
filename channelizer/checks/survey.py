"""Survey of a capture: spectrum, spectrogram, noise floor and occupied signals.

The capture is streamed once; the Welch average and the spectrogram are built
from the same blocks.
"""

from dataclasses import dataclass
import math

import numpy as np

from ..io.progress import ProgressBar
from ..dsp.spectrum import WelchAccumulator
from ..dsp.spectrogram import SpectrogramAccumulator
from ..dsp.detection import FLOOR_REGIONS, channel_list_from_signals, detect_signals, median, noise_floor_profile

__all__ = ["SurveyResult", "survey_capture", "format_survey", "OCCUPIED_BANDWIDTH_DEFINITION", "UNSCALED_PEAK"]

#: A float capture whose samples reach this magnitude (12 dB over full scale) is not scaled to full scale.
UNSCALED_PEAK = 4.0

SPECTROGRAM_ELEMENTS = 1 << 25
OCCUPIED_BANDWIDTH_DEFINITION = (
    "99 % power bandwidth (ITU-R SM.328): 0.5 % of the signal's power, noise subtracted, lies below "
    "the band and 0.5 % above"
)


@dataclass
class SurveyResult:
    capture: object
    psd: object
    spectrogram: object
    noise_floor_dbfs_per_hz: float
    signals: list
    threshold_db: float
    noise_floor_per_bin: object = None
    peak_magnitude: float = 0.0

    @property
    def resolution_hz(self):
        """Bin spacing of the spectrum, Hz."""
        return self.psd.bin_hz

    @property
    def unscaled(self):
        """Whether a float capture's samples go far beyond full scale (1.0)."""
        return not self.capture.datatype.is_integer and self.peak_magnitude >= UNSCALED_PEAK

    def channel_list(self, *, prefix="sig"):
        """Channel list (name, frequency, bandwidth) that ``extract --channels`` reads,
        rounded to the digit the resolution gives."""
        return channel_list_from_signals(self.signals, prefix=prefix, resolution=self.resolution_hz)


def survey_capture(capture, *, resolution=None, threshold_db=10.0, block_size=1 << 20, progress=False, rows=300):
    """Stream ``capture`` once and find the occupied signals.

    Parameters
    ----------
    capture : channelizer.captures.Capture
    resolution : float, optional
        Frequency resolution in Hz (segment length: the next power of two at or
        above ``fs / resolution``); default ``fs / 4096``.
    threshold_db : float
        Detection threshold above the estimated noise floor.
    """
    fs = capture.sample_rate
    centre = capture.center_frequency or 0.0
    kw = {"resolution": resolution} if resolution is not None else {"nperseg": 4096}
    n = capture.num_samples
    welch = WelchAccumulator(fs=fs, center_frequency=centre, **kw)
    if n < welch.nperseg:
        from ..errors import ChannelizerError

        raise ChannelizerError(
            f"{capture.path}: {n} samples are fewer than one {welch.nperseg}-point segment; use a coarser --resolution"
        )
    # at most SPECTROGRAM_ELEMENTS bins in all (rows x nperseg float64: 256 MiB)
    rows = max(1, min(rows, SPECTROGRAM_ELEMENTS // welch.nperseg))
    spec = SpectrogramAccumulator(fs=fs, total_samples=n, rows=rows, nperseg=welch.nperseg, center_frequency=centre)
    bar = ProgressBar(n, enabled=None if progress else False, label="survey")
    done = 0
    peak = 0.0
    for block in capture.blocks(block_size):
        if block.size:
            peak = max(peak, float(np.max(np.abs(block))))
        welch.update(block)
        spec.update(block)
        done += block.size
        bar.update(done)
    bar.close()
    psd = welch.result()
    floor = noise_floor_profile(psd)
    signals = detect_signals(psd, threshold_db=threshold_db, noise_floor=floor)
    mid = median(floor)
    level = 10 * math.log10(mid) if mid > 0 else -math.inf
    return SurveyResult(capture, psd, spec.result(), level, signals, threshold_db, floor, peak)


def format_survey(result):
    """The printed table of a survey."""
    from ..units import format_hz

    cap = result.capture
    psd = result.psd
    lines = [
        f"{cap.path}: {cap.num_samples} samples at {format_hz(cap.sample_rate, 'sps')}"
        + (f", centre {format_hz(cap.center_frequency)}" if cap.center_frequency is not None else ", centre unknown (offsets shown)"),
        f"Welch average: {psd.window} window, {psd.nperseg}-point segments, {format_hz(psd.bin_hz, digits=4)} bins, {psd.segments} segments",
        _floor_line(result),
        f"Occupied bandwidth: {OCCUPIED_BANDWIDTH_DEFINITION}",
        "",
        f"{'#':>3}  {'centre':>16} {'bandwidth':>12} {'power':>11} {'SNR':>8}",
    ]
    if result.unscaled:
        lines.insert(
            4,
            f"Note: samples reach a magnitude of {result.peak_magnitude:.0f} (full scale is 1.0): the capture is not scaled to "
            "full scale, so dBFS levels are relative only",
        )
    res = result.resolution_hz
    for i, s in enumerate(result.signals, 1):
        lines.append(
            f"{i:>3}  {format_hz(s.center_hz, resolution=res):>16} {format_hz(s.occupied_bandwidth_hz, resolution=res):>12} "
            f"{s.power_dbfs:>6.1f} dBFS {s.snr_db:>6.1f} dB"
        )
    if not result.signals:
        lines.append("  (no signal above the threshold)")
    return "\n".join(lines)




def _floor_line(result):
    """The noise-floor line: its median level, and its range when it varies across the band."""
    if not math.isfinite(result.noise_floor_dbfs_per_hz):
        return "Noise floor -inf dBFS/Hz: every sample is zero (no signal)"
    text = (
        f"Noise floor {result.noise_floor_dbfs_per_hz:.1f} dBFS/Hz (median); signals at least "
        f"{result.threshold_db:g} dB above it in their occupied band"
    )
    per_bin = result.noise_floor_per_bin
    if per_bin is not None and np.min(per_bin) > 0:
        lo, hi = 10 * np.log10(np.min(per_bin)), 10 * np.log10(np.max(per_bin))
        text += (
            f"\nLocal noise floor: trimmed median in each of up to {FLOOR_REGIONS} regions, "
            f"from {lo:.1f} to {hi:.1f} dBFS/Hz across the band"
        )
    return text
