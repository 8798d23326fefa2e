"""`refit apply`'s table keeps a forward line's second ray (``other_lower``/``other_upper``).

Reference: the exact two-ray Fieller set ``A x^2 - 2 B x + C <= 0`` with ``A < 0``
(Fieller, E. C. 1954, JRSS B 16:175-185; from memory), solved with numpy.roots on
statsmodels' OLS fit and covariance (t from scipy.stats.t); apply's CSV must also equal
``Fit.predict`` on the same readings, column for column.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from _harness import fieller_set
from click.testing import CliRunner

from refit.apply.estimates import RESULT_COLUMNS
from refit.cli.apply import apply
from refit.coefficients import fit_record, write_record
from refit.models.fitting import fit

PROV = {"dataset": {"kind": "store", "name": "t", "version": 1, "sha256": "0" * 64},
        "subset": {"filters": []}, "recipe": None, "recipe_sha256": None}
READINGS = [5.0, 30.0, 60.0]  # Bk depth [cm]


def _weak():
    """Five soils, weak slope of Bk depth [cm] on MAP [mm] (seeded simulation, test data)."""
    rng = np.random.default_rng(3)
    x = np.array([1100.0, 1200.0, 1300.0, 1400.0, 1500.0])
    return x, 40 - 0.01 * (x - 1000) + rng.normal(0, 3, 5)


def _rays(x, y, y0):
    coef, roots, est, _ = fieller_set(x, y, y0)
    return coef[0], roots, est


def _forward_file(x, y, tmp_path):
    """The forward line of Bk depth on MAP, and its coefficient file."""
    f = fit(pd.DataFrame({"map_mm": x, "bk_depth_cm": y}), "map_mm", ["bk_depth_cm"],
            direction="forward")
    rec = fit_record(f, function_id="map_from_bk_depth", provenance=PROV, cv=None,
                     interval_method="analytic", level=0.95)
    return f, write_record(rec, tmp_path / "weak.json")


def test_apply_csv_keeps_the_other_ray_as_fit_predict(tmp_path):
    assert {"other_lower", "other_upper"} <= set(RESULT_COLUMNS)
    x, y = _weak()
    f, path = _forward_file(x, y, tmp_path)
    fossils = tmp_path / "fossils.csv"
    fossils.write_text("paleosol_id,bk_depth_cm\n" + "".join(
        f"P{i},{v}\n" for i, v in enumerate(READINGS)))
    out = tmp_path / "est.csv"
    res = CliRunner().invoke(apply, [str(path), "--fossils", str(fossils), "--out", str(out)])
    assert res.exit_code == 0, res.output
    got = pd.read_csv(out)
    ref = f.predict(READINGS)
    for col in ("estimate", "lower", "upper", "other_lower", "other_upper",
                "lower_untruncated", "upper_untruncated"):
        np.testing.assert_allclose(got[col].to_numpy(float), ref[col].to_numpy(float),
                                   rtol=1e-12, equal_nan=True, err_msg=col)
    for g, r in zip(got["flags"], ref["flags"]):
        assert set(str(r).split(";")) <= set(str(g).split(";"))
    # 5 cm: two rays; the estimate (about 2949 mm) on x >= r2, the other ray x <= r1 cut
    # at 0 mm: 0 .. r1 (the closed form above)
    a, (r1, r2), est = _rays(x, y, 5.0)
    assert a < 0 and 0 < r1 < r2 <= est
    assert got["other_lower"][0] == 0.0
    assert got["other_upper"][0] == pytest.approx(r1, rel=1e-10)
    assert got["lower"][0] == pytest.approx(r2, rel=1e-10)
    assert "two-rays" in got["flags"][0].split(";")
    # 30 cm: the whole line (cut to 0..12000 mm), not two rays: no other ray
    assert np.isnan(got["other_lower"][1]) and np.isnan(got["other_upper"][1])
    # 60 cm: the estimate on x <= r1, the other ray r2 .. 12000 mm
    _, (r1, r2), est = _rays(x, y, 60.0)
    assert est <= r1 and got["other_lower"][2] == pytest.approx(r2, rel=1e-10)
    assert got["other_upper"][2] == 12000.0


def test_monte_carlo_without_a_physical_estimate_keeps_the_set_inside_the_bounds(tmp_path):
    # the calibration shifted to 100-500 mm: a 100 cm reading gives an estimate of about
    # -3051 mm on the ray x <= r1 < 0; with a 2 cm SD every draw's estimate is below 0 mm
    # too, so there is nothing to mix: the row keeps the set's part inside 0..12000 mm,
    # the other ray r2 .. 12000 mm (closed form above), as Fit.predict gives it
    x, y = _weak()
    x = x - 1000.0
    f, path = _forward_file(x, y, tmp_path)
    fossils = tmp_path / "fossils.csv"
    fossils.write_text("paleosol_id,bk_depth_cm,bk_depth_sd_cm\nP,100,2\n")
    out = tmp_path / "est.csv"
    res = CliRunner().invoke(apply, [str(path), "--fossils", str(fossils), "--out", str(out)])
    assert res.exit_code == 0, res.output
    got = pd.read_csv(out).iloc[0]
    _, (r1, r2), est = _rays(x, y, 100.0)
    assert est <= r1 < 0 < r2 < 12000
    ref = f.predict([100.0])
    assert got["lower"] == pytest.approx(r2, rel=1e-10) == ref["lower"][0]
    assert got["upper"] == 12000.0 == ref["upper"][0]
    assert got["upper_untruncated"] == np.inf
    assert np.isnan(got["estimate"]) and np.isnan(got["other_lower"])
    assert got["propagation"].startswith("none: 4000 draws")
    assert "not propagated" in got["flag_details"]
    assert "beyond-search-window" in got["flags"].split(";")
