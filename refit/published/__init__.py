"""Published transfer functions as coefficient files (``status: published``).

Each file is the frozen equation as printed in its source, with the published error
figure, n and R² where the source gives them, the valid domain, and the full citation in
``provenance``. Where the source gives no covariance the file has none, and its interval is
the published +- figure (``interval.method = "published"``, a regression standard error,
not a prediction interval) or no interval at all (``"none"``) when no figure was published.
``provenance.numbers`` says where each number comes from and how sure it is.

>>> from refit.published import names, load
>>> load("map_from_cia_k.sheldon2002").predict(80.0).estimate   # doctest: +SKIP
"""

from __future__ import annotations

from pathlib import Path

FOLDER = Path(__file__).resolve().parent


def names() -> list[str]:
    """Names of the shipped files (without ``.json``), sorted."""
    return sorted(p.stem for p in FOLDER.glob("*.json"))


def path(name: str) -> Path:
    """Path of a shipped file by name (with or without ``.json``)."""
    from refit.errors import UsageError

    p = FOLDER / (name if name.endswith(".json") else f"{name}.json")
    if not p.is_file():
        raise UsageError(f"no published equation {name!r}; choose one of: "
                         + ", ".join(names()))
    return p


def load(name: str):
    """The :class:`refit.coefficients.Equation` of a shipped file (validated, hash-checked)."""
    from refit.coefficients import load as _load

    return _load(path(name))
