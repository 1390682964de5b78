"""The demo report renders in a real headless browser (Debian's chromium).

`.ci/run` installs chromium when it is missing; elsewhere the test is skipped
when no browser is found.
"""

import os
import re
import shutil
import subprocess

import pytest

from channelizer.demo.job import run_demo

BROWSERS = ("chromium", "chromium-browser", "google-chrome")


def _browser():
    for name in BROWSERS:
        path = shutil.which(name)
        if path:
            return path
    return None


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    return run_demo(str(out))


def test_report_renders_with_every_image_and_the_key_figures(demo, tmp_path):
    browser = _browser()
    if browser is None:
        pytest.skip("no headless browser installed (.ci/run installs chromium)")
    cmd = [
        browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
        "--virtual-time-budget=5000", "--dump-dom", "file://" + os.path.abspath(demo.report_path),
    ]
    dom = subprocess.run(cmd, capture_output=True, text=True, timeout=120, env={**os.environ, "HOME": str(tmp_path)}).stdout
    assert "<h1>" in dom
    # the page's own load handler counts the images that decoded (naturalWidth > 0)
    total = int(re.search(r'data-images-total="(\d+)"', dom).group(1))
    loaded = int(re.search(r'data-images-loaded="(\d+)"', dom).group(1))
    assert total >= 6 and loaded == total
    voice = demo.plans["voice"][0].plan
    # key figures: predicted rejection of the voice chain and every channel name
    assert f"{voice.predicted['alias_rejection_db']:.2f} dB" in dom
    for ch in demo.extraction.channels:
        assert ch.name in dom
    if demo.verification is not None:
        assert f"{demo.verification.measured_rejection_db:.2f} dB" in dom
    shot = tmp_path / "shot.png"
    subprocess.run(cmd[:-2] + [f"--screenshot={shot}", "--window-size=1280,1800", cmd[-1]], capture_output=True, timeout=120, env={**os.environ, "HOME": str(tmp_path)})
    assert shot.exists() and shot.stat().st_size > 20_000


def test_report_is_self_contained(demo):
    text = open(demo.report_path, encoding="utf-8").read()
    # every image is embedded; nothing is fetched from elsewhere
    assert "data:image/png;base64," in text
    assert not re.search(r'src="(?!data:)', text)
    assert "http://" not in text and "https://" not in text
    assert "privacy" in text  # the caution about local spectrum and privacy rules


def test_demo_outputs(demo):
    ex = demo.extraction
    names = {c.name for c in ex.channels}
    assert {"ridge-ch3", "ridge-ch5", "ridge-data"} <= names
    # the interferer folds onto ridge-ch3 without filtering; the audit must find it and
    # the chain must keep it below the noise (scenario: placed at ch3 + 3 x 48 kHz)
    ch3 = next(c for c in ex.channels if c.name == "ridge-ch3")
    assert any(abs(a["signal_center_hz"] - 161.3065e6) < 5e3 for a in ch3.alias_audit)
    assert not any(a["above_noise"] for a in ch3.alias_audit)


def test_demo_takes_the_whole_raster_through_the_bank(demo):
    plan, plan_file, ex = demo.raster
    # 10 kHz channels every 12.5 kHz of 2.4 Msps: centres |i| 12.5k + 5k <= 1.2M, |i| <= 95 (common practice)
    assert plan.count == len(ex.channels) == 191
    powers = {c.name: c.mean_power_dbfs for c in ex.channels}
    # ridge-ch4 is placed at +612.5 kHz and -24 dBFS in the invented scene (demo/scene.py)
    assert abs(powers["ch-161612500"] - (-24.0)) < 1.0
    text = open(demo.report_path, encoding="utf-8").read()
    assert "Every raster channel through the filter bank" in text
