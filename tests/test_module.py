"""The package exposes exactly its documented public API (practice of pypa/build's tests)."""

import subprocess
import sys

import channelizer


def test_public_names():
    assert set(channelizer.__all__) == {
        "ChainSpec", "plan_chain", "Plan", "open_capture", "run_extraction", "survey_capture",
        "verify_plan", "export_plan", "ChannelizerError", "__version__",
    }
    for name in channelizer.__all__:
        assert getattr(channelizer, name) is not None


def test_import_is_cheap_and_cli_runs_as_module():
    # importing the package loads no numerical library (names load on first use)
    code = "import sys, channelizer; print('numpy' in sys.modules)"
    assert subprocess.run([sys.executable, "-c", code], capture_output=True, text=True).stdout.strip() == "False"
    out = subprocess.run([sys.executable, "-m", "channelizer", "--help"], capture_output=True, text=True)
    assert out.returncode == 0 and "plan" in out.stdout and "extract" in out.stdout
