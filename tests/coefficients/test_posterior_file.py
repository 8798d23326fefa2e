"""Posterior for climate from coefficient files alone (refit.coefficients.posterior):
the same numbers as the in-memory fits (refit.models.posterior), refusals, and a consumer
that imports no pandas/scipy/statsmodels/scikit-learn."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from refit.coefficients import dumps, fit_record, write_record
from refit.coefficients.posterior import posterior_from_records, proxy_from_record
from refit.errors import UsageError
from refit.models.fitting import fit
from refit.models.posterior import climate_posterior, forward_proxy, normal_prior

PROV = {"dataset": {"name": "t", "version": 1, "sha256": "0" * 64}, "subset": {},
        "recipe": None, "recipe_sha256": None}


def _record(f, fid="map_from_bk_depth"):
    rec = fit_record(f, function_id=fid, cv=None, level=0.95, interval_method="analytic",
                     provenance=PROV)
    return json.loads(dumps(rec))             # what a reader of the file gets


@pytest.fixture(scope="module")
def fits():
    rng = np.random.default_rng(2)
    src = np.repeat(np.arange(10), 5)
    x = rng.uniform(200, 1200, src.size)
    t = pd.DataFrame({"map_mm": x, "source": src.astype(str),
                      "bk_depth_cm": 10 + 0.08 * x + rng.normal(0, 6, 10)[src]
                      + rng.normal(0, 5, src.size),
                      "cia_k": np.exp(1 + 0.001 * x + rng.normal(0, 0.1, src.size))})
    return {"ols": fit(t, "map_mm", ["bk_depth_cm"], direction="forward"),
            "exp": fit(t, "map_mm", ["cia_k"], direction="forward", form="exponential"),
            "quad": fit(t, "map_mm", ["bk_depth_cm"], direction="forward",
                        form="quadratic"),
            "mixed": fit(t, "map_mm", ["bk_depth_cm"], direction="forward",
                         estimator="mixed", groups="source")}


FIELDS = ("median", "mode", "mean", "sd", "lower", "upper", "hdi_lower", "hdi_upper",
          "chi2", "chi2_p")


@pytest.mark.parametrize("pair", [("ols", "exp"), ("quad", "exp"), ("mixed", "exp")])
def test_file_equals_fit(fits, pair):
    fa, fb = fits[pair[0]], fits[pair[1]]
    v = np.array([[50.0, 5.0], [80.0, np.nan], [60.0, 9.0], [np.nan, 4.0]])
    sd = np.array([[2.0, 0.1], [np.nan, 0.0], [1.0, 0.3], [0.0, 0.2]])
    prior = normal_prior(700.0, 300.0)
    a = climate_posterior([forward_proxy(fa), forward_proxy(fb)], v, sd, prior=prior)
    b = posterior_from_records([_record(fa), _record(fb, "map_from_cia_k")], v, sd,
                               prior=a.prior)    # the prior as the result recorded it
    for name in FIELDS:
        x, y = getattr(a, name), getattr(b, name)
        assert np.array_equal(np.isnan(x), np.isnan(y))
        ok = ~np.isnan(x)
        assert np.all(np.abs(x[ok] - y[ok]) <= 1e-10 * np.maximum(1.0, np.abs(x[ok])))
    assert list(a.flags) == list(b.flags)
    assert a.prior == b.prior and a.grid == b.grid


def test_refusals(fits):
    from refit.published import path

    published = json.loads(path("map_from_cia_k.sheldon2002").read_text())
    with pytest.raises(UsageError, match="published"):
        proxy_from_record(published)
    inverse = fit(pd.DataFrame({"map_mm": [200.0, 400, 600, 800, 1000],
                                "bk_depth_cm": [20.0, 41, 58, 83, 99]}),
                  "map_mm", ["bk_depth_cm"])
    with pytest.raises(UsageError, match="inverse"):
        proxy_from_record(_record(inverse))
    with pytest.raises(UsageError, match="different climate"):
        rec = _record(fits["ols"])
        other = json.loads(json.dumps(rec))
        other["equation"]["x"] = ["mat_c"]
        posterior_from_records([rec, other], [[50.0, 50.0]])


SCRIPT = """
import json, sys
from refit.coefficients import load
from refit.coefficients.posterior import posterior_from_records
post = posterior_from_records([load(sys.argv[1]).record], [50.0, 80.0])
print(json.dumps({"heavy": [m for m in %r if m in sys.modules],
                  "median": post.median.tolist()}))
""" % (("pandas", "scipy", "statsmodels", "sklearn", "matplotlib"),)


def test_consumer_in_fresh_process(fits, tmp_path):
    f = fits["ols"]
    path = write_record(fit_record(f, function_id="map_from_bk_depth", cv=None, level=0.95,
                                   interval_method="analytic", provenance=PROV),
                        tmp_path / "f.json")
    res = subprocess.run([sys.executable, "-c", SCRIPT, str(path)], capture_output=True,
                         text=True, check=True)
    got = json.loads(res.stdout)
    assert got["heavy"] == []
    ref = climate_posterior([forward_proxy(f)], [50.0, 80.0])
    assert np.allclose(got["median"], ref.median, rtol=1e-10)
