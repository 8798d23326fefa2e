"""The section figure (refit.report.section_plot): what is drawn matches the section table,
labels never overlap (measured with matplotlib's own renderer), the age axis reads
up-section, and the report embeds one figure per section."""

from __future__ import annotations

import numpy as np
import pytest
from matplotlib.collections import LineCollection

from refit.apply.section import PREDICTION, PUBLISHED_SE, section_files
from refit.report.section_plot import (
    report_section,
    section_figure,
    serious_flags,
    write_section,
)

RETALLACK = "refit/published/map_from_bk_depth.retallack1994.json"
CIA_K = "refit/published/map_from_cia_k.sheldon2002.json"
DEMO = "calib_demo/fossils.csv"
CONSTANTS = "calib_demo/compaction_constants.csv"


@pytest.fixture(scope="module")
def result():
    return section_files([RETALLACK, CIA_K], DEMO, decompact=True,
                         constants_file=CONSTANTS, seed=1)


def _artists(fig, prefix):
    out = {}
    for ax in fig.axes:
        for a in list(ax.lines) + list(ax.collections) + list(ax.texts):
            gid = a.get_gid() or ""
            if gid.startswith(prefix):
                out.setdefault(gid, []).append(a)
    return out


@pytest.mark.parametrize("section", ["Coldstave Gorge", "Murrenhal Bluff"])
def test_points_intervals_and_flags_drawn_match_the_table(result, section):
    t = result.table
    t = t[(t["section"] == section) & t["estimate"].notna()]
    fig = section_figure(result.table, section)
    ax = fig.axes[0]
    y0, y1 = ax.get_ylim()
    tol = 0.03 * abs(y1 - y0)  # the drawing offset between fits is a few points
    for fit, g in t.groupby("fit"):
        flagged = np.array([bool(serious_flags(f)) for f in g["flags"]])
        for kind, sel in (("estimates", ~flagged), ("flagged", flagged)):
            lines = _artists(fig, f"{kind}:{fit}").get(f"{kind}:{fit}", [])
            if not sel.any():
                assert lines == []
                continue
            (line,) = lines
            x, y = np.asarray(line.get_xdata(), float), np.asarray(line.get_ydata(), float)
            np.testing.assert_allclose(np.sort(x), np.sort(g["estimate"][sel]), rtol=0)
            order = np.argsort(x)
            ref = g[sel].sort_values("estimate")
            assert np.all(np.abs(y[order] - ref["level_m"].to_numpy()) <= tol)
        kind = set(g["interval_kind"])
        assert kind <= {PREDICTION, PUBLISHED_SE}
        (coll,) = _artists(fig, f"interval:{kind.pop()}:{fit}").popitem()[1]
        assert isinstance(coll, LineCollection)
        segs = coll.get_segments()
        lo = np.sort([s[0][0] for s in segs])
        hi = np.sort([s[1][0] for s in segs])
        np.testing.assert_allclose(lo, np.sort(g["lower"]), rtol=0, atol=1e-9)
        np.testing.assert_allclose(hi, np.sort(g["upper"]), rtol=0, atol=1e-9)


def test_flags_are_named_and_explained_in_the_legend(result):
    fig = section_figure(result.table, "Coldstave Gorge")
    labels = [a.get_text() for a in _artists(fig, "flag-label").get("flag-label", [])]
    # CG-P08: 280 cm lies beyond the Retallack (1994) vertex at 245.1 cm (derived from its
    # coefficients); decompacted it is deeper still
    assert any("beyond turning point" in s for s in labels)
    legend = " ".join(t.get_text() for t in fig.legends[0].get_texts())
    assert "published ±1 SE (not a prediction interval)" in legend
    assert "hollow: flagged" in legend
    assert "Retallack 1994, from bk_depth (published)" in legend  # its short citation


@pytest.mark.parametrize("section", ["Coldstave Gorge", "Murrenhal Bluff"])
def test_no_two_labels_overlap(result, section):
    fig = section_figure(result.table, section)
    renderer = fig.canvas.get_renderer()
    texts = [a for k, v in _artists(fig, "").items() if k.endswith("-label") for a in v]
    ids = [a.get_text() for a in texts if a.get_gid() == "paleosol-label"]
    assert len(ids) >= 5
    boxes = [a.get_window_extent(renderer) for a in texts]
    for i in range(len(boxes)):
        for j in range(i + 1, len(boxes)):
            assert not boxes[i].overlaps(boxes[j]), (texts[i].get_text(), texts[j].get_text())
        ax = texts[i].axes.get_window_extent(renderer)
        assert ax.x0 - 1 <= boxes[i].x0 and boxes[i].x1 <= ax.x1 + 1


def test_age_axis_reads_up_section_and_carries_the_sd():
    res = section_files([RETALLACK], DEMO, age_model="calib_demo/age_model.csv")
    fig = section_figure(res.table, "Murrenhal Bluff", axis="age", y_label="age_ma")
    ax = fig.axes[0]
    assert ax.get_ylabel() == "age [Ma]"
    lo, hi = ax.get_ylim()
    assert lo > hi  # inverted: older (larger Ma) at the base
    assert _artists(fig, "age-sd")


def test_written_folder_and_report_section(result, tmp_path):
    written = write_section(result, tmp_path / "s")
    names = sorted(p.name for p in written)
    assert names == ["notes.txt", "section-coldstave-gorge.png",
                     "section-murrenhal-bluff.png", "section.csv"]
    assert written[2].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    part = report_section(tmp_path / "s")
    assert [f["section"] for f in part["figures"]] == ["Murrenhal Bluff", "Coldstave Gorge"]
    assert part["figures"][0]["figure"].axes[0].get_ylabel() == "level [m]"
    assert part["notes"] == result.notes and part["n_rows"] == len(result.table)


def test_posterior_marks_match_the_table(tmp_path):
    """Forward files applied with the posterior: each posterior is drawn (dotted interval,
    diamond at the median) at the numbers of the estimates table, and the legend says
    what the dotted line is. Calibration: a seeded simulation (invented data)."""

    from _harness import forward_files

    from refit.apply.section import POSTERIOR

    files = forward_files(tmp_path)
    res = section_files(files, DEMO, seed=1, posterior=True)
    table = res.table
    post = table[table["interval_kind"] == POSTERIOR]
    est = res.applied.results
    combined = est[est["function_id"] == "posterior"]
    # one posterior row per forward file and paleosol, plus the combined ones
    assert len(post) == 2 * 14 + len(combined) and len(combined) == 14
    ref = est.set_index(["paleosol_id", "function_id"])
    for r in post.itertuples(index=False):
        row = ref.loc[(r.paleosol_id, r.function_id)]
        assert r.estimate == row["posterior_median"] and r.lower == row["posterior_lower"]
        assert r.upper == row["posterior_upper"]
    section = "Murrenhal Bluff"
    fig = section_figure(table, section)
    drawn = table[(table["section"] == section) & (table["interval_kind"] == POSTERIOR)]
    for fit_name_, g in drawn.groupby("fit"):
        (coll,) = _artists(fig, f"interval:{POSTERIOR}:{fit_name_}")[
            f"interval:{POSTERIOR}:{fit_name_}"]
        assert coll.get_linestyle()[0][1] is not None          # dotted, not solid
        segs = coll.get_segments()
        np.testing.assert_allclose(np.sort([s[0][0] for s in segs]), np.sort(g["lower"]),
                                   atol=1e-9)
        np.testing.assert_allclose(np.sort([s[1][0] for s in segs]), np.sort(g["upper"]),
                                   atol=1e-9)
        marks = [a for k, v in _artists(fig, "estimates:").items() if k.endswith(fit_name_)
                 for a in v] + [a for k, v in _artists(fig, "flagged:").items()
                                if k.endswith(fit_name_) for a in v]
        xs = np.concatenate([np.asarray(m.get_xdata(), float) for m in marks])
        assert all(m.get_marker() == "D" for m in marks)
        np.testing.assert_allclose(np.sort(xs), np.sort(g["estimate"]), rtol=0)
    legend = " ".join(t.get_text() for t in fig.legends[0].get_texts())
    assert "posterior median and equal-tailed interval (dotted" in legend


def _bounded_file(tmp_path):
    """A forward line whose interval runs below 0 mm for shallow horizons (seeded
    simulation, as tests/apply/test_bounds.py) and a fossil table of one section."""
    import pandas as pd

    from refit.coefficients import fit_record, write_record
    from refit.models.fitting import fit

    rng = np.random.default_rng(3)
    x = np.linspace(150.0, 1350.0, 16)
    t = pd.DataFrame({"map_mm": x, "bk_depth_cm": 15 + 0.09 * x + rng.normal(0, 12, 16)})
    prov = {"dataset": {"name": "t", "version": 1, "sha256": "0" * 64}, "subset": {},
            "recipe": None, "recipe_sha256": None}
    rec = fit_record(fit(t, "map_mm", ["bk_depth_cm"], direction="forward"),
                     function_id="map_from_bk_depth", cv=None, level=0.95,
                     interval_method="analytic", provenance=prov)
    path = str(write_record(rec, tmp_path / "forward.json"))
    fossils = tmp_path / "fossils.csv"
    pd.DataFrame({"paleosol_id": ["P1", "P2", "P3", "P4"], "section": ["S"] * 4,
                  "level_m": [1.0, 4.0, 9.0, 15.0],
                  "bk_depth_cm": [38.0, 90.0, 30.0, 120.0]}).to_csv(fossils, index=False)
    return path, str(fossils)


def test_limits_cut_at_a_bound_are_drawn_there_and_explained(tmp_path):
    """A limit cut at 0 mm (flag truncated-at-bound) gets a triangle at the bound, the
    legend says what it is and where the limit before the cut is (the section table)."""
    path, fossils = _bounded_file(tmp_path)
    res = section_files([path], fossils)
    t = res.table
    cut = t["flags"].str.contains("truncated-at-bound")
    assert sorted(t.loc[cut, "paleosol_id"]) == ["P1", "P3"]    # the shallow horizons
    assert (t.loc[cut, "lower"] == 0.0).all() and (t.loc[cut, "lower_untruncated"] < 0).all()
    assert t.loc[~cut, "lower_untruncated"].isna().all()
    fig = section_figure(t, "S")
    marks = _artists(fig, "truncated:")
    (fit_name_,) = set(t["fit"])
    (line,) = marks[f"truncated:{fit_name_}"]
    assert line.get_marker() == "<"
    np.testing.assert_array_equal(np.sort(line.get_xdata()), [0.0, 0.0])
    # the flag is explained, not drawn as if the equation failed (no hollow marker)
    assert "flagged:" + fit_name_ not in _artists(fig, "flagged:")
    legend = " ".join(x.get_text() for x in fig.legends[0].get_texts()).replace("\n", " ")
    assert "truncated-at-bound" in " ".join(legend.split())
    assert "lower_untruncated" in legend
    # the table written beside the figure keeps the limit before the cut
    write_section(res, tmp_path / "s")
    back = report_section(tmp_path / "s")
    assert back["figures"] and "cut at a physical bound" in back["caption"]
    import pandas as pd

    csv = pd.read_csv(tmp_path / "s" / "section.csv")
    np.testing.assert_allclose(csv["lower_untruncated"], t["lower_untruncated"],
                               equal_nan=True)


def test_compare_figure_marks_and_explains_a_cut_limit(tmp_path):
    """The comparison figure: a triangle at a limit cut at a bound, and a legend entry
    for it only when some row has one."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from refit.apply.compare import _legend_handles, _panel, compare_files

    path, fossils = _bounded_file(tmp_path)
    table, _ = compare_files([path], fossils=fossils)
    one = table[table["paleosol_id"] == "P1"]
    assert one["flags"].iloc[0] == "truncated-at-bound" and one["lower"].iloc[0] == 0.0
    fig, ax = plt.subplots()
    _panel(ax, one, "P1")
    tri = [a for a in ax.lines if a.get_gid() == "truncated"]
    assert len(tri) == 1 and tri[0].get_marker() == "<"
    assert list(tri[0].get_xdata()) == [0.0]
    plt.close(fig)
    labels = [h.get_label() for h in _legend_handles(table)]
    assert any("truncated-at-bound" in s and "lower/upper_untruncated" in s for s in labels)
    deep = table[table["paleosol_id"] == "P2"]
    assert not any("truncated" in h.get_label() for h in _legend_handles(deep))
