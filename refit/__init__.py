"""refit: curate modern-soil calibration sets and refit paleosol climate transfer functions.

The public Python API is re-exported here lazily, so ``import refit`` stays fast and the
command line starts at once. See DEVELOPERS.md for the architecture.
"""

from __future__ import annotations

__version__ = "0.1.0"

_API = {
    # curation
    "read_table": "refit.curate.tables",
    "check_frame": "refit.curate.checks",
    "check_file": "refit.curate.checks",
    "CheckReport": "refit.curate.checks",
    "admit": "refit.curate.store",
    "open_store": "refit.curate.store",
    # fitting
    "fit": "refit.models.fitting",
    "Fit": "refit.models.fitting",
    "TransferFunctionRegressor": "refit.models.sklearn_adapter",
    # derived indices
    "cia": "refit.soil.indices",
    "cia_k": "refit.soil.indices",
    "calmag": "refit.soil.indices",
    "salinization": "refit.soil.indices",
    "bases_alumina": "refit.soil.indices",
    "derive_indices": "refit.soil.indices",
}

__all__ = ["__version__", *_API]


def __getattr__(name: str):
    if name in _API:
        import importlib

        return getattr(importlib.import_module(_API[name]), name)
    raise AttributeError(f"module 'refit' has no attribute {name!r}")
