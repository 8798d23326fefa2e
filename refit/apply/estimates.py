"""Apply coefficient files to fossil measurements: estimates, intervals, flags, propagation.

For each paleosol and each coefficient file whose predictors the table has, the estimate
and interval come from the file alone (:meth:`refit.coefficients.Equation.predict`), with
flags where the equation does not hold:

``outside-calibration-range``, ``beyond-turning-point``, ``unbounded``, ``two-roots``,
``two-rays`` (a forward line's set is two rays: ``lower``/``upper`` the ray holding the
estimate, the other ray in ``other_lower``/``other_upper``, NaN for other rows; taken at
the measured value, never propagated),
``open-below``/``open-above`` (the search window's edge) and ``truncated-at-bound`` (a
limit cut at a physical bound, e.g. MAP >= 0; the limit before the cut in
``lower_untruncated``/``upper_untruncated``) from the file's evaluation, ``setting-mismatch`` (the
paleosol's recorded setting is outside the subset the fit was made on, read from the file's
``provenance.subset.filters``), ``setting-not-recorded`` (the fit was filtered on a state
factor the paleosol does not record) and ``published-plus-minus-only`` (a published
equation whose interval is only its published +- figure), ``no-interval`` (a file that
gives no error figure at all), ``not-decompacted`` (a depth or thickness applied as
measured although the table gives a burial depth above zero: the equation expects the
value before burial; ``--decompact`` fixes it).

Measurement uncertainty (the ``<stem>_sd_<unit>`` columns) and, when decompacting, the
burial-depth uncertainty (``burial_depth_sd_km``) are propagated by seeded Monte Carlo:
each draw of the inputs is evaluated with its own interval, and the reported interval is
the central ``level`` interval of the mixture of the draws' predictive distributions (each
a Student t for analytic intervals, otherwise a split normal with the draw's limits). With
zero SDs every draw is the same and the mixture interval equals the file's interval.

References
----------
Sheldon, N.D., Tabor, N.J. (2009). Quantitative paleoenvironmental and paleoclimatic
reconstruction using paleosols. Earth-Science Reviews 95, 1-52 (report the uncertainty
with every estimate and apply a function only within its calibration domain; from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from refit._util.flagcodes import FLAG_TRUNCATED, UNTRUNCATED_COLUMNS
from refit.coefficients.format import CAUTION
from refit.errors import RefitError

from refit.apply.combine import FLAG_CORRELATED, FLAG_DISAGREE, combine_proxies  # noqa: F401
from refit.apply.propagation import N_DRAWS, mixture_interval, propagate, truncated_normal  # noqa: F401

FLAG_SETTING = "setting-mismatch"
FLAG_UNRECORDED = "setting-not-recorded"
FLAG_PUBLISHED = "published-plus-minus-only"
FLAG_NO_INTERVAL = "no-interval"
FLAG_NOT_DECOMPACTED = "not-decompacted"
CAUTIONS = (
    "These are research estimates with wide intervals, valid only within the calibration's "
    "domain and setting; they are not a basis for engineering, hazard or regulatory "
    "decisions.",
)
#: Which oxides each derived index needs (refit.soil.indices).
INDEX_INPUTS = {
    "cia": ("al2o3_wt", "cao_wt", "na2o_wt", "k2o_wt"),
    "cia_k": ("al2o3_wt", "cao_wt", "na2o_wt"),
    "calmag": ("al2o3_wt", "cao_wt", "mgo_wt"),
    "salinization": ("k2o_wt", "na2o_wt", "al2o3_wt"),
    "bases_alumina": ("cao_wt", "mgo_wt", "na2o_wt", "k2o_wt", "al2o3_wt"),
    "ca_alumina": ("cao_wt", "al2o3_wt"),
}


@dataclass
class ApplyResult:
    """Outcome of :func:`apply_equations`.

    ``results`` has one row per paleosol and coefficient file (rows that could not be
    evaluated keep their reason in ``problem``); ``decompaction`` the per-row record of
    the decompaction (or None); ``problems`` the file-level and row-level problems as
    dicts (``paleosol_id``, ``row``, ``file``, ``message``).
    """

    results: pd.DataFrame
    decompaction: pd.DataFrame | None
    problems: list[dict] = field(default_factory=list)
    cautions: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    #: what a user must read on the terminal (e.g. depths applied without decompaction)
    warnings: list[str] = field(default_factory=list)
    #: the checked fossil table, indexed by file row (sections and levels for ``section``)
    fossils: pd.DataFrame | None = None
    #: with ``posterior``: the prior, grid and files of every posterior (JSON beside the CSV)
    posteriors: list[dict] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.problems


# ----------------------------------------------------------------------------- pure parts
def setting_flags(record: dict, row: pd.Series) -> tuple[list[str], list[str]]:
    """Flags and details comparing a paleosol's recorded setting with the fit's subset."""
    from refit.select.subsets import filter_mask, parse_filter

    filters = ((record.get("provenance") or {}).get("subset") or {}).get("filters") or []
    flags, details = [], []
    for f in filters:
        col, kind, value = f["column"], f["kind"], f["value"]
        have = row.get(col) if col in row.index else None
        if have is None or pd.isna(have) or str(have).strip() == "":
            if FLAG_UNRECORDED not in flags:
                flags.append(FLAG_UNRECORDED)
            details.append(f"the fit kept {col} {_filter_text(kind, value)}; the paleosol "
                           f"does not record {col}")
            continue
        flt = parse_filter(col, value if kind != "one-of" else list(value))
        if not filter_mask(pd.DataFrame({col: [have]}), flt)[0]:
            if FLAG_SETTING not in flags:
                flags.append(FLAG_SETTING)
            details.append(f"{col} {have!r} is outside the fit's subset "
                           f"({col} {_filter_text(kind, value)})")
    return flags, details


def _filter_text(kind: str, value) -> str:
    if kind == "one-of":
        return "in [" + ", ".join(map(str, value)) + "]"
    if kind == "range":
        lo, hi = value.get("min"), value.get("max")
        return " and ".join(t for t in (f">= {lo:g}" if lo is not None else "",
                                        f"<= {hi:g}" if hi is not None else "") if t)
    return f"= {value!r}"


# ----------------------------------------------------------------------------- inputs
PUBLISHED_LEVEL = math.erf(1 / math.sqrt(2))  # +-1 standard error of a normal: 0.6827


def load_equations(paths):
    """Load coefficient files; a file that cannot be loaded becomes a problem, not a stop.

    Returns
    -------
    tuple
        ``[(path text, Equation), ...]`` and the problems (dicts).
    """
    from refit.coefficients import load

    out, problems = [], []
    for p in paths:
        try:
            out.append((str(p), load(p)))
        except RefitError as err:
            problems.append({"paleosol_id": "", "row": None, "file": str(p),
                             "message": str(err)})
    return out, problems


def base_columns(pred: str, decompact: bool) -> tuple[str, ...]:
    """Measured columns a predictor is computed from (oxides for an index; the depth
    and the burial depth for a decompacted depth)."""
    from refit.soil.decompaction import DECOMPACTED_COLUMNS

    if pred in INDEX_INPUTS:
        return INDEX_INPUTS[pred]
    if decompact and pred in DECOMPACTED_COLUMNS:
        return (pred, "burial_depth_km")
    return (pred,)


def _sd_name(col: str) -> str:
    from refit.curate.fossils import sd_column

    return sd_column(col)


def _inputs(frame: pd.DataFrame, decompact: bool, constants):
    """The predictor table (decompacted if asked, indices derived) and its record."""
    from refit.curate.fossils import decompact_frame
    from refit.soil.indices import derive_indices

    record = None
    work = frame
    if decompact:
        work, record = decompact_frame(frame, constants)
    if any(c in frame.columns for c in ("al2o3_wt", "cao_wt")):
        work = derive_indices(work)
    return work, record


def _draws(frame: pd.DataFrame, i: int, preds, decompact: bool, record, rng, n: int):
    """Monte Carlo draws (n, k) of the predictors of row ``i`` and what was varied, or
    ``(None, [])`` when the row gives no standard deviation for them."""
    from refit.soil.decompaction import decompact as dec
    from refit.soil.indices import derive_indices

    row = frame.iloc[i]
    varied, drawn = [], {}
    for p in preds:
        for c in base_columns(p, decompact):
            if c in drawn:
                continue
            sd_col = "burial_depth_sd_km" if c == "burial_depth_km" else _sd_name(c)
            sd = row.get(sd_col) if sd_col in row.index else None
            mean = float(row.get(c)) if c in row.index else math.nan
            if sd is not None and not pd.isna(sd) and not math.isnan(mean):
                varied.append(f"{c} (sd {float(sd):g})")
                drawn[c] = truncated_normal(rng, mean, float(sd), n)
            else:
                drawn[c] = np.full(n, mean)
    if not varied:
        return None, []
    cols = {}
    for p in preds:
        if p in INDEX_INPUTS:
            ox = pd.DataFrame({c: drawn[c] for c in INDEX_INPUTS[p]})
            cols[p] = derive_indices(ox)[p].to_numpy()
        elif decompact and record is not None and f"{p}_measured" in record.columns:
            rec = record.iloc[i]
            cols[p] = dec(drawn[p], drawn["burial_depth_km"], rec["initial_solidity"],
                          rec["compaction_k_per_km"])
        else:
            cols[p] = drawn[p]
    return np.column_stack([cols[p] for p in preds]), varied


# ----------------------------------------------------------------------------- apply
RESULT_COLUMNS = [
    "paleosol_id", "row", "coefficient_file", "function_id", "version", "variant", "status",
    "candidate", "direction", "response", "unit", "predictors_used", "estimate", "lower",
    "upper", "lower_untruncated", "upper_untruncated", "other_lower", "other_upper",
    "level", "interval",
    "lower_without_propagation",
    "upper_without_propagation", "propagation", "cv_coverage", "cv_scheme", "flags",
    "flag_details", "problem", "citation",
]


def apply_equations(equations, report, *, level: float | None = None,
                    decompact: bool = False, constants=None, seed: int = 0,
                    n_draws: int = N_DRAWS, combine: bool = False,
                    posterior: bool = False, prior=None) -> ApplyResult:
    """Evaluate coefficient files on a checked fossil table.

    Parameters
    ----------
    equations : list of (str, refit.coefficients.Equation)
        From :func:`load_equations`.
    report : refit.curate.checks.CheckReport
        The checked fossil table (:func:`refit.curate.fossils.read_fossils`); rows with errors
        are reported, not evaluated.
    level : float, optional
        Interval coverage; default each file's own (a published +- keeps its own).
    decompact : bool
        Decompact depths and thicknesses for burial first (recorded per row).
    constants : dict, optional
        Extra compaction constants (:func:`refit.soil.decompaction.load_constants`).
    seed : int
        Seed of the Monte Carlo draws (draws of one paleosol are shared by all files).
    n_draws : int
        Monte Carlo draws per paleosol.
    combine : bool
        Add combined estimates across proxies, weighted by cross-validated errors and
        tested for consistency (:func:`refit.apply.combine.combine_proxies`).
    posterior : bool
        Add the posterior for climate of forward files, one proxy and all proxies
        together (:func:`refit.apply.posterior.add_posteriors`).
    prior : refit.models.posterior.Prior, optional
        The posterior's prior (default uniform over the calibration range).

    Returns
    -------
    ApplyResult
    """
    frame = report.frame.reset_index(drop=True)
    rows = np.asarray(report.source_rows)
    ids = frame["paleosol_id"].astype("string").fillna("") if "paleosol_id" in frame \
        else pd.Series([""] * len(frame))
    rejected = _rejected(report)
    inputs, record = _inputs(frame, decompact, constants)
    problems = [{"paleosol_id": ids.iloc[i], "row": int(rows[i]), "file": "",
                 "message": "rejected by the checks: " + rejected[int(rows[i])]}
                for i in range(len(frame)) if int(rows[i]) in rejected]
    out, cautions = [], list(CAUTIONS)
    for label, eq in equations:
        preds = eq.predictor_names
        missing = [p for p in preds if p not in inputs.columns]
        if missing:
            problems.append({"paleosol_id": "", "row": None, "file": label,
                             "message": f"{label}: the fossil table lacks "
                             f"{', '.join(missing)} (needed by {eq.function_id}); this "
                             "file was not applied. Add the column(s) or leave the file "
                             "out."})
            continue
        cautions += [c for c in (eq.record.get("cautions") or [])
                     if c not in cautions and c != CAUTION]  # CAUTIONS says it already
        out += _apply_one(label, eq, frame, inputs, record, rows, ids, rejected, problems,
                          level=level, decompact=decompact, seed=seed, n_draws=n_draws)
    results = pd.DataFrame(out, columns=RESULT_COLUMNS)
    lv = 0.95 if level is None else level
    if combine and len(results):
        recs = {label: eq.record for label, eq in equations}
        results = pd.concat([results, combine_proxies(results, lv, recs)],
                            ignore_index=True)
    posteriors = []
    if posterior and len(results):
        results, posteriors = _posteriors(results, equations, frame, inputs, record,
                                          problems, decompact=decompact, seed=seed,
                                          n_draws=n_draws, prior=prior, level=lv)
    return ApplyResult(results, record, problems, cautions, list(report.notes),
                       burial_warnings(results), frame.set_axis(rows), posteriors)


def _posteriors(results, equations, frame, inputs, record, problems, *, decompact, seed,
                n_draws, prior, level):
    """The results with the posterior columns and rows (:mod:`refit.apply.posterior`)."""
    from refit.apply.posterior import add_posteriors, measurement_sds

    def sds_for(preds):
        return measurement_sds(frame, inputs, preds, decompact, record, seed, n_draws,
                               _draws, base_columns)

    results, records, more = add_posteriors(results, equations, inputs, sds_for,
                                            prior=prior, level=level)
    problems += more
    return results, records


def burial_warnings(results: pd.DataFrame) -> list[str]:
    """The terminal note for rows flagged ``not-decompacted`` (empty when none)."""
    if not len(results):
        return []
    hit = results[results["flags"].fillna("").str.split(";").apply(
        lambda f: FLAG_NOT_DECOMPACTED in f)]
    if hit.empty:
        return []
    files = ", ".join(dict.fromkeys(hit["function_id"].astype(str)))
    return [f"{len(hit)} estimate(s) ({files}) used depths or thicknesses as measured, "
            "although the fossil table gives a burial depth: they are compacted, so the "
            "estimates are biased (flag not-decompacted). Rerun with --decompact (and "
            "--compaction-constants FILE for soil orders refit has no constants for; "
            "see the README, 'Burial and decompaction')."]


def _rejected(report) -> dict[int, str]:
    err = report.errors
    err = err[err["row"].notna()]
    return {int(r): "; ".join(f"{c} = {v!r}: {m}" for c, v, m in
                              zip(g["column"], g["value"], g["message"]))
            for r, g in err.groupby("row")}


def _apply_one(label, eq, frame, inputs, record, rows, ids, rejected, problems, *,
               level, decompact, seed, n_draws) -> list[dict]:
    """Rows of results for one coefficient file."""
    rec = eq.record
    preds = eq.predictor_names
    iv = rec["interval"]
    published = iv["method"] == "published"
    lvl = None if published else level
    try:
        pred = eq.predict(inputs[preds].astype(float), lvl)
    except RefitError as err:
        problems.append({"paleosol_id": "", "row": None, "file": label,
                         "message": f"{label}: {err}"})
        return []
    mc_level = PUBLISHED_LEVEL if published else float(pred.level or 0.95)
    df = float(rec["df_resid"]) if iv["method"] == "analytic" and rec.get("df_resid") \
        and rec["direction"] == "inverse" else None
    base = _file_fields(label, rec, None if published else pred.level)
    decomp_cols = set() if record is None else {
        c[:-len("_measured")] for c in record.columns if c.endswith("_measured")}
    out = []
    for i in range(len(frame)):
        r = dict(base, paleosol_id=ids.iloc[i], row=int(rows[i]))
        used = ", ".join(f"{p}={inputs[p].iloc[i]:.4g}" for p in preds)
        if decompact and any(p in decomp_cols for p in preds):
            used += " (decompacted)"
        r.update(predictors_used=used, estimate=math.nan, lower=math.nan, upper=math.nan,
                 lower_untruncated=math.nan, upper_untruncated=math.nan,
                 other_lower=math.nan, other_upper=math.nan,
                 lower_without_propagation=math.nan, upper_without_propagation=math.nan,
                 propagation="", flags="", flag_details="", problem="")
        r["problem"] = _row_problem(i, rows, rejected, preds, inputs, record, decomp_cols)
        if r["problem"]:
            out.append(r)
            continue
        flags, details = _row_flags(rec, str(pred.flags[i]), frame.iloc[i])
        if not decompact:
            _burial_flag(preds, frame.iloc[i], flags, details)
        r.update(estimate=pred.estimate[i], lower=pred.lower[i], upper=pred.upper[i],
                 lower_untruncated=_at(pred.lower_untruncated, i),
                 upper_untruncated=_at(pred.upper_untruncated, i),
                 other_lower=_at(pred.other_lower, i), other_upper=_at(pred.other_upper, i),
                 lower_without_propagation=pred.lower[i],
                 upper_without_propagation=pred.upper[i], propagation="none")
        rng = np.random.default_rng([int(seed), i])
        draws, varied = _draws(frame, i, preds, decompact, record, rng, n_draws)
        if draws is not None and iv["method"] != "none":
            r.update(propagate(eq, draws, lvl, mc_level, df, varied, seed, flags, details))
        truncation_flag(r, flags, details, physical_bounds(rec))
        r["flags"] = ";".join(dict.fromkeys(flags))
        r["flag_details"] = "; ".join(details)
        out.append(r)
    return out


def _at(values, i: int) -> float:
    """``values[i]``, NaN when the prediction gave no such column."""
    return math.nan if values is None else float(values[i])


def physical_bounds(rec: dict) -> tuple[float, float]:
    """A forward file's physical bounds of climate (``interval.inversion.bounds``;
    -inf / +inf where none is stated, and for inverse files)."""
    b = ((rec.get("interval") or {}).get("inversion") or {}).get("bounds") or (None, None)
    return (-math.inf if b[0] is None else float(b[0]), math.inf if b[1] is None else float(b[1]))


def truncation_flag(r: dict, flags: list, details: list, bounds) -> None:
    """Flag ``truncated-at-bound`` (and say which limit and where it was) exactly where a
    limit of the row ``r`` was cut at a physical bound: its ``lower_untruncated`` or
    ``upper_untruncated`` is set. The evaluation's flag is replaced, so a Monte Carlo
    interval that no longer reaches the bound is not flagged, and one that does is."""
    flags[:] = [f for f in flags if f != FLAG_TRUNCATED]
    said = []
    for side, name, bound in (("lower", "lower_untruncated", bounds[0]),
                              ("upper", "upper_untruncated", bounds[1])):
        v = r.get(name)
        if v is not None and not pd.isna(v):
            said.append(f"the {side} limit reached {float(v):.4g} {r.get('unit') or ''}"
                        .rstrip() + f", past the physical bound {bound:g}, and is cut "
                        f"there ({name} keeps it)")
    if said:
        flags.append(FLAG_TRUNCATED)
        details.extend(said)


def truncated_sides(rows: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Masks of the rows whose lower / upper limit was cut at a physical bound: flagged
    ``truncated-at-bound`` with the limit before the cut kept on that side (a table
    without those columns, e.g. written by an older refit: no side is known)."""
    flagged = np.array([FLAG_TRUNCATED in str(f or "").split(";") for f in rows["flags"]],
                       dtype=bool)
    out = []
    for col in UNTRUNCATED_COLUMNS:
        kept = (~np.isnan(pd.to_numeric(rows[col], errors="coerce").to_numpy(float))
                if col in rows else np.zeros(len(rows), dtype=bool))
        out.append(flagged & kept)
    return out[0], out[1]


def _file_fields(label: str, rec: dict, level) -> dict:
    """The columns every result row of one coefficient file shares."""
    from refit.coefficients.citation import short_citation
    from refit.coefficients.format import variant_of

    iv, cv = rec["interval"], rec.get("cv") or {}
    return {"citation": short_citation(rec), "coefficient_file": label, "function_id": rec["function_id"],
            "version": rec["version"], "variant": variant_of(rec) or "",
            "status": rec.get("status", ""),
            "candidate": rec.get("candidate") or "", "direction": rec["direction"],
            "response": rec["response"]["name"], "unit": rec["response"].get("unit", ""),
            "level": level, "interval": iv.get("label") or iv["method"],
            "cv_coverage": cv.get("coverage"), "cv_scheme": cv.get("scheme", "")}


def _row_flags(rec: dict, predicted: str, fossil_row) -> tuple[list[str], list[str]]:
    """Flags and their explanations for one fossil row: the prediction's own, the
    soil-setting checks, and what the file's interval is (published +-, none)."""
    method = rec["interval"]["method"]
    flags = [f for f in predicted.split(";") if f]
    sflags, details = setting_flags(rec, fossil_row)
    flags += sflags
    details = list(details)
    if method == "published":
        flags.append(FLAG_PUBLISHED)
        details.append("the interval is the published ± (one standard error of the "
                       "regression), not a prediction interval")
    if method == "none":
        flags.append(FLAG_NO_INTERVAL)
        details.append("the file gives no error figure: estimate only")
    return flags, details


def _burial_flag(preds, fossil_row, flags: list, details: list) -> None:
    """Flag a depth or thickness applied as measured in a row that was buried."""
    from refit.soil.decompaction import DECOMPACTED_COLUMNS

    depth = [p for p in preds if p in DECOMPACTED_COLUMNS]
    burial = fossil_row.get("burial_depth_km") if "burial_depth_km" in fossil_row.index \
        else None
    if not depth or burial is None or pd.isna(burial) or float(burial) <= 0:
        return
    flags.append(FLAG_NOT_DECOMPACTED)
    details.append(f"{', '.join(depth)} applied as measured, compacted under "
                   f"{float(burial):g} km of burial; the equation expects the value before "
                   "burial: rerun with --decompact")


def _row_problem(i, rows, rejected, preds, inputs, record, decomp_cols) -> str:
    if int(rows[i]) in rejected:
        return "rejected by the checks: " + rejected[int(rows[i])]
    if record is not None:
        why = record["decompaction_problem"].iloc[i]
        used = [p for p in preds if p in decomp_cols]
        if why and used:
            return f"not decompacted ({why}); {', '.join(used)} cannot be used"
    empty = [p for p in preds if pd.isna(inputs[p].iloc[i])]
    if empty:
        return f"no value for {', '.join(empty)} in this row"
    return ""


def apply_files(coefficient_files, fossils, *, level=None, decompact=False,
                constants_file=None, seed=0, n_draws=N_DRAWS, combine=False,
                vocabularies=None, posterior=False, prior=None,
                ignore_columns=(), consumed=()) -> ApplyResult:
    """:func:`apply_equations` from paths: coefficient files, a fossil table (path, or a
    frame already holding canonical columns) and an optional compaction-constants file.

    ``ignore_columns`` names unmapped columns of the fossil table to go on without
    (``refit apply --ignore-columns``; an unmapped column that looks like a measurement SD
    stops the run otherwise); ``consumed`` names columns the caller reads itself.

    Raises
    ------
    RefitError
        The fossil table cannot be read, or no coefficient file could be loaded (the
        first file's error is raised).
    """
    from refit.soil.decompaction import load_constants
    from refit.curate.fossils import check_fossil_frame, read_fossils

    constants = load_constants(constants_file) if constants_file else None
    equations, problems = load_equations(coefficient_files)
    if not equations:
        from refit.coefficients import load

        load(coefficient_files[0])  # raises the first file's own error
    if isinstance(fossils, pd.DataFrame):
        report = check_fossil_frame(fossils, vocabularies=vocabularies, path="--at",
                                    constants=constants)
    else:
        report = read_fossils(fossils, vocabularies=vocabularies, constants=constants,
                              ignore_columns=ignore_columns, consumed=consumed)
    if report.table_errors().shape[0]:
        from refit.errors import InvalidDataError

        te = report.table_errors()
        raise InvalidDataError(f"{report.path}: " + "; ".join(te["message"]) +
                               " (run `refit check --kind fossil` for every problem)")
    result = apply_equations(equations, report, level=level, decompact=decompact,
                             constants=constants, seed=seed, n_draws=n_draws,
                             combine=combine, posterior=posterior, prior=prior)
    result.problems[:0] = problems
    return result
