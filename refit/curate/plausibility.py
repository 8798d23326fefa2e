"""Plausibility rules of a calibration row: values that are legal alone but not together.

Each rule is a small vectorised function of the checked frame; :func:`plausibility_problems`
runs them all (from :func:`refit.curate.checks.check_frame`). Each rule states its source (or
says *common practice* / *from memory*) and why it is a warning or an error:

=========================  ========  ==========================================================
rule                       severity  what and why
=========================  ========  ==========================================================
``bk-too-shallow``         error     Bk top shallower than :data:`BK_MIN_DEPTH_CM` (2 cm). Common
                                     practice: a calcic horizon lies under at least a thin A
                                     horizon; the usual cause is a depth in metres (0.85 for
                                     85 cm). An error by choice: MAP barely depends on depth
                                     there, so the consistency test cannot see the slip, and a
                                     truncated (eroded) profile, which can expose a Bk, is no
                                     calibration soil anyway; the row goes to quarantine.
``bk-in-hyperarid-climate`` warning  a Bk with MAP below :data:`HYPERARID_MAP_MM` (100 mm).
                                     Hyperarid lands (aridity index below 0.05; UNEP 1992,
                                     World Atlas of Desertification) mostly receive under about
                                     100 mm (from memory); their soils hold gypsum and salts
                                     more often than a Bk. A warning: such soils exist.
``map-below-bk-minimum``   error     a Bk with MAP below :data:`BK_MIN_MAP_MM` (50 mm). From
                                     memory: no soil with a described Bk in the compilations
                                     behind the depth-to-Bk equations (e.g. Retallack 2005,
                                     Geology 33, 333-336) is that dry. An error by choice: with
                                     a Bk such a MAP is nearly always a unit slip (inches or cm
                                     typed as mm), and a calibration row with a wrong MAP
                                     corrupts every fit; the row goes to quarantine, not lost.
``horizon-below-profile``  error     a Bk or By top deeper than ``profile_depth_cm`` (the
                                     described depth of the profile). By definition: a horizon
                                     cannot begin below the bottom of the described profile.
=========================  ========  ==========================================================

``profile_depth_cm`` is recognised in incoming tables (``Profile depth (in)`` etc.) and kept
as an extra column; it is not part of the schema, so existing stores keep their bytes.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from refit.curate.problems import Problems, fmt_values

#: Shallowest plausible top of a Bk horizon [cm] (common practice; see the module table).
BK_MIN_DEPTH_CM = 2.0
#: Below this MAP a Bk warns as a hyperarid soil [mm] (UNEP 1992; value from memory).
HYPERARID_MAP_MM = 100.0
#: Below this MAP a Bk is an error [mm] (from memory; see the module table).
BK_MIN_MAP_MM = 50.0
#: The optional column with the described depth of the profile [cm].
PROFILE_DEPTH = "profile_depth_cm"


def _num(work: pd.DataFrame, name: str) -> pd.Series:
    if name not in work.columns:
        return pd.Series(np.nan, index=work.index, dtype="float64")
    return pd.to_numeric(work[name], errors="coerce").astype("float64")


def bk_too_shallow(work: pd.DataFrame) -> np.ndarray:
    """Positions of rows whose Bk top is shallower than :data:`BK_MIN_DEPTH_CM`."""
    bk = _num(work, "bk_depth_cm")
    return np.flatnonzero(((bk >= 0) & (bk < BK_MIN_DEPTH_CM)).to_numpy())


def bk_in_hyperarid(work: pd.DataFrame) -> np.ndarray:
    """Positions of rows with a Bk and ``BK_MIN_MAP_MM <= MAP < HYPERARID_MAP_MM``."""
    bk, mapp = _num(work, "bk_depth_cm"), _num(work, "map_mm")
    return np.flatnonzero((bk.notna() & (mapp >= BK_MIN_MAP_MM)
                           & (mapp < HYPERARID_MAP_MM)).to_numpy())


def map_below_bk_minimum(work: pd.DataFrame) -> np.ndarray:
    """Positions of rows with a Bk and ``0 <= MAP < BK_MIN_MAP_MM``."""
    bk, mapp = _num(work, "bk_depth_cm"), _num(work, "map_mm")
    return np.flatnonzero((bk.notna() & (mapp >= 0) & (mapp < BK_MIN_MAP_MM)).to_numpy())


def horizon_below_profile(work: pd.DataFrame, column: str) -> np.ndarray:
    """Positions of rows whose ``column`` (a horizon top) lies below ``profile_depth_cm``."""
    top, bottom = _num(work, column), _num(work, PROFILE_DEPTH)
    return np.flatnonzero((top > bottom).to_numpy())


def plausibility_problems(work: pd.DataFrame, probs: Problems) -> None:
    """Run every plausibility rule of the module table on a checked frame."""
    bk, mapp = _num(work, "bk_depth_cm"), _num(work, "map_mm")
    pos = bk_too_shallow(work)
    probs.add("error", "bk-too-shallow", pos, "bk_depth_cm", fmt_values(bk.iloc[pos]),
              f"the Bk horizon starts less than {BK_MIN_DEPTH_CM:g} cm below the surface; "
              "a depth in metres (0.85 for 85 cm) or a misplaced decimal point is the usual "
              "cause. Check the value and its unit (e.g. 'Depth to Bk (m)').")
    pos = bk_in_hyperarid(work)
    probs.add("warning", "bk-in-hyperarid-climate", pos, "map_mm",
              fmt_values(mapp.iloc[pos]),
              f"a Bk horizon with MAP below {HYPERARID_MAP_MM:g} mm, a hyperarid climate "
              "where gypsum and salts are more usual than carbonate (UNEP 1992). Check MAP "
              "and its unit (inches or cm typed as mm).")
    pos = map_below_bk_minimum(work)
    probs.add("error", "map-below-bk-minimum", pos, "map_mm", fmt_values(mapp.iloc[pos]),
              f"a Bk horizon with MAP below {BK_MIN_MAP_MM:g} mm, drier than any soil with "
              "a described Bk in the published compilations (from memory). The usual cause "
              "is MAP in inches or cm typed as mm: fix the value or give the column's unit "
              "(e.g. 'MAP (in)').")
    for column in ("bk_depth_cm", "by_depth_cm"):
        pos = horizon_below_profile(work, column)
        top, bottom = _num(work, column), _num(work, PROFILE_DEPTH)
        probs.add("error", "horizon-below-profile", pos, column, fmt_values(top.iloc[pos]),
                  f"{column} " + fmt_values(top.iloc[pos]) + " cm is deeper than the "
                  "described profile (profile_depth_cm " + fmt_values(bottom.iloc[pos])
                  + " cm); a horizon cannot begin below the bottom of the profile. Check "
                  "both depths and their units.")


__all__ = ["plausibility_problems", "bk_too_shallow", "bk_in_hyperarid",
           "map_below_bk_minimum", "horizon_below_profile", "BK_MIN_DEPTH_CM",
           "HYPERARID_MAP_MM", "BK_MIN_MAP_MM", "PROFILE_DEPTH"]
