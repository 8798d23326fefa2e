"""Several proxies of one paleosol combined (``refit apply --combine``), weighted by
predictive errors, with a test of whether the proxies agree.

The rule, per paleosol and climate variable (one file per feature, the first given):

1. **Each proxy's standard error** is the cross-validated one, never an in-sample figure
   alone: ``se_k = max(se_interval, cv.rmsep)``, where ``se_interval`` is the file's
   interval (with measurement error propagated) over ``2 z`` (z the normal quantile of
   its level) and ``cv.rmsep`` the file's own cross-validated root-mean-square error of
   prediction. A file whose only error figure is a published +- (an in-sample standard
   error of the regression) enters only when it also records ``cv.rmsep``; otherwise it
   is **left out**, and the combined row names it and why. A file without ``cv.rmsep``
   but with a predictive interval (analytic, conformal, ...) keeps its interval's SE.
2. **Combination**: the inverse-variance mean ``m = Σ e_k / se_k^2 / Σ 1 / se_k^2`` with
   ``se = (Σ 1 / se_k^2)^(-1/2)``.
3. **Consistency**: ``chi2 = Σ (e_k - m)^2 / se_k^2`` on K - 1 degrees of freedom (the
   usual homogeneity test of independent estimates, e.g. Cochran's Q; from memory);
   p < 0.05 flags ``proxies-disagree`` (common practice) with the numbers. When
   ``chi2 / (K - 1) > 1`` the combined SE is multiplied by ``sqrt(chi2 / (K - 1))`` (the
   Birge ratio, common practice), so disagreeing proxies never give an interval narrower
   than their scatter allows.
4. The interval is ``m ± z se`` (normal). The proxies' errors may be correlated (same
   soil, same calibration data), which makes the combined interval too narrow: every
   combined row is flagged ``proxies-may-be-correlated``. ``refit apply --posterior``
   gives the combined posterior of forward files, the better answer.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

FLAG_CORRELATED = "proxies-may-be-correlated"
FLAG_DISAGREE = "proxies-disagree"
FLAG_LEFT_OUT = "proxy-left-out"
#: p-value below which the proxies disagree (common practice)
DISAGREE_P = 0.05


def proxy_se(row, record: dict | None) -> tuple[float, str]:
    """Standard error of one proxy's estimate [climate unit] under the rule above, and
    how it was found ('' and NaN when the proxy is left out, with the reason instead).

    Returns
    -------
    tuple
        ``(se, how)``; ``se`` NaN when the proxy cannot enter (``how`` is then the reason).
    """
    from scipy import special

    rec = record or {}
    method = (rec.get("interval") or {}).get("method", "")
    rmsep = (rec.get("cv") or {}).get("rmsep")
    rmsep = float(rmsep) if isinstance(rmsep, (int, float)) and rmsep > 0 else math.nan
    lvl = row["level"]
    published = method == "published" or lvl is None or pd.isna(lvl)
    z = 1.0 if published else float(special.ndtri(0.5 + float(lvl) / 2))
    se_iv = (float(row["upper"]) - float(row["lower"])) / (2 * z)
    if published:
        if math.isnan(rmsep):
            return math.nan, (f"{row['function_id']}: left out, its only error figure is "
                              f"the published ± {se_iv:.4g} (in-sample) and it records no "
                              "cross-validated error")
        return max(se_iv, rmsep), f"{row['function_id']}: cv.rmsep {rmsep:.4g}"
    if not math.isnan(rmsep) and rmsep > se_iv:
        return rmsep, f"{row['function_id']}: cv.rmsep {rmsep:.4g} (> interval SE {se_iv:.4g})"
    return se_iv, f"{row['function_id']}: interval SE {se_iv:.4g}"


def consistency(est: np.ndarray, se: np.ndarray) -> tuple[float, float, float, float]:
    """Inverse-variance mean, its SE (Birge-inflated), chi2 and its p-value."""
    from scipy import stats

    w = 1.0 / se**2
    mean = float(np.sum(w * est) / w.sum())
    s = 1.0 / math.sqrt(w.sum())
    dof = len(est) - 1
    chi2 = float(np.sum(w * (est - mean) ** 2))
    p = float(stats.chi2.sf(chi2, dof))
    return mean, s * math.sqrt(max(1.0, chi2 / dof)), chi2, p


def combine_proxies(results: pd.DataFrame, level: float, records: dict | None = None
                    ) -> pd.DataFrame:
    """Combined estimate per paleosol and response across proxies (rule in the module
    docstring).

    Parameters
    ----------
    results : DataFrame
        Per-file results (:data:`refit.apply.estimates.RESULT_COLUMNS`).
    level : float
        Level of the combined interval.
    records : dict, optional
        ``coefficient_file`` label -> the file's record (for ``cv.rmsep`` and the interval
        method); without it no cross-validated error is known and published files are
        left out.

    Returns
    -------
    DataFrame
        Rows shaped like ``results`` with ``function_id`` ``combined`` (a ``problem`` when
        fewer than two proxies can enter).
    """
    from scipy import special

    records = records or {}
    ok = results[np.isfinite(results["lower"].astype(float))
                 & np.isfinite(results["upper"].astype(float)) & results["problem"].eq("")
                 & results["status"].ne("combined")]
    rows = []
    zq = float(special.ndtri(0.5 + level / 2))
    for (pid, resp), grp in ok.groupby(["paleosol_id", "response"], sort=False):
        grp = grp.drop_duplicates("predictors_used")
        if grp["predictors_used"].nunique() < 2:
            continue
        ses, hows = zip(*(proxy_se(r, records.get(r["coefficient_file"]))
                          for _, r in grp.iterrows()))
        se = np.array(ses)
        keep = np.isfinite(se)
        rows.append(_row(results.columns, grp, keep, se, list(hows), pid, resp, level, zq))
    return pd.DataFrame(rows, columns=results.columns)


def _row(columns, grp, keep, se, hows, pid, resp, level, zq) -> dict:
    first = grp.iloc[0]
    r = {**{c: None for c in columns}, "version": "", "status": "combined",
         "candidate": "", "paleosol_id": pid, "row": first["row"],
         "function_id": "combined", "response": resp, "unit": first["unit"],
         "coefficient_file": " + ".join(grp["coefficient_file"][keep]),
         "predictors_used": " + ".join(grp["predictors_used"][keep]), "level": level,
         "interval": "inverse-variance combination of cross-validated errors (normal)",
         "propagation": "none", "problem": "", "estimate": math.nan, "lower": math.nan,
         "upper": math.nan}
    left = [h for h, k in zip(hows, keep) if not k]
    used = [h for h, k in zip(hows, keep) if k]
    flags = [FLAG_CORRELATED] + ([FLAG_LEFT_OUT] if left else [])
    details = [("the proxies' errors may be correlated (same soil, same calibration "
                "data); the combined interval is then too narrow"), *left]
    if keep.sum() < 2:
        r.update(flags=";".join(flags), flag_details="; ".join(details),
                 problem="fewer than two proxies with a cross-validated (predictive) error: "
                         "nothing combined (" + "; ".join(left) + ")")
        return r
    est = grp["estimate"].to_numpy(float)[keep]
    mean, s, chi2, p = consistency(est, se[keep])
    if p < DISAGREE_P:
        flags.append(FLAG_DISAGREE)
    details.append(f"proxy consistency: chi2 = {chi2:.3g} on {int(keep.sum()) - 1} df, "
                   f"p = {p:.3g}; SEs used: {', '.join(used)}"
                   + (f"; interval widened by sqrt(chi2/df) = "
                      f"{math.sqrt(chi2 / (keep.sum() - 1)):.3g}"
                      if chi2 > keep.sum() - 1 else ""))
    r.update(estimate=mean, lower=mean - zq * s, upper=mean + zq * s,
             flags=";".join(flags), flag_details="; ".join(details))
    return r
