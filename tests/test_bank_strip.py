"""The channel-power strip: which channels count as occupied, and the figure is written."""

from types import SimpleNamespace

from channelizer.views.bank_strip import occupied_channels, plot_channel_strip


def _channels(powers):
    return [SimpleNamespace(name=f"c{i}", center_frequency=161e6 + 12.5e3 * i, offset=12.5e3 * i, mean_power_dbfs=p)
            for i, p in enumerate(powers)]


def test_occupied_means_ten_db_over_the_median_channel():
    chans = _channels([-90, -89, -91, -60, -90, -78.5, -79.5])
    # median of the seven is -89 (sorted: -91 -90 -90 -89 ...; arithmetic); "occupied" is
    # 10 dB over it, the survey's detection threshold (common practice): -78.5 clears -79,
    # -79.5 does not
    assert [c.name for c in occupied_channels(chans)] == ["c3", "c5"]


def test_strip_is_written(tmp_path):
    path = tmp_path / "strip.png"
    plot_channel_strip(_channels([-90, -40, -90, -90]), str(path), labels={"c1": "relay"}, spacing=12.5e3)
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # the PNG signature (PNG specification, sec. 5.2)
