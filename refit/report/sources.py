"""The report's per-source section: how the chosen fit does source by source.

A fossil soil always comes from a source (survey, region, author) the calibration never
saw, and compilations pool sources with their own offsets. This module turns a reloaded
run (:class:`refit.report.inputs.ReportInputs`) into the numbers and words of that
section: the chosen fit's residuals by source, the out-of-fold coverage of each held-out
source, and the between-source spread: the chosen fit's own variance components when it
is a mixed fit, else a random-intercept model of its residuals (both by
:func:`refit.models.mixed.fit_mixed`, the one mixed-model path). No drawing details, no
HTML.
"""

from __future__ import annotations

import numpy as np

from refit.report import diagnostics as dg

#: the column used when the recipe names no groups
DEFAULT_GROUPS = "source"
#: shown for a record without a value in the group column
NO_GROUP = "(no value)"


def group_column(recipe_groups, columns) -> tuple[str | None, str]:
    """The column that names each record's source, and a note on how it was chosen.

    Parameters
    ----------
    recipe_groups : str or None
        The recipe's ``[validation] groups``.
    columns : iterable of str
        Columns of the subset.

    Returns
    -------
    (column or None, note)
        The recipe's groups when it names them; else ``source`` when the data have it
        (the note says so); else None with the reason the section is absent.
    """
    cols = set(columns)
    if recipe_groups:
        if recipe_groups in cols:
            return recipe_groups, ""
        return None, (f"the recipe groups by {recipe_groups!r}, but the subset has no such "
                      "column")
    if DEFAULT_GROUPS in cols:
        return DEFAULT_GROUPS, (f"The recipe names no groups; the data's "
                                f"{DEFAULT_GROUPS!r} column is used.")
    return None, (f"the recipe names no groups ([validation] groups) and the data have no "
                  f"{DEFAULT_GROUPS!r} column, so there is no source to group by")


def group_labels(frame, column: str) -> np.ndarray:
    """The group of each record as text (``(no value)`` where it is missing)."""
    g = frame[column]
    return np.where(g.isna().to_numpy(), NO_GROUP, g.astype(str).to_numpy()).astype(object)


def residuals_by_group(residuals, groups):
    """Residuals summarised per group, sorted by median residual (then by name).

    Returns
    -------
    pandas.DataFrame
        ``group``, ``n``, ``median``, ``mean`` [unit of the residuals], one row per group.
    """
    import pandas as pd

    d = pd.DataFrame({"group": np.asarray(groups, dtype=object),
                      "residual": np.asarray(residuals, dtype=float)})
    t = d.groupby("group", sort=True)["residual"].agg(n="size", median="median", mean="mean")
    return t.reset_index().sort_values(["median", "group"], kind="stable") \
        .reset_index(drop=True)


def scored_predictions(oof, scheme: str):
    """The out-of-fold rows of ``scheme`` that carry an interval, as the leaderboard scores
    them (finite observed and estimate, both limits present)."""
    rows = oof[oof["scheme"] == scheme]
    ok = (np.isfinite(rows["observed"].to_numpy(float))
          & np.isfinite(rows["estimate"].to_numpy(float))
          & rows["lower"].notna().to_numpy() & rows["upper"].notna().to_numpy())
    return rows[ok]


def coverage_by_group(oof, groups, scheme: str):
    """Out-of-fold coverage per group, pooled over repeats.

    Parameters
    ----------
    oof : pandas.DataFrame
        The run's out-of-fold predictions of one candidate (``scheme``, ``row``,
        ``observed``, ``estimate``, ``lower``, ``upper``).
    groups : array_like
        The group of each record of the subset, by ``row`` (position in the subset).
    scheme : str
        The scheme whose predictions are used (the recipe's).

    Returns
    -------
    pandas.DataFrame
        ``group``, ``n_soils`` (distinct records predicted), ``n_predictions`` (over all
        repeats), ``covered`` and ``coverage`` (share of predictions whose observed value
        lies in [lower, upper]).
    """
    import pandas as pd

    rows = scored_predictions(oof, scheme)
    g = np.asarray(groups, dtype=object)[rows["row"].to_numpy(int)]
    obs = rows["observed"].to_numpy(float)
    inside = (rows["lower"].to_numpy(float) <= obs) & (obs <= rows["upper"].to_numpy(float))
    d = pd.DataFrame({"group": g, "row": rows["row"].to_numpy(int), "inside": inside})
    t = d.groupby("group", sort=True).agg(n_soils=("row", "nunique"),
                                          n_predictions=("inside", "size"),
                                          covered=("inside", "sum"))
    t["coverage"] = t["covered"] / t["n_predictions"]
    return t.reset_index()


def spread(fit, residuals, groups) -> dict:
    """The between- and within-source spread the section states.

    A mixed fit states its own variance components (its ``details``, from
    :func:`refit.models.mixed.fit_mixed`): they are what its interval for a new source
    uses. Any other fit: a random-intercept model of its residuals by group
    (:func:`refit.report.diagnostics.random_intercept`, the same estimator).
    """
    if getattr(fit, "estimator", None) == "mixed":
        d = fit.result.details
        return {**dg.components(d), "n_groups": int(d.get("n_groups", len(set(groups)))),
                "n": int(np.asarray(residuals).size), "problem": None, "of": "fit"}
    return dg.random_intercept(residuals, np.where(groups == NO_GROUP, None, groups))


def spread_sentence(ri: dict, column: str, unit: str) -> str:
    """The between-source SD and ICC in one or two sentences (of the residuals, or of
    the chosen mixed fit itself when ``ri['of'] == 'fit'``)."""
    from refit.report.context import num

    u = f" {unit}" if unit else ""
    if ri["problem"]:
        return f"The between-source spread is not estimated: {ri['problem']}."
    if ri.get("of") == "fit":
        how = (f"the chosen fit itself, a random-intercept model (REML, statsmodels "
               f"MixedLM, {ri['n_groups']} groups by {column}, {ri['n']} soils)")
    else:
        how = (f"a random-intercept model of the residuals (REML, statsmodels MixedLM, "
               f"{ri['n_groups']} groups by {column}, {ri['n']} soils)")
    if ri["boundary"]:
        why = (" put it on the boundary (zero)" if ri["converged"] else
               " did not converge, and the likelihood gives no evidence for it")
        text = (f"No between-source variance detected: {how}{why}; the within-source SD "
                f"is {num(ri['within_sd'], 3)}{u}.")
        if ri.get("of") == "fit":
            text += (" The fit fell back to pooled least squares, so its interval is the "
                     "pooled one.")
        return text
    text = (f"Between-source SD {num(ri['between_sd'], 3)}{u}, within-source SD "
            f"{num(ri['within_sd'], 3)}{u}, intraclass correlation (ICC) "
            f"{num(ri['icc'], 2)}, from {how}. {100 * ri['icc']:.0f}% of the residual "
            "variance is an offset shared by the soils of one source: a fossil soil from "
            "a new source carries such an offset too")
    if ri.get("of") == "fit":
        return text + (", and this fit's interval for a new source includes it (the "
                       "residuals drawn are observed minus the fixed-effects line).")
    return text + (", which an interval built as if soils were independent leaves out.")


def _groups_by_row(oof, frame, groups):
    """Groups indexed by the out-of-fold ``row``; when a row's ``profile_id`` does not
    match the subset's at that position, the rows are matched by ``profile_id``."""
    if "profile_id" not in oof or "profile_id" not in frame or oof.empty:
        return oof
    rows = oof["row"].to_numpy(int)
    ids = frame["profile_id"].astype(str).to_numpy()
    inside = (rows >= 0) & (rows < len(ids))
    if inside.all() and (ids[rows] == oof["profile_id"].astype(str).to_numpy()).all():
        return oof
    where = {pid: i for i, pid in enumerate(ids)}
    oof = oof.copy()
    oof["row"] = [where.get(str(p), -1) for p in oof["profile_id"]]
    return oof[oof["row"] >= 0]


def section(inp) -> dict:
    """Everything the per-source section shows, from a reloaded run.

    Returns
    -------
    dict
        ``absent`` (the reason, when there is no group column) or: ``column``, ``note``,
        ``figure`` (matplotlib Figure), ``caption``, ``spread`` (the between-source SD
        and ICC sentence), ``rows`` (the table, in the figure's order), ``below`` (the
        sources under nominal), ``level``, ``scheme``, ``random_intercept`` (numbers).
    """
    from refit.report import figures as fg
    from refit.report.assemble import unit_of
    from refit.report.context import num, pct

    frame = inp.subset.frame.reset_index(drop=True)
    column, note = group_column(inp.recipe.groups, frame.columns)
    if column is None:
        return {"absent": f"No per-source panel: {note}."}
    fit = inp.fit
    resid = np.asarray(fit.result.residuals, dtype=float)
    if resid.size != len(frame):
        return {"absent": f"No per-source panel: the fit used {resid.size} of the "
                          f"subset's {len(frame)} records, so residuals cannot be matched "
                          "to their sources."}
    groups = group_labels(frame, column)
    scheme = (inp.board_json.get("scheme") or {}).get("name") or inp.recipe.scheme
    level = float(inp.record["interval"]["level"])
    table = residuals_by_group(resid, groups).merge(
        coverage_by_group(_groups_by_row(inp.oof, frame, groups), groups, scheme),
        on="group", how="left")
    ri = spread(fit, resid, groups)
    from refit.curate.schema import notation

    symbol = notation(fit.y_name, "")
    unit = unit_of(inp.record, fit.y_name)
    y_label = (f"ln {symbol} residual" if fit.form.log_response
               else f"{notation(fit.y_name, unit).replace(' [', ' residual [', 1)}"
               if unit else f"{symbol} residual")
    names = table["group"].tolist()
    by = {g: resid[groups == g] for g in names}
    fig = fg.by_source(names, [by[g] for g in names], table["n"].tolist(),
                       table["coverage"].to_numpy(float), level=level, y_label=y_label,
                       column=column, scheme=scheme)
    below = [g for g, c in zip(names, table["coverage"]) if c == c and c < level]
    rows = [[g, str(int(r.n)), num(r.median, 3), num(r.mean, 3), pct(r.coverage),
             "" if r.n_predictions != r.n_predictions else str(int(r.n_predictions)),
             "below nominal" if g in below else ""]
            for g, r in zip(names, table.itertuples(index=False))]
    return {"column": column, "note": note, "figure": fig, "level": level, "scheme": scheme,
            "caption": _caption(column, scheme, level, len(names), below,
                                held_out=_held_out(inp, column, scheme)),
            "spread": spread_sentence(ri, column, "" if fit.form.log_response else unit),
            "random_intercept": ri, "rows": rows, "below": below,
            "header": [column, "soils", "median residual", "mean residual",
                       "out-of-fold coverage", "predictions (all repeats)", ""]}


def _held_out(inp, column: str, scheme: str) -> bool:
    from refit.select.schemes import NEEDS_GROUP_COLUMN

    return scheme in NEEDS_GROUP_COLUMN and inp.recipe.groups == column


def _caption(column, scheme, level, k, below, *, held_out: bool) -> str:
    from refit.report import figures as fg

    how = (f"each {column} held out whole by {scheme}" if held_out else
           f"under {scheme}, which does not hold a {column} out whole, so this flatters "
           "what a new source would see")
    text = (f"Top: residuals of the chosen fit on the whole subset, one column per "
            f"{column} ({k}), sorted by median residual, with each {column}'s number of "
            f"soils (n); a {column} with fewer than {fg.MIN_BOX} soils is shown as points "
            f"only. A column whose box sits off zero is a {column} with its own "
            f"offset. Bottom: out-of-fold coverage of the chosen candidate for the soils "
            f"of each {column} ({how}; pooled over repeats) against the nominal "
            f"{100 * level:.0f}% (dashed).")
    if below:
        text += (f" {len(below)} of {k} fall below nominal (vermilion triangles): "
                 f"{', '.join(below)}.")
    else:
        text += f" No {column} falls below nominal."
    return text + (f" With few soils a {column}'s coverage moves in large steps (one soil "
                   "of 20 is 5 points): read single columns with care.")
