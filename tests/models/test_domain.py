"""Domain of validity: ranges, the quadratic's turning point, extrapolation flags."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from refit.models.domain import quadratic_turning_point
from refit.models.fitting import fit

NIST = Path(__file__).resolve().parents[1] / "data" / "nist"


def pontius() -> tuple[pd.DataFrame, dict]:
    lines = (NIST / "Pontius.dat").read_text().splitlines()
    cert = {int(m[1]): float(m[2]) for ln in lines[:60]
            if (m := re.match(r"\s+B(\d)\s+(\S+)", ln))}
    rows = [[float(v) for v in ln.split()] for ln in lines[60:100]]
    return pd.DataFrame(rows, columns=["y", "x"]), cert


def test_pontius_turning_point_from_certified_coefficients_lies_outside():
    # NIST StRD Pontius certified B1, B2 (parsed from the header): turning point
    # -B1/(2 B2) ~ 1.158e8, far beyond the loads 150,000-3,000,000: a maximum, outside.
    d, cert = pontius()
    f = fit(d, response="y", predictors="x", form="quadratic")
    dom = f.domain
    assert dom.turning_point == pytest.approx(-cert[1] / (2 * cert[2]), rel=1e-10)
    assert dom.turning_point_location == "outside"
    assert dom.turning_point_kind == "maximum"
    assert dom.ranges["x"] == (150000.0, 3000000.0)
    assert dom.cautions == [] or all("two-segment" in c for c in dom.cautions)


@pytest.mark.parametrize("tp, expected", [(5.0, "inside"), (10.5, "near"), (-0.9, "near"),
                                          (12.0, "outside")])
def test_turning_point_location(tp, expected):
    # b0 + b1 x + b2 x^2 with b2 = -1, b1 = 2 tp has its maximum at tp (calculus);
    # "near" = within 10% of the range width outside it (this tool's convention).
    got = quadratic_turning_point(2 * tp, -1.0, 0.0, 10.0, np.linspace(0, 10, 11))
    assert got[0] == pytest.approx(tp) and got[1] == expected and got[2] == "maximum"


def _saturating():
    # depth to Bk that stops deepening: climate = -(depth - 120)^2 / 30 + 600 on 20..115 cm
    rng = np.random.default_rng(3)
    depth = np.linspace(20, 115, 30)
    climate = 600 - (depth - 120) ** 2 / 30 + rng.normal(0, 5, depth.size)
    return pd.DataFrame({"bk_depth_cm": depth, "map_mm": climate})


def test_near_turning_point_gives_a_caution_and_flags_values_beyond_it():
    f = fit(_saturating(), response="map_mm", predictors="bk_depth_cm", form="quadratic")
    dom = f._core_domain()
    assert dom.turning_point_location == "near"
    assert "cannot be inverted" in dom.cautions[0]
    p = f.predict([60.0, 116.0, dom.turning_point + 10])
    assert list(p["flags"]) == ["", "outside-calibration-range",
                                "outside-calibration-range;beyond-turning-point"]


def test_extrapolation_flag_per_predictor():
    rng = np.random.default_rng(9)
    d = pd.DataFrame({"a": rng.uniform(0, 10, 30), "b": rng.uniform(100, 200, 30)})
    d["y"] = 2 * d.a + 0.1 * d.b + rng.normal(0, 0.1, 30)
    f = fit(d, response="y", predictors=["a", "b"])
    new = pd.DataFrame({"a": [5.0, 11.0, 5.0], "b": [150.0, 150.0, 90.0]})
    assert list(f.predict(new)["flags"]) == ["", "outside-calibration-range",
                                             "outside-calibration-range"]
    assert f.domain.ranges["a"] == (d.a.min(), d.a.max())


def test_domain_to_dict_is_json_ready():
    import json

    f = fit(_saturating(), response="map_mm", predictors="bk_depth_cm", form="quadratic")
    out = json.loads(json.dumps(f._core_domain().to_dict()))
    assert out["turning_point_location"] == "near"
    assert out["ranges"]["bk_depth_cm"] == [20.0, 115.0]


def test_saturation_is_reported_by_the_broken_stick_comparison():
    # A feature that stops responding beyond a climate threshold (invented generating
    # process, seeded): Bk depth deepens with MAP up to 700 mm, then flattens. The
    # two-segment fit (refit.models.segmented) must be clearly better and its break near
    # 700 mm; a plain line with the same noise must not trigger the caution.
    rng = np.random.default_rng(12)
    mapmm = np.linspace(200, 1200, 60)
    depth = np.where(mapmm < 700, 0.1 * mapmm, 70.0) + rng.normal(0, 2, mapmm.size)
    d = pd.DataFrame({"map_mm": mapmm, "bk_depth_cm": depth})
    f = fit(d, response="map_mm", predictors="bk_depth_cm", direction="forward")
    dom = f.domain
    assert dom.broken_stick["clearly_better"]
    assert dom.broken_stick["breakpoint"] == pytest.approx(700, abs=40)
    assert any("no longer tells climate apart" in c for c in dom.cautions)
    assert dom.to_dict()["broken_stick"]["clearly_better"] is True
    d["bk_depth_cm"] = 0.1 * mapmm + rng.normal(0, 2, mapmm.size)
    line = fit(d, response="map_mm", predictors="bk_depth_cm", direction="forward")
    assert not line.domain.broken_stick["clearly_better"]
    assert line.domain.cautions == []
