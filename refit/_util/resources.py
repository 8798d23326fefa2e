"""Where refit finds the files it ships: schemas and the demo scenario.

In a source checkout they live at the top level (``schemas/``, ``calib_demo/``); in an
installed wheel they sit inside the package as ``refit/schemas`` and ``refit/calib_demo``
(mapped in ``pyproject.toml``). One lookup serves both, so there is one copy of each file.
"""

from __future__ import annotations

from pathlib import Path

_PACKAGE = Path(__file__).resolve().parents[1]  # refit/
_CHECKOUT = _PACKAGE.parent


def _folder(name: str) -> Path:
    here = _CHECKOUT / name
    if here.is_dir() and (_CHECKOUT / "pyproject.toml").is_file():
        return here
    return _PACKAGE / name


def schemas_dir() -> Path:
    """Folder of the language-neutral schemas (``schemas/``)."""
    return _folder("schemas")


def demo_dir() -> Path:
    """Folder of the bundled invented demo scenario (``calib_demo/``)."""
    return _folder("calib_demo")
