"""Domain of validity of a fitted transfer function.

What the data support: the range of each predictor (and of the response), the turning
point of a quadratic and where it lies relative to the data (beyond it the curve turns
back, so the equation saturates and one output value has two inputs: it cannot be
inverted there), a per-prediction extrapolation flag, and a comparison with a two-segment
(broken-stick) line that reveals thresholds where the response flattens.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

#: how far beyond the data (as a fraction of the range width) still counts as "near"
#: (a convention of this tool, common practice for flagging mild extrapolation)
NEAR_FRACTION = 0.1

FLAG_EXTRAPOLATION = "outside-calibration-range"
FLAG_BEYOND_TP = "beyond-turning-point"


@dataclass
class Domain:
    """Where a fit can be trusted.

    Attributes
    ----------
    ranges : dict
        ``name -> (min, max)`` of each variable of the fitted equation [its unit].
    x_name : str or None
        The equation's single regressor (None for several predictors).
    turning_point : float or None
        Where the quadratic's slope is zero [unit of x], or None.
    turning_point_location : str or None
        ``inside``, ``near`` (within :data:`NEAR_FRACTION` of the range width) or ``outside``.
    turning_point_kind : str or None
        ``maximum`` or ``minimum``.
    data_side : int
        -1 if the data lie mostly below the turning point, +1 if above, 0 if none.
    broken_stick : dict or None
        Result of the two-segment comparison, when run.
    cautions : list of str
        Plain-language warnings.
    """

    ranges: dict[str, tuple[float, float]]
    x_name: str | None = None
    turning_point: float | None = None
    turning_point_location: str | None = None
    turning_point_kind: str | None = None
    data_side: int = 0
    broken_stick: dict | None = None
    cautions: list[str] = field(default_factory=list)

    def to_dict(self) -> dict:
        """JSON-ready content (for the coefficient file's ``domain``)."""
        out = {"ranges": {k: [float(a), float(b)] for k, (a, b) in self.ranges.items()},
               "turning_point": self.turning_point,
               "turning_point_location": self.turning_point_location,
               "turning_point_kind": self.turning_point_kind,
               "cautions": list(self.cautions)}
        if self.broken_stick is not None:
            out["broken_stick"] = {k: _plain(v) for k, v in self.broken_stick.items()
                                   if _plain(v) is not _SKIP}
        return out


_SKIP = object()


def _plain(v):
    """A JSON-ready scalar or list of scalars, or _SKIP (arrays such as covariances)."""
    if isinstance(v, (str, type(None))):
        return v
    if isinstance(v, (bool, np.bool_)):
        return bool(v)
    if isinstance(v, (int, float, np.integer, np.floating)):
        return float(v) if np.isfinite(v) else str(float(v))
    if isinstance(v, tuple) and all(isinstance(e, (int, float, np.floating)) for e in v):
        return [_plain(e) for e in v]
    return _SKIP


def variable_ranges(columns: dict[str, np.ndarray]) -> dict[str, tuple[float, float]]:
    """``name -> (min, max)`` of each array (finite values only)."""
    return {k: (float(np.nanmin(v)), float(np.nanmax(v))) for k, v in columns.items()}


def quadratic_turning_point(b1: float, b2: float, lo: float, hi: float, x: np.ndarray,
                            near_fraction: float = NEAR_FRACTION):
    """Turning point ``-b1 / (2 b2)`` of ``b0 + b1 x + b2 x^2`` and where it lies.

    Returns
    -------
    (tp, location, kind, data_side) : (float, str, str, int), or (None, None, None, 0)
        ``location`` is ``inside`` [lo, hi], ``near`` (within ``near_fraction`` of the
        width outside it) or ``outside``; ``data_side`` says on which side most data lie.
    """
    if b2 == 0 or not np.isfinite(b2):
        return None, None, None, 0
    tp = -b1 / (2.0 * b2)
    width = hi - lo
    if lo <= tp <= hi:
        loc = "inside"
    elif lo - near_fraction * width <= tp <= hi + near_fraction * width:
        loc = "near"
    else:
        loc = "outside"
    side = 1 if np.sum(x > tp) > np.sum(x < tp) else -1
    return float(tp), loc, "maximum" if b2 < 0 else "minimum", side


def build_domain(ranges: dict, x_name: str | None, degree: int, coef_by_power,
                 x: np.ndarray | None, role: str) -> Domain:
    """Domain of a fit: ranges, and for a single-predictor quadratic its turning point.

    Parameters
    ----------
    ranges : dict
        Variable ranges (:func:`variable_ranges`).
    x_name : str or None
        The single regressor's name, or None.
    degree : int
        Polynomial degree of the form.
    coef_by_power : sequence of float
        Coefficients of x^0, x^1, x^2 (only the first three are used).
    x : ndarray or None
        Regressor values of the data.
    role : str
        Plain words for the regressor in messages ("the feature", "climate").
    """
    dom = Domain(ranges=dict(ranges), x_name=x_name)
    if x_name is None or degree != 2 or x is None:
        return dom
    lo, hi = ranges[x_name]
    tp, loc, kind, side = quadratic_turning_point(coef_by_power[1], coef_by_power[2],
                                                  lo, hi, x)
    dom.turning_point, dom.turning_point_location = tp, loc
    dom.turning_point_kind, dom.data_side = kind, side
    if loc in ("inside", "near"):
        dom.cautions.append(
            f"the quadratic turns ({kind}) at {x_name} = {tp:.6g}, {loc} the data range "
            f"[{lo:.6g}, {hi:.6g}]: beyond it the equation saturates, one output value "
            f"belongs to two values of {role}, and it cannot be inverted there")
    return dom


#: the forward search window extends the calibration range by this fraction of its width
#: on each side (a convention of this tool: room for mild extrapolation, not for nonsense)
SEARCH_MARGIN = 0.5


def schema_bounds(column: str) -> tuple[float, float]:
    """``(minimum, maximum)`` of a column in the calibration table schema, +-inf if unset.

    The schema (``schemas/calibration.table.json``, a Frictionless Table Schema) gives the
    admissible range of each variable, e.g. ``map_mm`` in [0, 12000] mm: no value outside
    it can be in a calibration table, so no estimate outside it is meaningful.
    """
    c = _schema_constraints().get(column, {})
    lo, hi = c.get("minimum"), c.get("maximum")
    return (-np.inf if lo is None else float(lo), np.inf if hi is None else float(hi))


@lru_cache(maxsize=1)
def _schema_constraints() -> dict:
    import json

    from refit._util.resources import schemas_dir

    try:
        desc = json.loads((schemas_dir() / "calibration.table.json").read_text("utf-8"))
    except (OSError, ValueError):
        return {}
    return {f["name"]: f.get("constraints", {}) for f in desc.get("fields", [])
            if isinstance(f, dict) and "name" in f}


def search_window(domain, bounds=(-np.inf, np.inf), margin: float = SEARCH_MARGIN):
    """The calibration range widened by ``margin`` x its width per side, cut at ``bounds``.

    Parameters
    ----------
    domain : (float, float)
        Calibration range of x [units of x].
    bounds : (float, float)
        Physical bounds of x, e.g. ``(0, inf)`` for rain [units of x].
    margin : float
        Fraction of the range width added on each side.

    Returns
    -------
    (float, float)
        The window; the calibration range itself if the bounds would leave nothing.
    """
    lo, hi = map(float, domain)
    w = margin * (hi - lo)
    a, b = max(lo - w, float(bounds[0])), min(hi + w, float(bounds[1]))
    return (a, b) if a < b else (lo, hi)


def extrapolation_mask(values: np.ndarray, lo: float | None, hi: float | None) -> np.ndarray:
    """True where a value lies outside [lo, hi] (NaN is not flagged; a bound of None is
    open on that side)."""
    v = np.asarray(values, dtype=float)
    out = np.zeros(v.shape, dtype=bool)
    with np.errstate(invalid="ignore"):
        if lo is not None:
            out |= v < lo
        if hi is not None:
            out |= v > hi
    return out


def beyond_turning_mask(values: np.ndarray, dom: Domain) -> np.ndarray:
    """True where a value lies on the far side of the turning point from most data."""
    v = np.asarray(values, dtype=float)
    if dom.turning_point is None:
        return np.zeros(v.shape, dtype=bool)
    with np.errstate(invalid="ignore"):
        return (v - dom.turning_point) * dom.data_side < 0


def compare_broken_stick(x: np.ndarray, y: np.ndarray) -> dict | None:
    """Two-segment versus single-line comparison, or None when unavailable.

    Calls ``refit.models.segmented.fit_broken_stick(x, y)`` and returns its result as a
    dict (fields such as breakpoint, its uncertainty and whether the segmented fit is
    clearly better, as that function defines them).
    """
    try:
        from refit.models.segmented import fit_broken_stick
    except ImportError:
        return None
    res = fit_broken_stick(np.asarray(x, float), np.asarray(y, float))
    if isinstance(res, dict):
        return dict(res)
    from dataclasses import asdict, is_dataclass

    return asdict(res) if is_dataclass(res) else {"result": res}


def broken_stick_caution(bs: dict, x_name: str) -> str | None:
    """Plain-language caution when the segmented fit is clearly better, else None."""
    better = next((bs[k] for k in ("segmented_better", "clearly_better", "better")
                   if k in bs), None)
    if not better:
        return None
    bp = bs.get("breakpoint")
    return (f"a two-segment line fits clearly better than one line, with a break at "
            f"{x_name} = {bp:.6g}: beyond a break where the response flattens the feature "
            "no longer tells climate apart")
