"""Refitting a recorded candidate: the fit a coefficient record says it is.

``refit verify`` (with a store or table) and ``refit report`` both rebuild the data set a
record was fitted on (:func:`refit.select.dataset.dataset_from_record`) and refit its
candidate here, the way the run fitted it (:func:`refit.validate.candidates.fit_whole`), so
they accept the same files.
"""

from __future__ import annotations

from refit.errors import InvalidDataError, RefitError
from refit.select.recipe import form_degree
from refit.validate.candidates import Spec, fit_whole


def spec_from_record(content: dict) -> Spec:
    """The :class:`Spec` of a coefficient record (its form, estimator, direction, interval).

    Raises
    ------
    InvalidDataError
        The record's form, estimator, direction or terms cannot be read.
    """
    label = content.get("form")
    if label == "polynomial" and content.get("degree"):
        label = f"polynomial-{content['degree']}"
    try:
        form, degree = form_degree(str(label))
        interval = content.get("interval") or {}
        return Spec(str(label), form, degree, content["estimator"], content["direction"],
                    interval.get("method", "analytic"), len(content["terms"]))
    except (ValueError, RefitError, KeyError, TypeError) as exc:
        raise InvalidDataError(f"the file's form, estimator, direction or terms cannot be "
                               f"read for a refit: {exc}") from None


def refit_record(content: dict, location=None, *, dataset: dict | None = None):
    """Rebuild a coefficient record's data set and subset, and refit its candidate.

    The data come from :func:`refit.select.dataset.dataset_from_record` (``location`` and
    ``dataset`` as there), the fit from :func:`fit_whole` with the record's recipe and
    :func:`spec_from_record`: the way the run fitted it.

    Returns
    -------
    (refit.select.dataset.Dataset, refit.models.fitting.Fit)
    """
    import dataclasses

    from refit.select.dataset import dataset_from_record

    data = dataset_from_record(content, location, dataset=dataset)
    frame = data.frame.reset_index(drop=True)
    recipe = data.recipe
    had_groups, column = recorded_groups(content)
    if had_groups:   # the fit's own groups and random slope, as the file records them
        if not column:
            raise InvalidDataError("the file was fitted with group labels given directly, "
                                   "not a groups column, so a refit cannot rebuild them; "
                                   "verify checks its integrity only (run without --store)")
        if column not in frame.columns:
            raise InvalidDataError(f"the file records groups column {column!r}, which the "
                                   "rebuilt data do not have; check --store")
        recipe = dataclasses.replace(recipe, groups=column,
                                     random_slope=recorded_random_slope(content))
    try:
        fit, _ = fit_whole(frame, recipe, spec_from_record(content))
    except RefitError as exc:
        if not had_groups:
            raise
        raise InvalidDataError(f"the refit with groups column {column!r} failed: "
                               f"{exc}") from None
    return data, fit


def recorded_groups(content: dict) -> tuple[bool, str | None]:
    """(was the fit given groups, the groups column) as the file records them
    (``provenance.groups``, else ``between_source.groups`` or ``interval.groups``)."""
    prov = content.get("provenance") or {}
    for block in (prov, content.get("between_source"), content.get("interval")):
        if isinstance(block, dict) and "groups" in block:
            return True, block["groups"]
    return False, None


def recorded_random_slope(content: dict) -> bool:
    """Whether the file's mixed fit asked for a random slope (``provenance.random_slope``;
    older files: ``between_source``, where a slope that fell back says so)."""
    prov = content.get("provenance") or {}
    if "random_slope" in prov:
        return bool(prov["random_slope"])
    b = content.get("between_source")
    if isinstance(b, dict):
        return bool(b.get("random_slope")) or b.get("fallback") == "random-intercept"
    return False
