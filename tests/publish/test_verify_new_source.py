"""verify --store on new-source coefficient files: a mixed fit (between_source block and
between-source covariance) and a group-jackknife+/CV+ file are refitted with the recorded
groups column and random-slope setting and agree to 1e-9 (the tolerance verify states); a
changed stored number (re-hashed, so only the refit can tell) is named.

Data: a run on a copy of the bundled invented demo store; the fits are made on the rows
the run's provenance rebuilds.
"""

from __future__ import annotations

import pytest

from _harness import RECIPE, make_fits
from refit.coefficients import content_sha256, dumps, fit_record, read_record, write_record
from refit.models.fitting import fit
from refit.publish.verify import verify_file
from refit.select.dataset import dataset_from_record


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    root = tmp_path_factory.mktemp("verify_groups")
    fits = make_fits(root, RECIPE)
    content = read_record(next(fits.glob("linear__ols__inverse__analytic.json")))
    data = dataset_from_record(content, root / "store")
    prov = {k: v for k, v in content["provenance"].items() if k not in ("kind", "software")}
    return {"root": root, "store": root / "store", "frame": data.frame.reset_index(drop=True),
            "recipe": data.recipe, "provenance": prov}


def _write(base, name, method, level=0.95, **kw):
    r = base["recipe"]
    f = fit(base["frame"], r.response, list(r.predictors), groups="source", **kw)
    rec = fit_record(f, function_id="map_from_bk_depth", cv=None, level=level,
                     interval_method=method, provenance=base["provenance"], seed=3, folds=4)
    return write_record(rec, base["root"] / name), rec


@pytest.mark.parametrize("kw,method,level", [
    ({"estimator": "mixed"}, "analytic", 0.95),
    ({"estimator": "mixed", "direction": "forward"}, "analytic", 0.95),
    ({"estimator": "mixed", "random_slope": True}, "analytic", 0.95),
    ({}, "group-jackknife+", 0.8),
    ({"estimator": "huber"}, "group-cv+", 0.8)])
def test_new_source_file_is_reproduced(base, kw, method, level):
    path, rec = _write(base, "f.json", method, level, **kw)
    assert rec["provenance"]["groups"] == "source"
    report = verify_file(path, store=base["store"])
    assert [c.name for c in report.checks] == ["sha256", "schema", "bytes", "reproduce"]
    assert report.ok, report.failures()


@pytest.mark.parametrize("field", [("between_source", "between_sd"),
                                   ("interval", "between_covariance", 0, 0)])
def test_changed_between_source_number_is_named(base, field):
    path, rec = _write(base, "m.json", "analytic", estimator="mixed")
    node = rec
    for key in field[:-1]:
        node = node[key]
    node[field[-1]] *= 1.01
    rec["sha256"] = content_sha256(rec)     # a consistent file: only the refit can tell
    path.write_text(dumps(rec), encoding="utf-8")
    report = verify_file(path, store=base["store"])
    assert [c.name for c in report.failures()] == ["reproduce"]
    assert ".".join(map(str, field[:2])) in report.failures()[0].message


def test_changed_group_score_is_named(base):
    path, rec = _write(base, "g.json", "group-jackknife+", 0.8)
    rec["interval"]["row_abs_residuals"][5] += 1.0
    rec["sha256"] = content_sha256(rec)
    path.write_text(dumps(rec), encoding="utf-8")
    report = verify_file(path, store=base["store"])
    assert not report.ok and "interval.row_abs_residuals[5]" in report.failures()[0].message


def test_labels_given_directly_cannot_be_refitted(base):
    r = base["recipe"]
    f = fit(base["frame"], r.response, list(r.predictors), estimator="mixed",
            groups=base["frame"]["source"].to_numpy())
    rec = fit_record(f, function_id="map_from_bk_depth", cv=None, level=0.95,
                     interval_method="analytic", provenance=base["provenance"])
    assert rec["provenance"]["groups"] is None
    report = verify_file(write_record(rec, base["root"] / "d.json"), store=base["store"])
    assert not report.ok and "not a groups column" in report.failures()[0].message
