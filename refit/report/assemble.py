"""From a reloaded run (:class:`refit.report.inputs.ReportInputs`) to the report's
figures and the numbers its tables show. No drawing details here, no HTML."""

from __future__ import annotations

import numpy as np

from refit.report import diagnostics as dg
from refit.report import figures as fg

#: the calibration figure's axis runs this fraction of the data range beyond each end,
#: so the shaded extrapolation zone is visible
MARGIN = 0.1
GRID = 200


def _grid(lo: float, hi: float, *, floor: float | None = 0.0) -> np.ndarray:
    pad = MARGIN * (hi - lo or 1.0)
    a = lo - pad
    if floor is not None and lo >= floor:
        a = max(a, floor)
    return np.linspace(a, hi + pad, GRID)


def unit_of(record: dict, name: str) -> str:
    if record.get("response", {}).get("name") == name:
        return record["response"].get("unit") or ""
    for p in record.get("predictors", []):
        if p.get("name") == name:
            return p.get("unit") or ""
    return ""


def axis_label(record: dict, name: str) -> str:
    """``Depth to Bk [cm]``, ``MAP [mm]``: the column in the schema's notation, with the
    unit the file records (:func:`refit.curate.schema.notation`)."""
    from refit.curate.schema import notation

    return notation(name, unit_of(record, name))


def _turning(fit):
    dom = fit.domain
    if dom.turning_point is None:
        return None
    return dom.turning_point, dom.turning_point_kind, dom.x_name


def calibration_figure(inp):
    """The calibration scatter with bands (and the inversion for a forward fit), or None
    when the fit has several predictors (no single scatter shows it)."""
    fit, rec = inp.fit, inp.record
    if len(fit.x_names) != 1:
        return None
    level = float(rec["interval"]["level"])
    xn, yn = fit.x_names[0], fit.y_name
    lo, hi = fit.ranges[xn]
    x = _grid(lo, hi)
    bands = dg.regression_bands(fit, x, level)
    points = (fit.x[:, 0], _response_values(fit))
    method = rec["interval"]["method"]
    kwargs = dict(x_label=axis_label(rec, xn), y_label=axis_label(rec, yn), domain=(lo, hi),
                  turning=_turning(fit), level=level)
    if fit.direction == "inverse":
        if method != "analytic":
            p = fit.predict(x, level=level, interval=method, seed=_seed(inp))
            bands = {**bands, "pred_lower": p["lower"].to_numpy(),
                     "pred_upper": p["upper"].to_numpy(), "method": method}
        return fg.calibration(points, bands, title=f"Calibration fit ({inp.candidate})",
                              **kwargs)
    feature = fit.predictors[0]
    flo, fhi = fit.ranges[feature]
    fx = _grid(flo, fhi)
    p = fit.predict(fx, level=level, interval="analytic")
    inversion = {"x": fx, "estimate": p["estimate"].to_numpy(),
                 "lower": p["lower"].to_numpy(), "upper": p["upper"].to_numpy()}
    return fg.calibration(points, bands, title=f"Forward fit ({inp.candidate})",
                          inversion=inversion, inversion_domain=(flo, fhi),
                          inversion_labels=(axis_label(rec, feature),
                                            axis_label(rec, fit.response)), **kwargs)


def _response_values(fit) -> np.ndarray:
    y = np.asarray(fit.y_model, dtype=float)
    return np.exp(y) if fit.form.log_response else y


def _seed(inp) -> int:
    return int(inp.run.get("seed") or 0)


def residual_figure(inp, infl):
    qq = dg.normal_qq(infl["studentized"])
    log = inp.fit.form.log_response
    return fg.residuals(infl["fitted"], infl["residuals"], qq,
                        y_label=("ln " if log else "") + axis_label(inp.record, inp.fit.y_name),
                        unit="" if log else unit_of(inp.record, inp.fit.y_name),
                        trend=dg.residual_trend(infl["fitted"], infl["residuals"]))


def influence_figure(inp, infl):
    labels = inp.subset.frame["profile_id"].astype(str).to_numpy()
    hi = dg.influential(infl["cooks"], infl["leverage"], infl["p"])
    return fg.influence(infl["leverage"], infl["cooks"], labels, hi, p=infl["p"]), \
        [labels[i] for i in hi]


def oof_figure(inp):
    scheme = inp.board_json.get("scheme", {}).get("name") or inp.oof["scheme"].iloc[0]
    rows = inp.oof[inp.oof["scheme"] == scheme]
    row = inp.board[inp.board["candidate"] == inp.candidate].iloc[0]
    unit = unit_of(inp.record, inp.fit.response)
    metrics = {"RMSEP   ": f"{row['rmsep']:.4g} {unit}", "bias    ": f"{row['bias']:+.4g} {unit}",
               "coverage": f"{100 * row['coverage']:.1f}%"}
    return fg.out_of_fold(rows["observed"], rows["estimate"],
                          label=axis_label(inp.record, inp.fit.response), scheme=scheme,
                          metrics=metrics)


def sites_figure(inp):
    import pandas as pd

    lon = pd.to_numeric(inp.records["longitude"], errors="coerce").to_numpy(dtype=float)
    lat = pd.to_numeric(inp.records["latitude"], errors="coerce").to_numpy(dtype=float)
    ok = np.isfinite(lon) & np.isfinite(lat)
    return fg.sites(lon[ok], lat[ok], inp.kept[ok], n_missing=int((~ok).sum()))


def coverage_figure(inp):
    b = inp.board
    has_k = "kfold_coverage" in b and b["kfold_coverage"].notna().any()
    return fg.coverage_width(
        b["rank"].to_numpy(), b["coverage"].to_numpy(float), b["mean_width"].to_numpy(float),
        b["kfold_coverage"].to_numpy(float) if has_k else None,
        b["kfold_mean_width"].to_numpy(float) if has_k else None,
        level=float(inp.board_json.get("level", 0.95)),
        tolerance=float(inp.board_json.get("coverage_tolerance", 0.05)),
        scheme=str(b["scheme"].iloc[0]), unit=unit_of(inp.record, inp.fit.response))


def make_figures(inp) -> tuple[list[dict], dict]:
    """Every figure of the report with its id, title and caption; and facts the text
    needs (the influential records)."""
    infl = dg.influence(inp.fit)
    out = []
    cal = calibration_figure(inp)
    if cal is not None:
        out.append({"id": "calibration", "title": "Calibration fit", "figure": cal,
                    "caption": _calibration_caption(inp)})
    bp = heteroscedasticity(inp, infl)
    out.append({"id": "residuals", "title": "Residuals", "figure": residual_figure(inp, infl),
                "caption": "Residuals of the fit on the whole subset against its fitted "
                           "values (left; the line is a LOWESS smooth, statsmodels, 2/3 of "
                           "the points per window) and their normal Q-Q plot (right; "
                           "internally studentized residuals). A funnel, a trend line that "
                           "bends away from zero or heavy tails say the intervals may be "
                           "wrong somewhere.",
                "after": bp["text"]})
    fig, flagged = influence_figure(inp, infl)
    out.append({"id": "influence", "title": "Influence", "figure": fig,
                "caption": "Leverage and Cook's distance of each record; records above "
                           f"Cook's D = {dg.COOKS_FACTOR:g}/n or leverage "
                           f"{dg.LEVERAGE_FACTOR:g}p/n are labelled by profile_id (at most "
                           f"{dg.MAX_LABELS}, largest first)."})
    out.append({"id": "out-of-fold", "title": "Out-of-fold predictions",
                "figure": oof_figure(inp),
                "caption": "Every out-of-fold prediction of the chosen candidate under the "
                           "recipe's scheme (all repeats), against the observed value; "
                           "points on the 1:1 line are perfect."})
    out.append({"id": "sites", "title": "Calibration sites", "figure": sites_figure(inp),
                "caption": "Every record of the dataset version by longitude and latitude "
                           "(no base map); filled: kept by the subset."})
    out.append({"id": "coverage-width", "title": "Coverage against width",
                "figure": coverage_figure(inp),
                "caption": "Each candidate's out-of-fold coverage and mean interval width "
                           "under the recipe's scheme (filled) and random k-fold (hollow), "
                           "joined by a line; labels are leaderboard ranks. Honest "
                           "candidates sit in the shaded band under the recipe's scheme; "
                           "random k-fold tends to flatter."})
    return out, {"influential": flagged, "heteroscedasticity": bp}


def _calibration_caption(inp) -> str:
    fit = inp.fit
    lvl = f"{100 * inp.record['interval']['level']:.0f}%"
    method = inp.record["interval"]["method"]
    text = (f"The calibration records and the fitted curve with its {lvl} confidence band "
            f"for the mean (dark) and {lvl} prediction band for a new soil (light, dashed"
            f"{'; ' + method if method != 'analytic' else ''}). Beyond the dotted lines "
            "(shaded) the equation extrapolates.")
    if fit.direction == "forward":
        text += (f" The forward fit models {fit.y_name} on {fit.response}; the right panel "
                 f"shows it inverted: the {fit.response} estimate and its classical-"
                 f"calibration interval for each value of {fit.y_name}.")
    if fit.domain.turning_point is not None:
        text += " The dash-dotted line marks the quadratic's turning point."
    return text


def heteroscedasticity(inp, infl) -> dict:
    """The Breusch-Pagan test of the chosen fit's residuals against its design: the
    numbers (:func:`refit.report.diagnostics.breusch_pagan`) and the sentence the report
    prints below the residual figure (``text``); ``changes`` is True when p < 0.05."""
    fit = inp.fit
    e = np.asarray(infl["residuals"], dtype=float)
    if fit.weights is not None:   # Pearson residuals: the weights' own variance removed
        e = e * np.sqrt(np.asarray(fit.weights, dtype=float))
    try:
        bp = dg.breusch_pagan(e, fit.form.design(fit.x))
    except (ValueError, np.linalg.LinAlgError) as exc:
        return {"changes": False, "text": f"Breusch-Pagan test not computed: {exc}."}
    return {**bp, "changes": bp["p"] < dg.BP_ALPHA,
            "text": bp_sentence(bp, fit.x_names)}


def bp_sentence(bp: dict, regressors) -> str:
    """The Breusch-Pagan result and what it means, in plain words."""
    what = " and ".join(regressors)
    stat = (f"Breusch-Pagan LM = {bp['lm']:.3g}, df {bp['df']}, {p_text(bp['p'])}; "
            f"Koenker's form, statsmodels het_breuschpagan, n = {bp['n']}")
    if bp["p"] < dg.BP_ALPHA:
        return (f"The residual spread changes with {what} ({stat}): an interval of "
                "constant width is too narrow where the data spread most and too wide "
                "elsewhere. The estimator 'wls-power' (a spread proportional to a power "
                "of the fitted value, in a recipe's estimators or refit.fit(..., "
                "estimator=\"wls-power\")), or 'wls' with weights of your own, lets the "
                "interval widen where the data do.")
    return (f"No evidence at the {100 * dg.BP_ALPHA:.0f}% level that the residual spread "
            f"changes with {what} ({stat}): an interval of constant width is consistent "
            "with these residuals.")


def p_text(p: float) -> str:
    """``p = 0.003``, ``p = 0.214``, or ``p < 0.001``."""
    return "p < 0.001" if p < 0.001 else f"p = {p:.1g}" if p < 0.01 else f"p = {p:.3f}"
