"""Test configuration shared by every test file."""

import os

import pytest

# The same single BLAS thread as the command line (see channelizer/cli.py): the
# streaming stages' many small matrix products slow down badly under OpenBLAS's
# own threads on a busy 2-core machine.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402 - after the BLAS setting above


# Fixtures the fault tests share (tests/test_faults.py, tests/test_faults_r2.py).
FAULTS_FS = 2.4e6
FAULTS_CENTER = 161.0e6


def noise(n, seed):
    """Complex white noise at -20 dBFS per component, complex64 (demo data)."""
    rng = np.random.default_rng(seed)
    return (0.1 * (rng.standard_normal(n) + 1j * rng.standard_normal(n))).astype(np.complex64)


@pytest.fixture(scope="module")
def plan_path(tmp_path_factory):
    """A 12.5 kHz channel of 2.4 Msps at 48 ksps, planned and written as YAML."""
    from channelizer.planning.planner import plan_chain
    from channelizer.planning.spec import ChainSpec

    path = tmp_path_factory.mktemp("plan") / "relay.yaml"
    path.write_text(plan_chain(ChainSpec(input_rate=FAULTS_FS, bandwidth=12.5e3, output_rate=48e3)).plan.to_yaml())
    return str(path)


@pytest.fixture(scope="module")
def small_capture(tmp_path_factory):
    """60,000 samples of noise as cf32_le SigMF at 2.4 Msps, 161 MHz."""
    from channelizer.io.sigmf_writer import write_sigmf

    base = tmp_path_factory.mktemp("small") / "site"
    write_sigmf(base, noise(60_000, 1), datatype="cf32_le", fs=FAULTS_FS, center_frequency=FAULTS_CENTER)
    return str(base) + ".sigmf-meta"
