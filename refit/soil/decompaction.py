"""Burial decompaction of paleosol depths and thicknesses (Sheldon & Retallack 2001).

A buried soil is compacted: a depth or thickness measured in the outcrop is smaller than it
was at the surface. The compaction equation of Sheldon & Retallack (2001) gives the ratio
of buried to original thickness from the burial depth and two constants of the soil order
(or lithology)::

    B = -S_i / (F_0 / exp(D k) - 1),        F_0 = 1 - S_i

and the original (decompacted) value is ``measured / B``.

.. warning::
   The form of the equation is written FROM MEMORY (it is self-consistent: ``B = 1`` at
   ``D = 0`` and ``B -> S_i`` as ``D -> infinity``; both limits are tested). The constants
   are FROM MEMORY - LOW CONFIDENCE: only those of Aridisols are built in, and they must be
   checked against the paper's table before being relied on. Constants for other soil
   orders or lithologies are given by the user (a constants file, or per-row
   ``initial_solidity`` and ``compaction_k_per_km`` in the fossil table); every decompacted
   row records the constants it used and their status.

References
----------
.. [SR01] Sheldon, N.D., Retallack, G.J. (2001). Equation for compaction of paleosols due to
   burial. Geology 29(3), 247-250. doi:10.1130/0091-7613(2001)029<0247:EFCOPD>2.0.CO;2
   (citation from memory).
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from refit.errors import InvalidDataError, UnreadableInputError

#: Columns that are depths or thicknesses in a soil profile and so are decompacted.
DECOMPACTED_COLUMNS = ("bk_depth_cm", "bk_thickness_cm", "by_depth_cm")

STATUS_LOW_CONFIDENCE = "from memory - low confidence (check against Sheldon & Retallack 2001)"
STATUS_USER = "given by the user"


@dataclass(frozen=True)
class CompactionConstants:
    """Constants of the compaction equation for one soil order or lithology.

    Attributes
    ----------
    key : str
        Soil order (e.g. ``"Aridisols"``) or lithology the constants belong to.
    initial_solidity : float
        ``S_i`` = 1 - initial porosity ``F_0`` [fraction, 0-1].
    k_per_km : float
        Curve-fitting constant ``k`` [1/km].
    status : str
        Where the numbers come from and how far to trust them.
    source : str
        Citation or file.
    """

    key: str
    initial_solidity: float
    k_per_km: float
    status: str
    source: str = ""

    @property
    def initial_porosity(self) -> float:
        """``F_0 = 1 - S_i`` [fraction]."""
        return 1.0 - self.initial_solidity


#: Built-in constants. FROM MEMORY - LOW CONFIDENCE (Sheldon & Retallack 2001, Table 1):
#: Aridisols S_i = 0.62, F_0 = 0.38, k = 0.17 /km. No other order is built in on purpose.
BUILT_IN = {
    "Aridisols": CompactionConstants("Aridisols", 0.62, 0.17, STATUS_LOW_CONFIDENCE,
                                     "Sheldon & Retallack (2001), Geology 29:247"),
}


def compaction_ratio(burial_depth_km, initial_solidity, k_per_km):
    """Ratio of buried to original thickness ``B`` [fraction, S_i < B <= 1].

    Parameters
    ----------
    burial_depth_km : float or array_like
        Burial depth ``D`` [km], >= 0.
    initial_solidity : float or array_like
        ``S_i`` [fraction], in (0, 1].
    k_per_km : float or array_like
        Constant ``k`` [1/km], >= 0.

    Returns
    -------
    float or numpy.ndarray
        ``B = -S_i / (F_0 / exp(D k) - 1)`` with ``F_0 = 1 - S_i``; NaN where an input is
        missing or out of its domain.

    Notes
    -----
    Form FROM MEMORY [SR01]_; ``B(0) = 1`` and ``B(D -> inf) = S_i``.
    """
    d = np.asarray(burial_depth_km, dtype=float)
    si = np.asarray(initial_solidity, dtype=float)
    k = np.asarray(k_per_km, dtype=float)
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        f0 = 1.0 - si
        b = -si / (f0 / np.exp(d * k) - 1.0)
        bad = ~((d >= 0) & (si > 0) & (si <= 1) & (k >= 0))
        # S_i = 1 (no porosity): nothing to compact, B = 1 whatever the depth
        b = np.where(si == 1.0, 1.0, b)
    out = np.where(bad, np.nan, b)
    return float(out) if out.ndim == 0 else out


def decompact(measured, burial_depth_km, initial_solidity, k_per_km):
    """Original (pre-burial) depth or thickness ``measured / B`` [unit of ``measured``].

    Parameters
    ----------
    measured : float or array_like
        Depth or thickness as measured in the paleosol [cm].
    burial_depth_km, initial_solidity, k_per_km
        See :func:`compaction_ratio`.

    Returns
    -------
    float or numpy.ndarray
        Decompacted value [cm]; NaN where an input is missing or out of domain.
    """
    out = np.asarray(measured, dtype=float) / compaction_ratio(
        burial_depth_km, initial_solidity, k_per_km)
    return float(out) if np.ndim(out) == 0 else out


def load_constants(path) -> dict[str, CompactionConstants]:
    """Read compaction constants from a JSON or CSV file.

    JSON: ``{"Mollisols": {"initial_solidity": 0.6, "k_per_km": 0.1, "source": "..."}}``.
    CSV: columns ``key``, ``initial_solidity``, ``k_per_km`` and optionally ``source``.
    Complete examples: ``calib_demo/compaction_constants.csv`` and ``.json`` (invented
    numbers); the format is documented in the README ("Burial and decompaction").

    Raises
    ------
    UnreadableInputError
        Missing file or unreadable content.
    InvalidDataError
        A constant that is missing or out of range (naming the key and the field).
    """
    path = Path(path)
    if not path.is_file():
        raise UnreadableInputError(f"{path}: no such compaction-constants file; check the "
                                   "path")
    if path.suffix.lower() == ".json":
        try:
            raw = json.loads(path.read_text("utf-8"))
        except (OSError, ValueError) as err:
            raise UnreadableInputError(f"{path}: not valid JSON ({err})")
        if not isinstance(raw, dict):
            raise InvalidDataError(f"{path}: expected an object keyed by soil order or "
                                   "lithology")
        rows = [dict(v, key=k) if isinstance(v, dict) else {"key": k} for k, v in raw.items()]
    else:
        import csv

        try:
            with path.open(newline="", encoding="utf-8-sig") as fh:
                rows = list(csv.DictReader(fh))
        except (OSError, UnicodeDecodeError, csv.Error) as err:
            raise UnreadableInputError(f"{path}: cannot be read as CSV ({err})")
    return {c.key: c for c in (_constants_row(r, path) for r in rows)}


def _constants_row(row: dict, path: Path) -> CompactionConstants:
    key = str(row.get("key") or "").strip()
    if not key:
        raise InvalidDataError(f"{path}: a row has no 'key' (soil order or lithology)")
    vals = {}
    for name, lo, hi in (("initial_solidity", 0.0, 1.0), ("k_per_km", 0.0, 10.0)):
        try:
            v = float(row.get(name))
        except (TypeError, ValueError):
            raise InvalidDataError(f"{path}: {key}: {name} = {row.get(name)!r} is not a "
                                   "number; give it as a decimal (e.g. 0.62)")
        if not (lo < v <= hi if name == "initial_solidity" else lo <= v <= hi):
            raise InvalidDataError(f"{path}: {key}: {name} = {v:g} is outside "
                                   f"{'(0, 1]' if name == 'initial_solidity' else '[0, 10]'}")
        vals[name] = v
    return CompactionConstants(key, vals["initial_solidity"], vals["k_per_km"],
                               STATUS_USER, str(row.get("source") or path.name))


def constants_table(extra: dict[str, CompactionConstants] | None = None):
    """Built-in constants updated by ``extra`` (user constants win)."""
    table = dict(BUILT_IN)
    table.update(extra or {})
    return table
