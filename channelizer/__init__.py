"""Plan, apply, check and hand off multistage decimation chains for IQ captures.

The public API is the short list in ``__all__``; every other module is an
implementation detail that may change.  Names load on first use, so that
``import channelizer`` stays cheap.
"""

import importlib
import os
import sys

# One BLAS thread (see channelizer/cli.py); set before numpy is first imported.
_BLAS_PRESET = os.environ.get("OPENBLAS_NUM_THREADS")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
if _BLAS_PRESET is None and "numpy" in sys.modules:
    # numpy came first: OpenBLAS chose its thread count before the setting above, so the
    # engines set it to one around each product, or cut their products small where
    # they cannot (channelizer/engines/blas_threads.py).  Processes started from here
    # inherit the mark and cut their products the same way, so a distributed run still
    # equals this process's bit for bit.
    from .engines.blas_threads import mark_numpy_came_first

    mark_numpy_came_first()

__version__ = "0.1.0"

_EXPORTS = {
    "ChainSpec": "planning.spec",
    "plan_chain": "planning.planner",
    "Plan": "planning.plan",
    "open_capture": "io.captures",
    "run_extraction": "run.extraction",
    "survey_capture": "checks.survey",
    "verify_plan": "checks.verify",
    "export_plan": "handoff.export",
    "ChannelizerError": "errors",
}

__all__ = sorted(_EXPORTS) + ["__version__"]


def __getattr__(name):
    if name in _EXPORTS:
        return getattr(importlib.import_module(f".{_EXPORTS[name]}", __name__), name)
    raise AttributeError(f"module 'channelizer' has no attribute {name!r}")


def __dir__():
    return __all__
