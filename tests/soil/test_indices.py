"""Weathering indices against values worked by hand from the source formulas.

Molar masses (g/mol), standard values: Al2O3 101.96, CaO 56.08, Na2O 61.98, K2O 94.20,
MgO 40.30.

Invented composition used below (wt%): Al2O3 15.00, CaO 1.00, Na2O 2.00, K2O 3.00,
MgO 1.50. Molar proportions worked by hand:
    Al2O3 = 15.00 / 101.96 = 0.147117
    CaO   =  1.00 /  56.08 = 0.0178317
    Na2O  =  2.00 /  61.98 = 0.0322685
    K2O   =  3.00 /  94.20 = 0.0318471
    MgO   =  1.50 /  40.30 = 0.0372208
Tolerances: the hand values keep 5-6 significant digits, so 1e-4 relative.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from refit.soil.indices import (
    INDEX_COLUMNS, bases_alumina, ca_alumina, calmag, cia, cia_k, derive_indices,
    map_from_cia_k, moles, salinization,
)

COMP = {"al2o3_wt": 15.0, "cao_wt": 1.0, "na2o_wt": 2.0, "k2o_wt": 3.0, "mgo_wt": 1.5}
REL = 1e-4


def test_moles():
    assert moles(15.0, "al2o3") == pytest.approx(0.147117, rel=REL)


def test_cia_by_hand():
    # Nesbitt & Young (1982), Nature 299:715: CIA = 100 Al/(Al + Ca + Na + K)
    # = 100 * 0.147117 / (0.147117 + 0.0178317 + 0.0322685 + 0.0318471)
    # = 100 * 0.147117 / 0.229064 = 64.225
    assert cia(15.0, 1.0, 2.0, 3.0) == pytest.approx(64.225, rel=REL)


def test_cia_k_by_hand():
    # Harnois (1988), Sedimentary Geology 55:319 (CIW): 100 Al/(Al + Ca + Na)
    # = 100 * 0.147117 / (0.147117 + 0.0178317 + 0.0322685) = 100 * 0.147117 / 0.197217
    # = 74.596
    assert cia_k(15.0, 1.0, 2.0) == pytest.approx(74.596, rel=REL)


def test_calmag_by_hand():
    # Nordt & Driese (2010), Geology 38:407: 100 Al/(Al + Ca + Mg)
    # = 100 * 0.147117 / (0.147117 + 0.0178317 + 0.0372208) = 100 * 0.147117 / 0.202169
    # = 72.769
    assert calmag(15.0, 1.0, 1.5) == pytest.approx(72.769, rel=REL)


def test_salinization_by_hand():
    # Sheldon, Retallack & Tanaka (2002), J. Geology 110:687: S = (K + Na)/Al
    # = (0.0318471 + 0.0322685) / 0.147117 = 0.0641156 / 0.147117 = 0.43582
    assert salinization(3.0, 2.0, 15.0) == pytest.approx(0.43582, rel=REL)


def test_bases_alumina_by_hand():
    # Sheldon et al. (2002): B = (Ca + Mg + Na + K)/Al (list of bases from memory)
    # = (0.0178317 + 0.0372208 + 0.0322685 + 0.0318471) / 0.147117
    # = 0.119168 / 0.147117 = 0.81003
    assert bases_alumina(1.0, 1.5, 2.0, 3.0, 15.0) == pytest.approx(0.81003, rel=REL)


def test_ca_alumina_by_hand():
    # Sheldon et al. (2002): C = Ca/Al = 0.0178317 / 0.147117 = 0.121208
    assert ca_alumina(1.0, 15.0) == pytest.approx(0.121208, rel=REL)


def test_cia_of_fresh_feldspar_and_kaolinite():
    # Nesbitt & Young (1982), from memory: unweathered feldspar has CIA 50, kaolinite 100.
    # Albite NaAlSi3O8 (262.22 g/mol): Na2O 11.82 wt%, Al2O3 19.44 wt% (stoichiometry,
    # two decimals, so CIA to +-0.05)
    assert cia(19.44, 0.0, 11.82, 0.0) == pytest.approx(50.0, abs=0.05)
    assert cia(39.5, 0.0, 0.0, 0.0) == 100.0


def test_vectorised_and_missing_values():
    al = pd.Series([15.0, np.nan, 0.0])
    out = cia_k(al, pd.Series([1.0, 1.0, 0.0]), pd.Series([2.0, 2.0, 0.0]))
    assert isinstance(out, pd.Series)
    assert out.iloc[0] == pytest.approx(74.596, rel=REL)
    assert math.isnan(out.iloc[1]) and math.isnan(out.iloc[2])  # missing; 0/0
    arr = cia(np.array([15.0, 19.44]), np.array([1.0, 0.0]), np.array([2.0, 11.82]),
              np.array([3.0, 0.0]))
    assert arr == pytest.approx([64.225, 50.0], abs=0.05)


def test_derive_indices_frame():
    frame = pd.DataFrame([COMP, {"al2o3_wt": 15.0}], index=["a", "b"])
    out = derive_indices(frame)
    assert list(out.columns[-6:]) == list(INDEX_COLUMNS)
    assert list(out.index) == ["a", "b"]
    expected = [64.225, 74.596, 72.769, 0.43582, 0.81003, 0.121208]
    assert out.loc["a", list(INDEX_COLUMNS)].tolist() == pytest.approx(expected, rel=REL)
    assert out.loc["b", list(INDEX_COLUMNS)].isna().all()
    assert "cia" not in frame.columns  # the input is not changed


def test_derive_indices_without_oxide_columns():
    out = derive_indices(pd.DataFrame({"profile_id": ["x"]}))
    assert out[list(INDEX_COLUMNS)].isna().all(axis=None)


@pytest.mark.parametrize("value,expected", [(100, 1585.6), (80, 1069.2), (50, 592.1)])
def test_map_from_cia_k_published_equation(value, expected):
    # Sheldon, Retallack & Tanaka (2002): P = 221.12 exp(0.0197 CIA-K); check values
    # are that equation's arithmetic, printed to 0.1 mm
    assert map_from_cia_k(value) == pytest.approx(expected, abs=0.05)
