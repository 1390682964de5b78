"""Before and after: a channel by plain decimation (no filter) beside the chain's output."""

import numpy as np

__all__ = ["plot_before_after"]


def plot_before_after(plain, chain, *, name, bandwidth, decimation, path):
    """Both output spectra of one channel on one axis, with the passband marked.

    ``plain`` and ``chain`` are Psd objects at the same output rate (offsets from
    the channel centre on their axes).
    """
    from .plots import _hz_axis, new_figure, save_figure

    fig, axes = new_figure(1, 1, size=(12, 5))
    ax = axes[0, 0]
    ax.plot(plain.freqs - plain.center_frequency, plain.dbfs_per_hz(), lw=0.8, color="tab:red",
            label=f"before: every {decimation}th sample kept, no filter (neighbours fold in)")
    ax.plot(chain.freqs - chain.center_frequency, chain.dbfs_per_hz(), lw=0.9, color="tab:blue", label="after: the plan's chain")
    ax.axvspan(-bandwidth / 2, bandwidth / 2, color="tab:green", alpha=0.08, label="passband")
    both = np.concatenate([plain.dbfs_per_hz(), chain.dbfs_per_hz()])
    both = both[np.isfinite(both)]
    if both.size:
        ax.set_ylim(max(float(np.percentile(both, 1)) - 10.0, float(both.max()) - 200.0), float(both.max()) + 10.0)
    ax.set_xlabel("offset from channel centre")
    ax.set_ylabel("PSD (dBFS/Hz)")
    _hz_axis(ax)
    ax.grid(alpha=0.3)
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, borderaxespad=0.0)
    ax.set_title(f"{name}: the same channel before and after the chain")
    save_figure(fig, path)
