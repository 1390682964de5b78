"""Test configuration shared by every test file."""

import os

# The same single BLAS thread as the command line (see channelizer/cli.py): the
# streaming stages' many small matrix products slow down badly under OpenBLAS's
# own threads on a busy 2-core machine.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
