"""The shipped published equations, evaluated at values worked from their sources.

Sources (numbers copied here, nothing read from outside the package at test time):
- Retallack (1994) depth to Bk -> MAP, P = 139.6 + 6.388 D - 0.01303 D^2, SE +-141 mm:
  coefficients FROM MEMORY, confirmed by the worked value of Caudill, Driese & Mora (1996),
  J. Sedimentary Research 66:58: D = 100 cm -> 648 +- 141 mm (printed to 1 mm: tol 0.5 mm).
- Sheldon, Retallack & Tanaka (2002), J. Geology 110:687 (abstract, confirmed):
  P = 221.12 e^(0.0197 CIA-K); P = -259.34 ln(B) + 759.05; P = -130.93 ln(C) + 467.4
  (Mollisols); T = -18.516 S + 17.298. Worked values (arithmetic on the printed
  coefficients, to 0.1 mm / 0.01 degC): CIA-K 100 -> 1585.6 mm, 80 -> 1069.2 mm,
  50 -> 592.1; B = 0.5 -> 938.8 mm; S = 0.2 -> 13.59 degC; C = 0.5 -> 467.4 + 130.93 ln 2
  = 558.15 mm. +-182 mm for CIA-K: confirmed as the accepted RMSE by Lukens et al. (2019).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from refit.coefficients import read_record
from refit.published import load, names, path


def test_every_file_is_valid_published_and_cited():
    assert set(names()) >= {"map_from_bk_depth.retallack1994", "map_from_cia_k.sheldon2002",
                            "map_from_bases_alumina.sheldon2002",
                            "map_from_ca_alumina.sheldon2002",
                            "mat_from_salinization.sheldon2002"}
    for name in names():
        rec = read_record(path(name))          # schema + hash
        assert rec["status"] == "published"
        assert rec["covariance"] is None       # no source gives one
        assert rec["provenance"]["kind"] == "literature"
        assert len(rec["provenance"]["citation"]) > 40


def test_retallack_1994_worked_value():
    out = load("map_from_bk_depth.retallack1994").predict([100.0])
    assert out.estimate[0] == pytest.approx(648.0, abs=0.5)          # Caudill et al. 1996
    assert out.upper[0] - out.estimate[0] == pytest.approx(141.0)    # +-141 mm as published
    assert out.method == "published" and out.level is None
    rec = load("map_from_bk_depth.retallack1994").record
    assert "from memory" in rec["provenance"]["numbers"].lower()
    assert "Caudill" in rec["provenance"]["citation"]


def test_retallack_1994_turning_point_flag():
    # vertex D = 6.388 / (2 x 0.01303) = 245.1 cm (derived): beyond it the curve turns down
    out = load("map_from_bk_depth.retallack1994").predict([240.0, 250.0])
    assert out.flags[0] == ""
    assert "beyond-turning-point" in out.flags[1]


@pytest.mark.parametrize("x,expected", [(100.0, 1585.6), (80.0, 1069.2), (50.0, 592.1)])
def test_cia_k(x, expected):
    out = load("map_from_cia_k.sheldon2002").predict([x])
    assert out.estimate[0] == pytest.approx(expected, abs=0.05)
    assert out.upper[0] - out.estimate[0] == pytest.approx(182.0)
    assert out.estimate[0] - out.lower[0] == pytest.approx(182.0)


def test_bases_alumina_and_ca_alumina_have_no_interval():
    b = load("map_from_bases_alumina.sheldon2002").predict([0.5])
    # Sheldon, Retallack & Tanaka 2002 (J. Geology 110:687), equation confirmed from the
    # abstract: P = -259.34 ln(B) + 759.05; B = 0.5 -> 938.8 mm (arithmetic)
    assert b.estimate[0] == pytest.approx(938.8, abs=0.05)
    c = load("map_from_ca_alumina.sheldon2002").predict([0.5])
    # same source: P = -130.93 ln(C) + 467.4 (Mollisols); C = 0.5 -> 558.15 mm (arithmetic)
    assert c.estimate[0] == pytest.approx(467.4 + 130.93 * math.log(2), abs=1e-9)
    assert c.estimate[0] == pytest.approx(558.15, abs=0.005)
    assert np.isnan(b.lower[0]) and np.isnan(c.upper[0])
    assert load("map_from_ca_alumina.sheldon2002").record["domain"]["soil_order"] == "Mollisols"


def test_salinization():
    out = load("mat_from_salinization.sheldon2002").predict([0.2])
    # same source: T = -18.516 S + 17.298 (degC); S = 0.2 -> 13.59 degC (arithmetic)
    assert out.estimate[0] == pytest.approx(13.59, abs=0.005)
    assert np.isnan(out.lower[0])               # the +-4.4 degC figure is unconfirmed


def test_cia_k_domain():
    out = load("map_from_cia_k.sheldon2002").predict([101.0])
    assert "outside-calibration-range" in out.flags[0]
