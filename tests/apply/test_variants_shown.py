"""The variant of a coefficient file (``$.variant``, schema 1.3.0) is shown by apply,
compare and section: a ``variant`` column in each table and the variant in the short fit
label, so two variants of one function at one version never share a label.

Reference for every expected value: the ``variant`` field of the published files
themselves (read with json, outside refit's reader). The fits are made on a seeded
simulation (a test input, not demo data).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from refit.apply.compare import comparison_table, fit_label, variant_label
from refit.apply.estimates import RESULT_COLUMNS, apply_files
from refit.apply.section import TABLE_COLUMNS, section_files

RETALLACK = "refit/published/map_from_bk_depth.retallack1994.json"
CANDIDATE = "linear__ols__inverse__analytic"


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """Two candidates of map_from_bk_depth with the same candidate label, published into
    two variants of one registry (both 1.0.0, each in its own chain), and an
    unpublished candidate."""
    from refit.coefficients import fit_record, write_record
    from refit.models.fitting import fit
    from refit.publish.registry import publish

    root = tmp_path_factory.mktemp("variants")
    prov = {"dataset": {"name": "t", "version": 1, "sha256": "0" * 64}, "subset": {},
            "recipe": None, "recipe_sha256": None}
    out = {}
    for k, name in enumerate(("mixed", "huber")):
        rng = np.random.default_rng(40 + k)
        x = rng.uniform(200, 1200, 40)
        t = pd.DataFrame({"map_mm": x, "bk_depth_cm": 10 + 0.1 * x + rng.normal(0, 8, 40)})
        rec = fit_record(fit(t, "map_mm", ["bk_depth_cm"], direction="inverse"),
                         function_id="map_from_bk_depth", cv=None, level=0.95,
                         interval_method="analytic", provenance=prov, candidate=CANDIDATE)
        cand = write_record(rec, root / f"cand{k}" / f"{CANDIDATE}.json")
        got = publish(cand, root / "registry", create=True, variant=name,
                      now=f"2026-12-0{k + 1}T00:00:00+00:00")
        out[name] = str(got.path)
        out["candidate"] = str(cand)
    fossils = root / "fossils.csv"
    pd.DataFrame({"paleosol_id": ["P1", "P2", "P3"], "section": ["S"] * 3,
                  "level_m": [1.0, 5.0, 9.0], "bk_depth_cm": [40.0, 70.0, 90.0]}
                 ).to_csv(fossils, index=False)
    out["fossils"] = str(fossils)
    return out


def _field(path) -> str | None:
    with open(path, encoding="utf-8") as fh:
        return json.load(fh).get("variant")


def test_published_files_carry_their_variant(files):
    assert _field(files["mixed"]) == "mixed" and _field(files["huber"]) == "huber"
    assert "/mixed/1.0.0.json" in files["mixed"].replace("\\", "/")
    assert _field(files["candidate"]) is None and _field(RETALLACK) is None


def test_estimates_table_has_the_variant_column(files):
    paths = [files["mixed"], files["huber"], files["candidate"], RETALLACK]
    res = apply_files(paths, files["fossils"])
    assert "variant" in RESULT_COLUMNS
    got = res.results.groupby("coefficient_file", sort=False)["variant"].unique()
    assert {k: list(v) for k, v in got.items()} == {
        files["mixed"]: ["mixed"], files["huber"]: ["huber"],
        files["candidate"]: [""],     # not published yet: its variant is chosen then
        RETALLACK: ["default"]}       # published without the field: the default one


def test_comparison_table_and_labels_name_the_variant(files):
    paths = [files["mixed"], files["huber"], files["candidate"], RETALLACK]
    table = comparison_table(apply_files(paths, files["fossils"]).results)
    by_file = table.drop_duplicates("coefficient_file").set_index("coefficient_file")
    assert by_file.loc[files["mixed"], "variant"] == "mixed"
    assert by_file.loc[files["mixed"], "fit"] == f"map_from_bk_depth 1.0.0 mixed {CANDIDATE}"
    assert by_file.loc[files["huber"], "fit"] == f"map_from_bk_depth 1.0.0 huber {CANDIDATE}"
    # no variant, or the default one: the label as it always was
    assert by_file.loc[files["candidate"], "fit"] == \
        f"map_from_bk_depth unpublished {CANDIDATE}"
    assert by_file.loc[RETALLACK, "fit"] == "Retallack 1994, from bk_depth"
    assert table["fit"].nunique() == 4


def test_section_table_keeps_two_variants_apart(files):
    res = section_files([files["mixed"], files["huber"]], files["fossils"])
    assert "variant" in TABLE_COLUMNS
    t = res.table
    assert sorted(t["variant"].unique()) == ["huber", "mixed"]
    # same function, version and candidate label: only the variant tells them apart
    assert t.groupby("fit")["variant"].nunique().max() == 1
    assert t["fit"].nunique() == 2 and len(t) == 6


def test_variant_in_a_short_label_and_older_tables():
    row = pd.Series({"function_id": "map_from_bk_depth", "version": "1.1.0",
                     "variant": "mixed", "candidate": "", "status": "published",
                     "citation": ""})
    assert fit_label(row) == "map_from_bk_depth 1.1.0 mixed published"
    # a table written before the column existed (no attribute) or an empty cell (NaN)
    assert variant_label(np.nan) == "" and variant_label(None) == ""
    assert variant_label("default") == "" and variant_label("mixed") == "mixed"
    old = row.drop("variant")
    assert fit_label(old) == "map_from_bk_depth 1.1.0 published"
