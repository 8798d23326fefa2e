"""refit: curate modern-soil calibration sets and refit paleosol climate transfer functions.

The public Python API is re-exported here lazily, so ``import refit`` stays fast and the
command line starts at once. See DEVELOPERS.md for the architecture.
"""

from __future__ import annotations

__version__ = "0.1.0"

_API = {
    # curation
    "read_table": "refit.tables",
    "check_frame": "refit.checks",
    "check_file": "refit.checks",
    "CheckReport": "refit.checks",
    "admit": "refit.store",
    "open_store": "refit.store",
    # fitting
    "fit": "refit.fitting",
    "Fit": "refit.fitting",
    "TransferFunctionRegressor": "refit.sklearn_api",
    # derived indices
    "cia": "refit.indices",
    "cia_k": "refit.indices",
    "calmag": "refit.indices",
    "salinization": "refit.indices",
    "bases_alumina": "refit.indices",
    "derive_indices": "refit.indices",
}

__all__ = ["__version__", *_API]


def __getattr__(name: str):
    if name in _API:
        import importlib

        return getattr(importlib.import_module(_API[name]), name)
    raise AttributeError(f"module 'refit' has no attribute {name!r}")
