"""How much random k-fold flatters a pooled compilation: measured on the recipe's data.

Calibration compilations pool sources (surveys, regions, authors), each with its own
offset. Random k-fold puts soils of every source in every training fold, so it scores a
fit on soils whose source it has already seen; a fossil's source is never seen. When a
recipe names no ``[validation] groups``, validates with an ungrouped scheme (``kfold``
or ``loo``), and the data have a ``source`` column with several sources,
:func:`source_flattery` measures the difference on this subset: a straight OLS line on
the recipe's predictors (analytic interval) cross-validated by group k-fold by source and
by random k-fold, with the same folds, repeats and seed, and returns the warning with the
two ratios. ``refit fit`` prints it and the run folder keeps it.

Reference: Roberts, D. R. et al. (2017). Cross-validation strategies for data with
temporal, spatial, hierarchical, or phylogenetic structure. Ecography 40:913-929.
"""

from __future__ import annotations

from refit.errors import RefitError

SOURCE_COLUMN = "source"


def _applies(frame, recipe) -> int:
    """The number of sources when the check applies, else 0."""
    from refit.select.schemes import GROUPED

    if recipe.groups is not None or recipe.scheme in GROUPED:
        return 0
    if SOURCE_COLUMN not in frame.columns:
        return 0
    n = int(frame[SOURCE_COLUMN].dropna().astype(str).nunique())
    return n if n >= 2 else 0


def source_flattery(frame, recipe) -> dict | None:
    """The warning for a recipe without groups on data with a ``source`` column.

    Parameters
    ----------
    frame : pandas.DataFrame
        The recipe's subset.
    recipe : refit.select.recipe.Recipe

    Returns
    -------
    dict or None
        None when the check does not apply (the recipe names groups or a grouped scheme,
        no ``source`` column, or one source). Else ``column``, ``n_sources``, ``folds``,
        ``repeats``, ``seed``, ``candidate``, ``group_kfold`` and ``random_kfold`` (each
        ``rmsep``, ``interval_score``, ``coverage`` [response units, fraction]),
        ``rmsep_ratio`` and ``score_ratio`` (group k-fold / random k-fold) and
        ``message``; or ``message`` alone with ``error`` when it could not be measured.
    """
    from refit.validate.crossval import Candidate, Scheme, cross_validate

    n_sources = _applies(frame, recipe)
    if not n_sources:
        return None
    data = frame[frame[SOURCE_COLUMN].notna()].reset_index(drop=True)
    folds = min(recipe.folds, n_sources)
    cand = Candidate(response=recipe.response, predictors=tuple(recipe.predictors))
    out = {"column": SOURCE_COLUMN, "n_sources": n_sources, "folds": folds,
           "repeats": recipe.repeats, "seed": recipe.seed, "candidate": cand.label}
    head = (f"the data have a {SOURCE_COLUMN!r} column ({n_sources} sources) but the recipe "
            "names no [validation] groups: random k-fold flatters pooled compilations (each "
            "fold is scored on soils whose source it was trained on; a fossil's source is "
            "never seen)")
    try:
        res = {}
        for key, name in (("group_kfold", "group-kfold"), ("random_kfold", "kfold")):
            scheme = Scheme(name=name, folds=folds, repeats=recipe.repeats, seed=recipe.seed,
                            groups=SOURCE_COLUMN if name == "group-kfold" else None)
            m = cross_validate(data, cand, scheme, level=recipe.level, seed=recipe.seed).metrics
            res[key] = {k: m[k] for k in ("rmsep", "interval_score", "coverage")}
    except RefitError as exc:
        return {**out, "error": str(exc),
                "message": f"{head}; the difference could not be measured here ({exc}). "
                           f"Add groups = {SOURCE_COLUMN!r} to [validation]"}
    g, k = res["group_kfold"], res["random_kfold"]
    out.update(res, rmsep_ratio=g["rmsep"] / k["rmsep"],
               score_ratio=g["interval_score"] / k["interval_score"])
    out["message"] = (
        f"{head}. Measured on this subset with a straight OLS line ({folds} folds x "
        f"{recipe.repeats} repeat(s), seed {recipe.seed}): RMSEP under group k-fold by "
        f"{SOURCE_COLUMN} is {out['rmsep_ratio']:.2f}x random k-fold's ({g['rmsep']:.4g} vs "
        f"{k['rmsep']:.4g}), interval score {out['score_ratio']:.2f}x ({g['interval_score']:.4g}"
        f" vs {k['interval_score']:.4g}), coverage {100 * g['coverage']:.1f}% vs "
        f"{100 * k['coverage']:.1f}%. Add groups = \"{SOURCE_COLUMN}\" to [validation] to "
        "judge fits on held-out sources")
    return out
