"""The defaults a recipe gets for what it does not say, and why.

A fossil soil always comes from a source (survey, region, author) the calibration never
saw. When a recipe names a ``[validation] groups`` column it says the soils come in such
sources, so the defaults judge every candidate the way a fossil will use it:

``scheme``
    omitted with ``groups``: ``group-kfold`` (whole sources held out, so out-of-fold
    error and coverage are those of soils from unseen sources); omitted without:
    ``kfold``.
``estimators``
    omitted with ``groups``: ``ols`` and ``mixed`` (the pooled line beside the
    between-source model, whose analytic interval carries the between-source variance;
    the ranking rule decides between them); omitted without: ``ols``.
``intervals.methods``
    omitted with ``groups``: every method valid for soils of a new source:
    ``analytic`` (with ``mixed`` it is the new-source interval), ``group-jackknife+`` and
    ``group-cv+`` (whole sources left out), and ``quantile`` when the estimators include
    ``quantile``. The row-level ``split-conformal``, ``jackknife+``, ``cv+`` and
    ``bootstrap`` assume exchangeable soils, which soils of one source are not: a recipe
    may still list them. Omitted without ``groups``: ``analytic`` (and ``quantile`` for a
    ``quantile`` estimator).

Each default applied is recorded as a sentence (:func:`resolve`), printed by
``refit fit`` and kept in the run folder.
"""

from __future__ import annotations

GROUPED_METHODS = ("analytic", "group-jackknife+", "group-cv+")
GROUPED_ESTIMATORS = ("ols", "mixed")


def resolve(given: dict, groups: str | None) -> tuple[dict, list[str]]:
    """Fill ``scheme``, ``estimators`` and ``methods`` the recipe leaves out.

    Parameters
    ----------
    given : dict
        The values the recipe writes (``scheme``, ``estimators``, ``methods``; absent
        keys are filled).
    groups : str or None
        The recipe's ``[validation] groups`` column.

    Returns
    -------
    (dict, list of str)
        The three values, and one sentence per default applied.
    """
    out, notes = dict(given), []
    if "scheme" not in out:
        out["scheme"] = "group-kfold" if groups else "kfold"
        if groups:
            notes.append(f"scheme defaults to 'group-kfold' by {groups!r}: whole sources "
                         "are held out, as a fossil's source is unseen")
    if "estimators" not in out:
        out["estimators"] = list(GROUPED_ESTIMATORS) if groups else ["ols"]
        if groups:
            notes.append("estimators default to 'ols' and 'mixed': the pooled line beside "
                         "the between-source model, ranked by coverage of held-out sources")
    if "methods" not in out:
        quantile = ["quantile"] if "quantile" in out["estimators"] else []
        out["methods"] = (list(GROUPED_METHODS) if groups else ["analytic"]) + quantile
        if groups:
            notes.append("interval methods default to " + ", ".join(map(repr, out["methods"]))
                         + ": the ones valid for a soil of a new source (row-level "
                         "conformal and bootstrap intervals assume exchangeable soils)")
    return out, notes
