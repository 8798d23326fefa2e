"""Where refit finds the files it ships: schemas and the demo scenario.

In a source checkout they live at the top level (``schemas/``, ``calib_demo/``); in an
installed wheel they are the packages ``refit.schemas`` and ``refit.calib_demo``
(mapped in ``pyproject.toml``). One lookup serves both, so there is one copy of each file.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

_CHECKOUT = Path(__file__).resolve().parent.parent


def _folder(top_level: str, package: str) -> Path:
    here = _CHECKOUT / top_level
    if here.is_dir() and (_CHECKOUT / "pyproject.toml").is_file():
        return here
    return Path(str(resources.files(package)))


def schemas_dir() -> Path:
    """Folder of the language-neutral schemas (``schemas/``)."""
    return _folder("schemas", "refit.schemas")


def demo_dir() -> Path:
    """Folder of the bundled invented demo scenario (``calib_demo/``)."""
    return _folder("calib_demo", "refit.calib_demo")
