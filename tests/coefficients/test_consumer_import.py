"""The consumer API stays light: importing refit.coefficients, loading a file and
predicting import neither pandas nor scipy, statsmodels, scikit-learn or matplotlib."""

from __future__ import annotations

import json
import subprocess
import sys

HEAVY = ("pandas", "scipy", "statsmodels", "sklearn", "matplotlib")

SCRIPT = """
import json, sys
from refit.coefficients import load
eq = load(sys.argv[1])
out = eq.predict([50.0, 100.0])
print(json.dumps({"heavy": [m for m in %r if m in sys.modules],
                  "estimate": out.estimate.tolist(), "upper": out.upper.tolist()}))
""" % (HEAVY,)


def _run(path):
    res = subprocess.run([sys.executable, "-c", SCRIPT, str(path)], capture_output=True,
                         text=True, check=True)
    return json.loads(res.stdout)


def test_published_file_in_fresh_process():
    from refit.published import path

    got = _run(path("map_from_bk_depth.retallack1994"))
    assert got["heavy"] == []
    # 139.6 + 6.388 D - 0.01303 D^2 at D = 100 -> 648.1 (Caudill et al. 1996: 648 +- 141)
    assert abs(got["estimate"][1] - 648.1) < 1e-9


def test_fitted_file_in_fresh_process(tmp_path):
    import pandas as pd

    from refit.coefficients import fit_record, write_record
    from refit.models.fitting import fit

    t = pd.DataFrame({"bk_depth_cm": [10.0, 30, 50, 70, 90, 110, 130, 150],
                      "map_mm": [200.0, 330, 390, 520, 580, 720, 760, 900]})
    f = fit(t, "map_mm", ["bk_depth_cm"], form="quadratic")
    rec = fit_record(f, function_id="map_from_bk_depth", cv=None, level=0.95,
                     interval_method="analytic", provenance={
                         "dataset": {"name": "t", "version": 1, "sha256": "0" * 64},
                         "subset": {}, "recipe": None, "recipe_sha256": None})
    got = _run(write_record(rec, tmp_path / "f.json"))
    assert got["heavy"] == []
    ref = f.predict([50.0, 100.0])                  # the in-memory fit
    assert abs(got["upper"][1] - ref["upper"].iloc[1]) < 1e-9 * abs(ref["upper"].iloc[1])


def _clustered(n_sources=20, soils=5, seed=3):
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(seed)
    codes = np.repeat(np.arange(n_sources), soils)
    depth = rng.uniform(30, 120, n_sources)[codes] + rng.uniform(-20, 20, codes.size)
    map_mm = (150 + 5 * depth + rng.normal(0, 60, n_sources)[codes]
              + rng.normal(0, 50, codes.size))
    return pd.DataFrame({"bk_depth_cm": depth, "map_mm": map_mm,
                         "source": [f"s{c}" for c in codes]})


def test_new_source_files_in_fresh_process(tmp_path):
    from refit.coefficients import fit_record, write_record
    from refit.models.fitting import fit

    prov = {"dataset": {"name": "t", "version": 1, "sha256": "0" * 64}, "subset": {},
            "recipe": None, "recipe_sha256": None}
    for kw, method in (({"estimator": "mixed", "random_slope": True}, "analytic"),
                       ({"estimator": "huber"}, "group-jackknife+"),
                       ({}, "group-cv+")):
        f = fit(_clustered(), "map_mm", "bk_depth_cm", groups="source", **kw)
        rec = fit_record(f, function_id="map_from_bk_depth", cv=None, level=0.9,
                         interval_method=method, provenance=prov)
        got = _run(write_record(rec, tmp_path / "f.json"))
        assert got["heavy"] == []
        ref = f.predict([50.0, 100.0], level=0.9, interval=method)
        assert abs(got["upper"][1] - ref["upper"].iloc[1]) < 1e-9 * abs(ref["upper"].iloc[1])
