"""Survey of a capture: spectrum, spectrogram, noise floor and occupied signals.

The capture is streamed once; the Welch average and the spectrogram are built
from the same blocks.
"""

from dataclasses import dataclass
import math


from ..io.progress import ProgressBar
from ..dsp.spectrum import SpectrogramAccumulator, WelchAccumulator, power_db
from ..dsp.detection import channel_list_from_signals, detect_signals, estimate_noise_floor

__all__ = ["SurveyResult", "survey_capture", "format_survey", "OCCUPIED_BANDWIDTH_DEFINITION"]

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

    def channel_list(self, *, prefix="sig"):
        """Channel list (name, frequency, bandwidth) that ``extract --channels`` reads."""
        return channel_list_from_signals(self.signals, prefix=prefix)


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
    for block in capture.blocks(block_size):
        welch.update(block)
        spec.update(block)
        done += block.size
        bar.update(done)
    bar.close()
    psd = welch.result()
    floor = estimate_noise_floor(psd)
    signals = detect_signals(psd, threshold_db=threshold_db, noise_floor=floor)
    return SurveyResult(capture, psd, spec.result(), power_db(floor), signals, threshold_db)


def format_survey(result):
    """The printed table of a survey."""
    from ..units import format_hz

    cap = result.capture
    psd = result.psd
    lines = [
        f"{cap.path}: {cap.num_samples} samples at {format_hz(cap.sample_rate, 'sps')}"
        + (f", centre {format_hz(cap.center_frequency)}" if cap.center_frequency is not None else ", centre unknown (offsets shown)"),
        f"Welch average: {psd.window} window, {psd.nperseg}-point segments, {psd.bin_hz:.4g} Hz bins, {psd.segments} segments",
        (f"Noise floor {result.noise_floor_dbfs_per_hz:.1f} dBFS/Hz; signals at least {result.threshold_db:g} dB above it"
         if math.isfinite(result.noise_floor_dbfs_per_hz) else "Noise floor -inf dBFS/Hz: every sample is zero (no signal)"),
        f"Occupied bandwidth: {OCCUPIED_BANDWIDTH_DEFINITION}",
        "",
        f"{'#':>3}  {'centre':>16} {'bandwidth':>12} {'power':>11} {'SNR':>8}",
    ]
    for i, s in enumerate(result.signals, 1):
        lines.append(
            f"{i:>3}  {format_hz(s.center_hz):>16} {format_hz(s.occupied_bandwidth_hz):>12} "
            f"{s.power_dbfs:>6.1f} dBFS {s.snr_db:>6.1f} dB"
        )
    if not result.signals:
        lines.append("  (no signal above the threshold)")
    return "\n".join(lines)


