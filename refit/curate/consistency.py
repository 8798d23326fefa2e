"""Consistency of incoming soils with the store: suspect rows, unit slips, mixed units.

For each reference relationship of :data:`REFERENCES` the store supports (a declared
:class:`ReferencePair`: MAP on depth to the Bk horizon, MAP on CIA-K), a robust straight line
is fitted to the store on the spot (Huber's M estimator, tuning constant 1.345, scale = median absolute residual / 0.6745 updated at every
iteration, as statsmodels' ``RLM`` with ``HuberT`` and ``scale_est="mad"``; Huber 1981,
*Robust Statistics*). Each incoming row gets its **standardised leave-one-out predictive
residual**

    z = (y - yhat(x)) / (s * sqrt(1 + h(x))),   h(x) = x0' (X'X)^-1 x0,

the residual of a soil the fit has not seen, divided by its predictive SD (robust scale
``s``; ``h`` the leverage of the new soil in the store's design, from a QR factorisation).
With OLS in place of Huber this is exactly the externally studentised residual the soil
would have if appended to the store (Cook & Weisberg 1982, *Residuals and Influence in
Regression*, ch. 2; the tests compare it with statsmodels' ``OLSInfluence``).

- A row with ``|z|`` above its pair's threshold (:data:`SUSPECT_Z`, 3.5) is **suspect**; a
  row suspect by any pair is suspect, and its reasons list each pair that holds it. Common practice: 3.5 is
  the usual cut-off for robust z-scores (Iglewicz & Hoaglin 1993, *How to Detect and Handle
  Outliers*, from memory), wide enough that about 1 good soil in 2000 is held under a
  normal scatter. Where the value rescaled to another unit of its column gives
  ``|z| <= FITS_Z`` (2), the message says "this value fits if it is in inches".
- A **unit slip of a column** (the whole file in another unit than declared or assumed): the
  median ``|z|`` of the file's rows exceeds :data:`SLIP_MEDIAN_Z` while one other unit
  brings it under :data:`FITS_Z`; for columns outside the reference relationship, the
  file's median is more than :data:`SLIP_RATIO` (3) times off the store's and one unit
  factor brings it within 1.5 times. Said once per file, with the evidence; the admit is refused
  unless ``--unit COLUMN=UNIT`` confirms the unit.
- **Mixed units in a column**: at least :data:`MIXED_MIN_ROWS` rows and
  :data:`MIXED_MIN_SHARE` of the rows fit only in one other unit: refused with those rows.

The pairs, each with the source of its relationship and its threshold:

- **MAP on depth to Bk** (``map_mm`` on ``bk_depth_cm``): the carbonate horizon is deeper
  where more rain leaches it (Jenny 1941, *Factors of Soil Formation*; Retallack 2005,
  Geology 33:333, from memory); threshold |z| 3.5 (common practice, above).
- **MAP on CIA-K** (``map_mm`` on ``cia_k``): the B horizon is more weathered, CIA-K higher,
  where more rain falls (Sheldon, Retallack & Tanaka 2002, J. Geology 110:687, from memory);
  threshold |z| 3.5 (common practice, above). CIA-K is not a table column: it is computed
  from the oxides by :func:`refit.soil.indices.cia_k`, for the store and the incoming rows
  alike (:data:`DERIVED`). Only MAP can carry a unit slip here: CIA-K has no unit.

Stores with fewer than :data:`MIN_STORE_ROWS` soils holding both values of a pair support no
reference for it: that pair's test is skipped and the admit says so; the other pairs still run. Conversion factors come from pint
(:func:`refit.curate.units.affine`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from refit.curate import units as _units

#: Fewest store soils with both columns for a reference fit.
MIN_STORE_ROWS = 20
#: |z| beyond which an incoming row is suspect (common practice; see the module docstring).
SUSPECT_Z = 3.5


@dataclass(frozen=True)
class ReferencePair:
    """A reference relationship an incoming soil is checked against.

    Parameters
    ----------
    response, predictor : str
        Canonical names (the predictor may be a derived index, see :data:`DERIVED`).
    label : str
        How messages name the pair, e.g. ``"MAP on CIA-K"``.
    source : str
        Where the relationship comes from (a citation, "from memory", or "common practice").
    threshold : float
        ``|z|`` beyond which a row is suspect by this pair.
    """

    response: str
    predictor: str
    label: str
    source: str
    threshold: float = SUSPECT_Z

    @property
    def columns(self) -> tuple[str, ...]:
        """The table columns the pair reads (a derived predictor's inputs in its place)."""
        return (self.response, *DERIVED.get(self.predictor, ((self.predictor,), None))[0])


def _cia_k(frame: pd.DataFrame) -> np.ndarray:
    from refit.soil.indices import cia_k

    al, ca, na = (_numbers(frame, c) for c in ("al2o3_wt", "cao_wt", "na2o_wt"))
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.asarray(cia_k(al, ca, na), float)


#: Predictors that are not table columns: name -> (input columns, function of a frame).
DERIVED = {"cia_k": (("al2o3_wt", "cao_wt", "na2o_wt"), _cia_k)}

#: The declared reference pairs, in order (see the module docstring for their sources).
REFERENCES = (
    ReferencePair("map_mm", "bk_depth_cm", "MAP on depth to Bk",
                  "Jenny 1941; Retallack 2005, Geology 33:333 (from memory)"),
    ReferencePair("map_mm", "cia_k", "MAP on CIA-K",
                  "Sheldon, Retallack & Tanaka 2002, J. Geology 110:687 (from memory)"),
)
#: |z| at or below which a rescaled value "fits".
FITS_Z = 2.0
#: A column slip: the file's median |z| above this while one other unit fits.
SLIP_MEDIAN_Z = 2.5
#: A column slip without a reference: the medians differ by more than this factor (3, so
#: that a regional batch, drier or wetter than the store, is not taken for inches vs cm:
#: without a reference line only slips of 3x or more, e.g. mm vs cm, m vs cm, in vs mm,
#: are seen from the medians).
SLIP_RATIO = 3.0
#: Mixed units: at least this many rows and this share of the rows fit only in one unit.
MIXED_MIN_ROWS, MIXED_MIN_SHARE = 3, 0.2
#: Units tried for each canonical unit (pint names).
ALTERNATIVES = {"millimeter": ("centimeter", "inch", "meter"),
                "centimeter": ("millimeter", "meter", "inch", "foot")}
#: Columns whose file-level unit is compared with the store's.
SLIP_COLUMNS = ("map_mm", "mar_mm", "bk_depth_cm", "bk_thickness_cm", "by_depth_cm")
HUBER_C = 1.345
_MAD_NORMAL = 0.6744897501960817  # the 0.75 quantile of the standard normal


@dataclass
class Reference:
    """A straight line fitted to the store: ``y = b0 + b1 x`` with its robust scale."""

    response: str
    predictor: str
    coef: np.ndarray
    scale: float
    n: int
    r_inv: np.ndarray  # inverse of R of the QR of the centred, scaled design
    centre: float
    spread: float
    pair: ReferencePair | None = None

    @property
    def threshold(self) -> float:
        return self.pair.threshold if self.pair else SUSPECT_Z

    @property
    def label(self) -> str:
        return self.pair.label if self.pair else f"{self.response} on {self.predictor}"

    def z(self, x, y) -> np.ndarray:
        """Standardised leave-one-out predictive residuals of new soils (x, y)."""
        x, y = np.asarray(x, float), np.asarray(y, float)
        design = np.column_stack([np.ones_like(x), (x - self.centre) / self.spread])
        v = design @ self.r_inv
        h = np.einsum("ij,ij->i", v, v)
        fitted = self.coef[0] + self.coef[1] * x
        return (y - fitted) / (self.scale * np.sqrt(1.0 + h))

    def describe(self) -> str:
        from refit.curate.schema import fields, unit_notation

        unit = unit_notation(fields().get(self.response, {}).get("unit", ""))
        return (f"reference pair {self.label!r}: the store's robust line "
                f"{self.response} = {self.coef[0]:.4g} + "
                f"{self.coef[1]:.4g} x {self.predictor} (Huber, {self.n} soils, robust "
                f"SD {self.scale:.3g}{' ' + unit if unit else ''})")


def huber_line(x, y, *, robust: bool = True, c: float = HUBER_C, maxiter: int = 100,
               tol: float = 1e-10) -> tuple[np.ndarray, float, np.ndarray, float, float]:
    """A straight line by Huber's M-estimator (IRLS) or OLS, by QR on a scaled design.

    Returns
    -------
    coef : ndarray
        ``[b0, b1]`` in the original units.
    scale : float
        Robust scale (median absolute residual / 0.6745) or, with ``robust=False``, the
        OLS residual SD ``sqrt(SSR / (n - 2))``.
    r_inv : ndarray
        Inverse of the R factor of the centred, scaled design ``[1, (x - centre)/spread]``.
    centre, spread : float
    """
    x, y = np.asarray(x, float), np.asarray(y, float)
    centre, spread = float(np.mean(x)), float(np.std(x)) or 1.0
    design = np.column_stack([np.ones_like(x), (x - centre) / spread])
    w = np.ones_like(x)
    beta = np.zeros(2)
    scale = 1.0
    for _ in range(maxiter if robust else 1):
        sw = np.sqrt(w)
        q, r = np.linalg.qr(design * sw[:, None])
        new = np.linalg.solve(r, q.T @ (y * sw))
        resid = y - design @ new
        scale = float(np.median(np.abs(resid)) / _MAD_NORMAL) if robust else \
            float(np.sqrt(resid @ resid / (len(x) - 2)))
        done = np.max(np.abs(new - beta)) <= tol * (1 + np.max(np.abs(new)))
        beta = new
        if not robust or done or scale == 0:
            break
        u = np.abs(resid) / scale
        w = np.where(u <= c, 1.0, c / np.maximum(u, 1e-300))
    _, r = np.linalg.qr(design)
    coef = np.array([beta[0] - beta[1] * centre / spread, beta[1] / spread])
    return coef, scale, np.linalg.inv(r), centre, spread


def _numbers(frame: pd.DataFrame, name: str) -> np.ndarray:
    if name not in frame:
        return np.full(len(frame), np.nan)
    return pd.to_numeric(frame[name], errors="coerce").to_numpy(float)


def values(frame: pd.DataFrame, name: str) -> np.ndarray:
    """A column as floats (NaN where missing); a derived index (:data:`DERIVED`) is taken
    from its column where given and computed from its inputs elsewhere."""
    got = _numbers(frame, name)
    if name in DERIVED:
        got = np.where(np.isfinite(got), got, DERIVED[name][1](frame))
    return got


def soils_with_both(records: pd.DataFrame, response: str, predictor: str) -> int:
    """How many store soils hold both values of a pair."""
    return int((np.isfinite(values(records, response))
                & np.isfinite(values(records, predictor))).sum())


def reference_fit(records: pd.DataFrame, response: str | ReferencePair,
                  predictor: str | None = None, *, robust: bool = True) -> Reference | None:
    """The reference line of ``response`` on ``predictor`` (or of a :class:`ReferencePair`)
    in the store, or None when fewer than :data:`MIN_STORE_ROWS` soils hold both (or the
    predictor does not vary)."""
    pair = response if isinstance(response, ReferencePair) else None
    if pair is not None:
        response, predictor = pair.response, pair.predictor
    x, y = values(records, predictor), values(records, response)
    ok = np.isfinite(x) & np.isfinite(y)
    if ok.sum() < MIN_STORE_ROWS or np.ptp(x[ok]) == 0:
        return None
    coef, scale, r_inv, centre, spread = huber_line(x[ok], y[ok], robust=robust)
    if not scale > 0:
        return None
    return Reference(response, predictor, coef, scale, int(ok.sum()), r_inv, centre, spread,
                     pair)


def unit_factor(src: str, dst: str) -> float:
    """Multiplicative factor from unit ``src`` to ``dst`` (pint names), from pint."""
    reg = _units.ureg()
    return _units.affine(reg.parse_units(src), reg.parse_units(dst))[0]


def declared_unit(column: str, origins: dict) -> str:
    """The pint name of the unit a column's values were declared in (or assumed)."""
    canonical = _units._canonical_unit(column)
    unit_text = origins.get(column, (None, None))[1]
    if unit_text:
        unit = _units._pint_unit(unit_text, column)
        if unit is not None:
            return str(unit)
    return canonical


def alternatives(column: str, origins: dict) -> list[tuple[str, float]]:
    """(other unit, factor to apply to the canonical values) for a column's slips: the
    values as read were in the declared unit ``D``; had they been in ``U`` the canonical
    value is ``value * f(U -> canonical) / f(D -> canonical)``."""
    canonical = _units._canonical_unit(column)
    declared = declared_unit(column, origins)
    base = unit_factor(declared, canonical)
    return [(u, unit_factor(u, canonical) / base)
            for u in (canonical, *ALTERNATIVES.get(canonical, ())) if u != declared]


def unit_label(unit: str) -> str:
    """'inch' -> 'inches', 'millimeter' -> 'mm' (how the messages name a unit)."""
    return {"inch": "inches", "foot": "feet", "millimeter": "mm", "centimeter": "cm",
            "meter": "metres"}.get(unit, unit)


__all__ = ["Reference", "ReferencePair", "DERIVED", "values", "soils_with_both",
           "huber_line", "reference_fit", "unit_factor", "alternatives",
           "declared_unit", "REFERENCES", "MIN_STORE_ROWS", "SUSPECT_Z", "FITS_Z",
           "SLIP_MEDIAN_Z", "SLIP_RATIO", "MIXED_MIN_ROWS", "MIXED_MIN_SHARE"]
