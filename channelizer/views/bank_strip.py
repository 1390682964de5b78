"""The channel-power strip: one bar per raster channel, the occupied ones labelled."""

import math

from .plots import new_figure, save_figure

__all__ = ["occupied_channels", "plot_channel_strip"]


def occupied_channels(channels, *, threshold_db=10.0):
    """Channels whose mean power is ``threshold_db`` above the median channel's (the empty raster's level)."""
    powers = sorted(c.mean_power_dbfs for c in channels if math.isfinite(c.mean_power_dbfs))
    if not powers:
        return []
    floor = powers[len(powers) // 2]
    return [c for c in channels if math.isfinite(c.mean_power_dbfs) and c.mean_power_dbfs >= floor + threshold_db]


def plot_channel_strip(channels, path, *, labels=None, spacing=None, threshold_db=10.0):
    """One bar per channel at its centre frequency, height its mean power in dBFS.

    Parameters
    ----------
    channels : sequence of ChannelResult
        The raster's channels (``center_frequency`` or ``offset``, ``mean_power_dbfs``).
    path : str
        PNG written (atomically).
    labels : dict, optional
        Name to show above an occupied channel, by channel name (default: the name).
    spacing : float, optional
        Raster spacing in Hz (bar width); default the smallest gap between centres.
    """
    from matplotlib.ticker import EngFormatter

    labels = labels or {}
    freqs = [c.center_frequency if c.center_frequency is not None else c.offset for c in channels]
    powers = [c.mean_power_dbfs if math.isfinite(c.mean_power_dbfs) else -200.0 for c in channels]
    if spacing is None:
        gaps = [b - a for a, b in zip(freqs, freqs[1:]) if b > a]
        spacing = min(gaps) if gaps else 1.0
    base = min(powers) - 5
    fig, axes = new_figure(size=(11, 3.6))
    ax = axes[0][0]
    busy = {c.name for c in occupied_channels(channels, threshold_db=threshold_db)}
    colours = ["tab:orange" if c.name in busy else "tab:blue" for c in channels]
    ax.bar(freqs, [p - base for p in powers], width=0.8 * spacing, bottom=base, color=colours)
    # one label per signal: a label shared by several channels (a wide signal) goes on its strongest one
    strongest = {}
    for c, f, p in zip(channels, freqs, powers):
        if c.name in busy:
            text = labels.get(c.name, f"{f / 1e6:.4f}M" if abs(f) >= 1e6 else f"{f / 1e3:+.1f}k")
            if text not in strongest or p > strongest[text][1]:
                strongest[text] = (f, p)
    for text, (f, p) in strongest.items():
        ax.annotate(text, (f, p), xytext=(0, 3), textcoords="offset points", rotation=90, ha="center", va="bottom", fontsize=7)
    ax.xaxis.set_major_formatter(EngFormatter(unit="Hz"))
    ax.set_ylabel("mean power (dBFS)")
    ax.set_ylim(base, max(powers) + 25)
    ax.set_title(f"{len(channels)} raster channels, {len(busy)} occupied (>= {threshold_db:g} dB above the median channel)")
    ax.grid(True, axis="y", alpha=0.3)
    save_figure(fig, path)
    return path
