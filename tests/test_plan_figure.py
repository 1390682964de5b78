"""The plan figure's folded view: the worst-over-bands envelope against an independent
composite filter.

Reference: for an integer-decimation chain the stages combine, by the noble identity
(Vaidyanathan, Multirate Systems and Filter Banks, 1993, sec. 4.2), into one FIR at the
input rate, h = h1 * up(h2, D1) * up(h3, D1 D2) * ...; scipy.signal.freqz of that FIR at
every input frequency that folds onto the passband gives the folded levels.
"""

import numpy as np
import pytest
import scipy.signal

from channelizer.planning.planner import plan_chain
from channelizer.planning.response import alias_intervals
from channelizer.planning.spec import ChainSpec
from channelizer.views.plan_panels import alias_envelope
from channelizer.views.plots import plot_plan


def _composite_fir(plan):
    h, factor = np.ones(1), 1
    for st in plan.stages:
        if st.kind == "cic":  # a boxcar of length R M convolved N times (Hogenauer 1981, eq. 1)
            taps = np.ones(1)
            for _ in range(st.order):
                taps = np.convolve(taps, np.ones(st.decimation * st.differential_delay))
        else:
            taps = np.asarray(st.taps, dtype=float)
        up = np.zeros((taps.size - 1) * factor + 1)
        up[::factor] = taps
        h = np.convolve(h, up)
        factor *= st.decimation
    return h / h.sum()  # unit gain at DC


@pytest.fixture(scope="module")
def plan():
    p = plan_chain(ChainSpec(input_rate=2.4e6, bandwidth=12.5e3, output_rate=48e3)).plan
    assert all(st.interpolation == 1 for st in p.stages)
    return p


def test_envelope_is_the_worst_folded_level(plan):
    env = alias_envelope(plan, points=801)
    h = _composite_fir(plan)
    fs, fs_out, fp = plan.input_rate, plan.output_rate, plan.bandwidth / 2
    worst = np.full(env.freqs.size, -np.inf)
    for lo, hi, _ in alias_intervals(plan.stages, fs=fs, bandwidth=plan.bandwidth):
        j = np.round((lo + hi) / 2 / fs_out)
        x = env.freqs + j * fs_out
        ok = (x >= lo) & (x <= hi)
        _, r = scipy.signal.freqz(h, worN=2 * np.pi * x[ok] / fs)
        worst[ok] = np.maximum(worst[ok], 20 * np.log10(np.abs(r) + 1e-300))
    both = np.isfinite(worst) & np.isfinite(env.level_db) & (worst > -200)
    assert both.sum() > 0.9 * env.freqs.size
    assert np.max(np.abs(env.level_db[both] - worst[both])) < 0.05
    # the highlighted band holds the overall maximum
    assert np.nanmax(env.worst_db) == pytest.approx(np.max(env.level_db))
    assert np.all(np.abs(env.freqs) <= fp + 1e-9)


def test_plan_figure_is_written(plan, tmp_path):
    plot_plan(plan, tmp_path / "p.png")
    assert (tmp_path / "p.png").stat().st_size > 20_000


def test_channel_plot_clips_at_noise_less_rejection_and_keeps_the_legend_aside(tmp_path, monkeypatch):
    import channelizer.views.plots as plots
    from channelizer.dsp.spectrum import WelchAccumulator

    kept = {}
    monkeypatch.setattr(plots, "save_figure", lambda fig, path: kept.setdefault("fig", fig))
    rng = np.random.default_rng(3)
    acc = WelchAccumulator(fs=48e3, nperseg=512)
    acc.update((rng.standard_normal(1 << 15) + 1j * rng.standard_normal(1 << 15)).astype(np.complex64) * 1e-3)
    audit = [{"landing_offset_hz": 1e3, "output_level_dbfs_per_hz": -400.0, "above_noise": False}]
    plots.plot_channel(acc.result(), name="c", bandwidth=12.5e3, alias_floor_dbfs_per_hz=-390.0, audit=audit,
                       path=tmp_path / "c.png", rejection_db=90.0, noise_floor_dbfs_per_hz=-130.0)
    ax = kept["fig"].axes[0]
    assert ax.get_ylim()[0] == pytest.approx(-130.0 - 90.0 - 10.0)
    # the legend lies to the right of the axes, over no data
    fig = kept["fig"]
    fig.canvas.draw()
    legend = ax.get_legend().get_window_extent()
    assert legend.x0 >= ax.get_window_extent().x1
