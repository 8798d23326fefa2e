"""The report's per-source section and the heteroscedasticity test beside the residuals.

Runs are small recipes on the demo scenario's store (invented data). References:
- per-source coverage: a plain pandas computation from the run folder's
  ``oof_predictions.csv`` and the store's ``records.csv`` (profile_id -> source);
- between-source SD and ICC: statsmodels ``MixedLM`` (formula ``r ~ 1``, groups, REML)
  computed in the test;
- Breusch-Pagan: ``statsmodels.stats.diagnostic.het_breuschpagan`` called in the test on
  the same residuals and the raw design (constant, x, x^2, ...).
"""

from __future__ import annotations

import dataclasses
import warnings
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
from statsmodels.stats.diagnostic import het_breuschpagan

from _harness import RECIPE, make_fits, recipe_toml
from refit.report import assemble, sources
from refit.report import diagnostics as dg
from refit.report.context import num, pct
from refit.report.html import report_html
from refit.report.inputs import load_run

GROUPED = recipe_toml(
    subset={"vegetation": ["grassland", "shrubland", "savanna"], "parent_material": "loess",
            "age_ka": {"min": 5}},
    candidates={"forms": ["linear", "quadratic"], "directions": ["inverse", "forward"]},
    validation={"scheme": "group-kfold", "folds": 4, "repeats": 2, "groups": "source",
                "seed": 7},
    intervals={"level": 0.9, "methods": ["analytic"]})


def by_gid(fig, gid):
    return [a for ax in fig.axes for a in ax.get_children() if a.get_gid() == gid]


class Text(HTMLParser):
    """The text of an HTML page, and the text inside elements with an id."""

    def __init__(self):
        super().__init__()
        self.parts, self.ids, self._open = [], {}, []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self._open.append(a.get("id"))
        if a.get("id"):
            self.ids[a["id"]] = []

    def handle_endtag(self, tag):
        if self._open:
            self._open.pop()

    def handle_data(self, data):
        self.parts.append(data)
        for i in self._open:
            if i:
                self.ids[i].append(data)

    def of(self, id_) -> str:
        return " ".join(" ".join(self.ids.get(id_, [])).split())


def page(html: str) -> Text:
    t = Text()
    t.feed(html)
    t.close()
    return t


@pytest.fixture(scope="module")
def grouped_run(tmp_path_factory):
    root = tmp_path_factory.mktemp("sources")
    return make_fits(root, GROUPED).parent


@pytest.fixture(scope="module")
def inp(grouped_run):
    return load_run(grouped_run)


@pytest.fixture(scope="module")
def section(inp):
    return sources.section(inp)


def plain_coverage(run_dir, candidate: str, scheme: str) -> pd.DataFrame:
    """Reference: coverage per source, pooled over repeats, from the run's files only."""
    oof = pd.read_csv(run_dir / "oof_predictions.csv")
    oof = oof[(oof.candidate == candidate) & (oof.scheme == scheme)]
    oof = oof.dropna(subset=["observed", "estimate", "lower", "upper"])
    records = pd.read_csv(run_dir.parent / "store" / "records.csv")
    oof = oof.merge(records[["profile_id", "source"]], on="profile_id", how="left")
    oof["inside"] = (oof.lower <= oof.observed) & (oof.observed <= oof.upper)
    return oof.groupby("source").agg(coverage=("inside", "mean"), n=("inside", "size"),
                                     soils=("profile_id", "nunique"))


def test_coverage_by_source_matches_pandas(grouped_run, inp, section):
    ref = plain_coverage(grouped_run, inp.candidate, "group-kfold")
    table = {r[0]: r for r in section["rows"]}
    assert set(table) == set(ref.index)
    for src, r in ref.iterrows():
        assert table[src][4] == pct(r.coverage)
        assert table[src][5] == str(int(r.n))
    # the pooled coverage is the leaderboard's (the same rows, scored the same way)
    board = pd.read_csv(grouped_run / "leaderboard.csv").set_index("candidate")
    pooled = (ref.coverage * ref.n).sum() / ref.n.sum()
    assert pooled == pytest.approx(board.loc[inp.candidate, "coverage"], abs=1e-12)
    # below nominal: exactly the sources whose reference coverage is under the level
    assert sorted(section["below"]) == sorted(ref.index[ref.coverage < 0.9])
    # the numbers behind the table, unformatted
    frame = inp.subset.frame.reset_index(drop=True)
    got = sources.coverage_by_group(inp.oof, sources.group_labels(frame, "source"),
                                    "group-kfold").set_index("group")
    np.testing.assert_allclose(got.loc[ref.index, "coverage"], ref.coverage, rtol=0,
                               atol=1e-12)
    assert (got.loc[ref.index, "n_soils"] == ref.soils).all()


def test_figure_draws_one_column_per_source(inp, section):
    fig = section["figure"]
    frame = inp.subset.frame.reset_index(drop=True)
    resid = pd.Series(np.asarray(inp.fit.result.residuals), name="r")
    med = resid.groupby(frame["source"].to_numpy()).median()
    order = med.reset_index().sort_values(["r", "index"]).iloc[:, 0].tolist()
    k = frame["source"].nunique()
    counts = frame["source"].value_counts()
    # a box for each source with at least 5 soils; fewer (TUGP-2016 has 1 here): points only
    assert (counts < 5).any()
    assert len(by_gid(fig, "source-box")) == int((counts >= 5).sum())
    assert len(by_gid(fig, "source-residuals")) == k
    ticks = [t.get_text().split("\n")[0] for t in fig.axes[1].get_xticklabels()]
    assert ticks == order                                  # sorted by median residual
    n_ticks = [t.get_text().split("\n")[1] for t in fig.axes[1].get_xticklabels()]
    assert n_ticks == [f"n = {counts[s]}" for s in order]
    # each strip holds its source's residuals
    for line, s in zip(by_gid(fig, "source-residuals"), order):
        np.testing.assert_allclose(np.sort(line.get_ydata()),
                                   np.sort(resid[frame["source"].to_numpy() == s]))
    below = by_gid(fig, "coverage-below")[0]
    drawn_below = [order[int(round(x))] for x in below.get_xdata()]
    assert drawn_below == section["below"] and len(drawn_below) >= 1
    ok = by_gid(fig, "coverage-ok")[0]
    assert len(ok.get_xdata()) + len(drawn_below) == k
    assert all(y >= 0.9 for y in ok.get_ydata())
    assert by_gid(fig, "nominal")[0].get_ydata()[0] == pytest.approx(0.9)


def test_between_source_sd_and_icc_match_statsmodels(inp, section):
    # The residuals are the OLS fit's (reference: statsmodels OLS on the same design) ...
    x, y = inp.fit.x[:, 0], np.asarray(inp.fit.y_model, dtype=float)
    X = np.vander(x, len(inp.fit.terms), increasing=True)
    assert inp.fit.estimator == "ols"
    res = sm.OLS(y, X).fit()
    np.testing.assert_allclose(inp.fit.result.residuals, res.resid, rtol=1e-7, atol=1e-7)
    # ... and their random-intercept model: statsmodels MixedLM, REML, r ~ 1, by source.
    d = pd.DataFrame({"r": res.resid, "g": inp.subset.frame["source"].to_numpy()})
    m = smf.mixedlm("r ~ 1", d, groups=d["g"]).fit(reml=True)
    tau2, s2 = float(m.cov_re.iloc[0, 0]), float(m.scale)
    assert tau2 > 1e-6 * s2              # this subset has between-source variance
    ri = section["random_intercept"]
    assert ri["between_sd"] == pytest.approx(np.sqrt(tau2), rel=1e-4)
    assert ri["within_sd"] == pytest.approx(np.sqrt(s2), rel=1e-4)
    assert ri["icc"] == pytest.approx(tau2 / (tau2 + s2), rel=1e-3)
    text = section["spread"]
    assert f"Between-source SD {num(np.sqrt(tau2), 3)} mm" in text
    assert f"within-source SD {num(np.sqrt(s2), 3)} mm" in text
    assert f"(ICC) {num(tau2 / (tau2 + s2), 2)}" in text
    assert f"{d.g.nunique()} groups by source, {len(d)} soils" in text


def test_breusch_pagan_matches_statsmodels(inp):
    infl = dg.influence(inp.fit)
    got = assemble.heteroscedasticity(inp, infl)
    X = np.vander(inp.fit.x[:, 0], len(inp.fit.terms), increasing=True)   # raw design
    lm, lm_p, f, f_p = het_breuschpagan(infl["residuals"], X)   # statsmodels, Koenker form
    assert got["lm"] == pytest.approx(lm, rel=1e-8)
    assert got["p"] == pytest.approx(lm_p, rel=1e-8)
    assert got["f"] == pytest.approx(f, rel=1e-8)
    assert got["df"] == X.shape[1] - 1
    assert f"LM = {lm:.3g}, df {X.shape[1] - 1}" in got["text"]
    assert got["changes"] == (lm_p < 0.05)


def test_breusch_pagan_sentence_on_a_funnel():
    # Seeded simulation: residual SD proportional to x (a funnel); statsmodels decides.
    rng = np.random.default_rng(11)
    x = rng.uniform(10, 100, 80)
    e = rng.normal(0, 0.05 * x)
    X = np.column_stack([np.ones_like(x), x])
    lm, p, _, _ = het_breuschpagan(e, X)
    bp = dg.breusch_pagan(e, X)
    assert (bp["lm"], bp["p"]) == pytest.approx((lm, p), rel=1e-8)
    assert p < 0.05
    text = assemble.bp_sentence(bp, ["bk_depth_cm"])
    assert text.startswith("The residual spread changes with bk_depth_cm")
    assert assemble.p_text(p) in text and "too narrow where the data spread most" in text
    flat = dg.breusch_pagan(rng.normal(0, 3, 80), X)
    assert flat["p"] > 0.05
    assert assemble.bp_sentence(flat, ["x"]).startswith("No evidence at the 5% level")


def test_report_page_shows_the_section_and_the_test(grouped_run, section):
    t = page(report_html(grouped_run))
    assert section["spread"] in t.of("between-source")
    table = t.of("sources-table")
    for r in section["rows"]:
        assert " ".join(c for c in r if c) in table
    assert "Breusch-Pagan LM =" in t.of("after-residuals")
    assert t.of("sources-absent") == ""
    assert "held out whole by group-kfold" in t.of("fig-sources")


def test_without_groups_the_section_says_why(grouped_run, inp, monkeypatch):
    # No [validation] groups and no source column: the section is absent, with the reason.
    frame = inp.subset.frame.drop(columns=["source"])
    bare = dataclasses.replace(inp, recipe=dataclasses.replace(inp.recipe, groups=None),
                               subset=dataclasses.replace(inp.subset, frame=frame))
    got = sources.section(bare)
    assert set(got) == {"absent"}
    assert "names no groups" in got["absent"] and "no 'source' column" in got["absent"]
    monkeypatch.setattr("refit.report.inputs.load_run", lambda *a, **k: bare)
    t = page(report_html(grouped_run))
    assert t.of("sources-absent") == got["absent"]
    assert t.of("fig-sources") == "" and t.of("between-source") == ""


def test_recipe_without_groups_falls_back_to_source(tmp_path):
    # A random k-fold recipe (no groups): the data's source column is used, and said so.
    run = make_fits(tmp_path, RECIPE).parent
    got = sources.section(load_run(run))
    assert got["column"] == "source"
    assert "names no groups; the data's 'source' column is used" in got["note"]
    assert "does not hold a source out whole" in got["caption"]


def test_group_column_rules():
    assert sources.group_column("region", ["region", "source"]) == ("region", "")
    col, why = sources.group_column("region", ["source"])
    assert col is None and "no such column" in why
    assert sources.group_column(None, ["source"])[0] == "source"
    assert sources.group_column(None, ["x"])[0] is None


def test_random_intercept_on_the_boundary_and_with_one_group():
    # Every group has the same mean (zero): REML puts the between variance on the
    # boundary. statsmodels MixedLM computed here agrees that it is (near) zero, with
    # Nelder-Mead: its default gradient optimiser stalls short of the boundary and says
    # it did not converge (so refit tries Nelder-Mead next).
    r = np.tile([-2.0, -1.0, 1.0, 2.0], 6) * np.repeat([1.0, 1.5, 0.5, 1.2, 0.8, 1.1], 4)
    g = np.repeat(list("abcdef"), 4)
    model = smf.mixedlm("r ~ 1", pd.DataFrame({"r": r, "g": g}), groups=g)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        assert not model.fit(reml=True).converged
        m = model.fit(reml=True, method="nm")
    assert m.converged and float(m.cov_re.iloc[0, 0]) <= 1e-6 * m.scale
    ri = dg.random_intercept(r, g)
    assert ri["boundary"] and ri["between_sd"] == 0.0 and ri["icc"] == 0.0
    assert ri["within_sd"] == pytest.approx(np.sqrt(m.scale), rel=1e-4)
    assert sources.spread_sentence(ri, "source", "mm").startswith(
        "No between-source variance detected")
    one = dg.random_intercept(r, ["a"] * r.size)
    assert one["problem"] and "at least two" in sources.spread_sentence(one, "source", "mm")


def test_a_mixed_fit_states_its_own_variance_components(inp):
    # The chosen candidate is a mixed fit: the section states its own between- and
    # within-source SDs and ICC, as statsmodels MixedLM (REML, map_mm ~ bk_depth_cm,
    # groups = source) computed here gives them, not a second model of its residuals.
    import refit

    frame = inp.subset.frame.reset_index(drop=True)
    mixed = refit.fit(frame, "map_mm", "bk_depth_cm", estimator="mixed", groups="source")
    got = sources.section(dataclasses.replace(inp, fit=mixed))
    m = smf.mixedlm("map_mm ~ bk_depth_cm", frame, groups=frame["source"]).fit(reml=True)
    tau2, s2 = float(m.cov_re.iloc[0, 0]), float(m.scale)
    assert m.converged and tau2 > 0.1 * s2          # a clear between-source variance
    ri = got["random_intercept"]
    assert ri["of"] == "fit"
    assert ri["between_sd"] == pytest.approx(np.sqrt(tau2), rel=1e-4)
    assert ri["within_sd"] == pytest.approx(np.sqrt(s2), rel=1e-4)
    assert ri["icc"] == pytest.approx(tau2 / (tau2 + s2), rel=1e-3)
    assert (ri["n_groups"], ri["n"]) == (frame["source"].nunique(), len(frame))
    text = got["spread"]
    assert f"Between-source SD {num(np.sqrt(tau2), 3)} mm" in text
    assert f"(ICC) {num(tau2 / (tau2 + s2), 2)}, from the chosen fit itself" in text
    assert "this fit's interval for a new source includes it" in text
    # the residuals drawn are the marginal ones (observed - fixed-effects line)
    resid = frame["map_mm"].to_numpy() - m.fittedvalues.to_numpy() + \
        np.asarray([m.random_effects[g].iloc[0] for g in frame["source"]])
    fig_pts = np.sort(np.concatenate([ln.get_ydata() for ln in
                                      by_gid(got["figure"], "source-residuals")]))
    np.testing.assert_allclose(fig_pts, np.sort(resid), rtol=1e-6, atol=1e-6)
    # a residual model of the same fit would say something else (the fit absorbs part of
    # the offsets in its slope differently): the section did not refit
    other = dg.random_intercept(resid, frame["source"].to_numpy())
    assert abs(other["between_sd"] - ri["between_sd"]) > 1e-3 * ri["between_sd"]


def test_a_mixed_fit_on_the_boundary_says_it_fell_back(inp):
    # Seeded invented data whose noise has a zero mean within every source: the source
    # means scatter less than independent soils would, so REML puts the between-source
    # variance at zero (statsmodels MixedLM computed here agrees) and the mixed
    # estimator falls back to pooled OLS (statsmodels OLS: the within-source SD stated).
    import refit

    frame = inp.subset.frame.reset_index(drop=True).copy()
    noise = pd.Series(np.random.default_rng(3).normal(0, 60, len(frame)))
    noise -= noise.groupby(frame["source"]).transform("mean")
    frame["map_mm"] = 200 + 4.0 * frame["bk_depth_cm"] + noise.to_numpy()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        m = smf.mixedlm("map_mm ~ bk_depth_cm", frame, groups=frame["source"]).fit(
            reml=True, method="nm")
    assert float(m.cov_re.iloc[0, 0]) < 1e-3 * m.scale
    mixed = refit.fit(frame, "map_mm", "bk_depth_cm", estimator="mixed", groups="source")
    assert mixed.result.details["fallback"] == "pooled-ols"
    got = sources.section(dataclasses.replace(inp, fit=mixed))
    ols = sm.OLS(frame["map_mm"].to_numpy(),
                 sm.add_constant(frame["bk_depth_cm"].to_numpy())).fit()
    ri = got["random_intercept"]
    assert ri["within_sd"] == pytest.approx(np.sqrt(ols.scale), rel=1e-9)
    assert (ri["between_sd"], ri["icc"]) == (0.0, 0.0)
    assert got["spread"].startswith("No between-source variance detected: the chosen fit")
    assert "fell back to pooled least squares" in got["spread"]


def test_coverage_labels_keep_off_the_nominal_line():
    # sources just under nominal (94% and 93.5% against 95%) had their labels drawn across the
    # dashed nominal line; each label's box now stays clear of it (invented numbers)
    from refit.report import figures as fg

    names = [f"S{i}" for i in range(9)]
    cov = np.array([0.94, 0.833, 0.769, 1.0, 1.0, 1.0, 1.0, 1.0, 0.935])
    resid = [np.linspace(-50, 50, 10) for _ in names]
    fig = fg.by_source(names, resid, [10] * 9, cov, level=0.95, y_label="MAP residual [mm]",
                       column="source", scheme="group-kfold")
    ax = fig.axes[1]
    renderer = fig.canvas.get_renderer()
    y_line = ax.transData.transform((0.0, 0.95))[1]
    labels = [t for t in ax.texts if t.get_gid() == "coverage-label"]
    assert len(labels) == 9
    for t in labels:
        box = t.get_window_extent(renderer)
        assert not box.y0 < y_line < box.y1, t.get_text()
