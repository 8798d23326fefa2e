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
    from refit.select.dataset import dataset_from_record

    data = dataset_from_record(content, location, dataset=dataset)
    fit, _ = fit_whole(data.frame.reset_index(drop=True), data.recipe,
                       spec_from_record(content))
    return data, fit
