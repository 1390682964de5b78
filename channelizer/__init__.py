"""Plan, apply, check and hand off multistage decimation chains for IQ captures.

The public API is the short list in ``__all__``; every other module is an
implementation detail that may change.  Names load on first use, so that
``import channelizer`` stays cheap.
"""

import importlib
import os

# One BLAS thread (see channelizer/cli.py); set before numpy is first imported.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

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
