"""Undertow: simulate a freight crossing, keep truth apart from what is observed, estimate what is not seen.

The Python API is :mod:`abm.api`, whose calls are also reachable here (``abm.simulate``, ``abm.estimate_flow``, ...);
they are imported on first use, so the command line starts without them.
"""

from typing import Any

__version__ = "0.1.0"

_API = ("Estimates", "RunTables", "brief", "calibrate", "estimate_flow", "example_world", "load_report", "load_world",
        "read_run", "run_batch", "simulate", "write_run")
__all__ = ["__version__", *_API]


def __getattr__(name: str) -> Any:
    if name in _API:
        from . import api

        return getattr(api, name)
    raise AttributeError(f"module 'abm' has no attribute '{name}'")
