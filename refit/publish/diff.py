"""What changed between two coefficient files.

:func:`diff_files` reads both files (hash checked: a damaged file is never evaluated) and
compares, section by section:

- the **coefficients** term by term with their standard errors (square roots of the
  covariance diagonal), and the fit's residual standard error, degrees of freedom, n, R^2;
- the **domain**: each predictor's valid range and the domain flags (turning point);
- the **cross-validation skill** (scheme, RMSEP, bias, coverage, mean width, ...);
- the **provenance**: dataset name, version and sha256, subset filters and rows kept,
  recipe hash, form, estimator, direction, interval method and level;
- the **estimate and interval at reference values** of the predictors: by default the
  minimum, quartiles and maximum of the union of both files' valid ranges (each predictor at
  the same fraction of its range), evaluated from each file alone with
  :func:`refit.coefficients.load` and its ``predict``; values outside a file's range carry
  its flags;
- the version **bump** the changes call for (:func:`refit.publish.registry.required_bump`),
  only when the two files can be versions of one chain.

First of all it says whether the two files are **like with like** (:func:`comparison`):
versions of one model (the same function, variant and :data:`refit.publish.registry.MODEL_ITEMS`,
whatever data each was fitted on), or different functions, different variants (separate
version chains: no bump applies between them) or different models of one chain (a major
bump); with what differs among the function id, the variant, the model items, the subset
and the data. The numbers are compared either way.
"""

from __future__ import annotations

import math
from pathlib import Path

REFERENCE_FRACTIONS = (0.0, 0.25, 0.5, 0.75, 1.0)
FIT_FIELDS = ("residual_std_error", "df_resid", "n", "r_squared")
CV_FIELDS = ("scheme", "folds", "repeats", "groups", "rmsep", "mae", "bias", "r2_prediction",
             "coverage", "mean_width", "interval_score")
DOMAIN_FIELDS = ("turning_point", "turning_point_location", "turning_point_kind")


def _num(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _change(a, b):
    return b - a if _num(a) and _num(b) else None


def _row(name_key: str, name, a, b) -> dict:
    return {name_key: name, "a": a, "b": b, "change": _change(a, b), "same": a == b}


def _std_errors(content: dict) -> list:
    cov = content.get("covariance")
    if not isinstance(cov, list):
        return [None] * len(content.get("terms", []))
    return [math.sqrt(r[i]) if _num(r[i]) and r[i] >= 0 else None for i, r in enumerate(cov)]


def coefficient_rows(a: dict, b: dict) -> list[dict]:
    """One row per term of either file: value and standard error in each, the change."""
    ca = dict(zip(a.get("terms", []), zip(a.get("coefficients", []), _std_errors(a))))
    cb = dict(zip(b.get("terms", []), zip(b.get("coefficients", []), _std_errors(b))))
    terms = list(dict.fromkeys([*ca, *cb]))
    rows = []
    for t in terms:
        (va, sa), (vb, sb) = ca.get(t, (None, None)), cb.get(t, (None, None))
        rows.append({"term": t, "a": va, "b": vb, "change": _change(va, vb), "se_a": sa,
                     "se_b": sb, "same": va == vb})
    return rows


def _ranges(content: dict) -> dict:
    return {p["name"]: (p.get("valid_min"), p.get("valid_max"))
            for p in content.get("predictors", [])}


def domain_rows(a: dict, b: dict) -> list[dict]:
    """Valid range of each predictor and the domain flags, in each file."""
    ra, rb = _ranges(a), _ranges(b)
    rows = []
    for name in dict.fromkeys([*ra, *rb]):
        lo_a, hi_a = ra.get(name, (None, None))
        lo_b, hi_b = rb.get(name, (None, None))
        rows.append(_row("item", f"{name} valid_min", lo_a, lo_b))
        rows.append(_row("item", f"{name} valid_max", hi_a, hi_b))
    da, db = a.get("domain") or {}, b.get("domain") or {}
    for key in DOMAIN_FIELDS:
        if key in da or key in db:
            rows.append(_row("item", key, da.get(key), db.get(key)))
    return rows


def cv_rows(a: dict, b: dict) -> list[dict]:
    ca, cb = a.get("cv") or {}, b.get("cv") or {}
    return [_row("metric", k, ca.get(k), cb.get(k)) for k in CV_FIELDS if k in ca or k in cb]


def _filters(content: dict) -> str | None:
    flt = ((content.get("provenance") or {}).get("subset") or {}).get("filters")
    if flt is None:
        flt = ((content.get("provenance") or {}).get("recipe") or {}).get("subset")
    if flt is None:
        return None
    parts = []
    for f in flt:
        v = f.get("value")
        if f.get("kind") == "range":
            v = " ".join(f"{k} {x}" for k, x in v.items())
        parts.append(f"{f.get('column')} {f.get('kind')} {v}")
    return "; ".join(parts) or "(all rows)"


def provenance_rows(a: dict, b: dict) -> list[dict]:
    def get(c, *keys):
        for k in keys:
            c = c.get(k) if isinstance(c, dict) else None
        return c

    def recipe_sha(c):
        return get(c, "provenance", "recipe_sha256") or get(c, "provenance", "recipe", "sha256")

    items = [
        ("dataset", lambda c: get(c, "provenance", "dataset", "name")),
        ("dataset sheet", lambda c: get(c, "provenance", "dataset", "sheet")),
        ("dataset version", lambda c: get(c, "provenance", "dataset", "version")),
        ("dataset sha256", lambda c: get(c, "provenance", "dataset", "sha256")),
        ("subset filters", _filters),
        ("rows after subset", lambda c: get(c, "provenance", "subset", "rows_after")),
        ("recipe sha256", recipe_sha),
        ("form", lambda c: c.get("form")), ("estimator", lambda c: c.get("estimator")),
        ("direction", lambda c: c.get("direction")),
        ("interval method", lambda c: get(c, "interval", "method")),
        ("interval level", lambda c: get(c, "interval", "level")),
        ("software", lambda c: get(c, "provenance", "software", "refit")),
    ]
    rows = [_row("item", name, fn(a), fn(b)) for name, fn in items]
    # the worksheet of a workbook (schema 1.4.0) only when either file records one
    return [r for r, (name, fn) in zip(rows, items)
            if name != "dataset sheet" or fn(a) is not None or fn(b) is not None]


# ----------------------------------------------------------------------------- predictions
def reference_grid(a: dict, b: dict, at=None) -> dict | None:
    """``{predictor: values}`` at which both files are evaluated (None if they differ).

    ``at``: explicit values for a single predictor; default the minimum, quartiles and
    maximum of the union of both valid ranges.
    """
    import numpy as np

    ra, rb = _ranges(a), _ranges(b)
    if list(ra) != list(rb) or not ra:
        return None
    if at is not None:
        if len(ra) != 1:
            return None
        return {next(iter(ra)): np.asarray(at, dtype=float)}
    grid = {}
    for name in ra:
        lows = [v for v in (ra[name][0], rb[name][0]) if _num(v)]
        highs = [v for v in (ra[name][1], rb[name][1]) if _num(v)]
        if not lows or not highs:
            return None
        lo, hi = min(lows), max(highs)
        grid[name] = np.array([lo + f * (hi - lo) for f in REFERENCE_FRACTIONS])
    return grid


def _prediction(path, grid: dict, level):
    """estimate, lower, upper, flags (lists) of a file at the grid (from the file alone)."""
    import numpy as np

    from refit.coefficients import load

    eq = load(path)
    values = next(iter(grid.values())) if len(grid) == 1 else grid
    out = eq.predict(values, level=level)
    cols = {}
    for key in ("estimate", "lower", "upper", "flags"):
        # a DataFrame is read by column (DataFrame.flags is a pandas attribute)
        col = out[key] if hasattr(out, "columns") or isinstance(out, dict) else getattr(out, key)
        cols[key] = [x for x in np.asarray(col).tolist()]
    return cols


def reference_rows(path_a, path_b, a: dict, b: dict, *, at=None, level=None) -> list[dict]:
    """Estimate and interval of each file at the reference values, and the changes."""
    grid = reference_grid(a, b, at)
    if grid is None:
        return []
    pa, pb = _prediction(path_a, grid, level), _prediction(path_b, grid, level)
    rows = []
    for i in range(len(next(iter(grid.values())))):
        row = {name: float(v[i]) for name, v in grid.items()}
        for tag, p in (("a", pa), ("b", pb)):
            for key in ("estimate", "lower", "upper"):
                v = p[key][i]
                row[f"{key}_{tag}"] = float(v) if _num(v) else None
            row[f"flags_{tag}"] = p["flags"][i] or ""
        row["change_estimate"] = _change(row["estimate_a"], row["estimate_b"])
        wa = _change(row["lower_a"], row["upper_a"])
        wb = _change(row["lower_b"], row["upper_b"])
        row["width_a"], row["width_b"], row["change_width"] = wa, wb, _change(wa, wb)
        rows.append(row)
    return rows


# ----------------------------------------------------------------------------- like with like
def _dataset(c: dict, key: str):
    return ((c.get("provenance") or {}).get("dataset") or {}).get(key)


def _origin(c: dict):
    kind = (c.get("provenance") or {}).get("kind")
    return {"refit": "a refit", "literature": "a literature equation"}.get(kind, kind)


#: What a comparison names beside the model items: the chain and the data of each file.
CONTEXT_ITEMS = (("origin", _origin), ("subset", _filters),
                 ("dataset", lambda c: _dataset(c, "name")),
                 ("data version", lambda c: _dataset(c, "version")))


def comparison(a: dict, b: dict) -> dict:
    """Whether two coefficient files compare like with like, and what differs.

    Returns
    -------
    dict
        ``kind``: ``same-model`` (one function, one variant, the same model: B is A
        refitted or A itself), ``different-models`` (one function and variant, another
        model: a major bump in one chain), ``different-variants`` (separate version
        chains of one function), ``different-origins`` (a refit and a literature
        equation) or ``different-functions``; ``like_with_like`` (the first
        kind only); ``same_chain`` (a version bump applies between them); ``statement``
        (one plain sentence); ``differences``: ``{"item", "a", "b"}`` for each of the
        function id, the variant, the model items and the subset and data that differ.
        A candidate not yet published has no variant yet: it is compared with the other
        file's.
    """
    from refit.coefficients.format import DEFAULT_VARIANT, variant_of
    from refit.publish.registry import MODEL_ITEMS, model_summary

    fa, fb = a.get("function_id"), b.get("function_id")
    va, vb = variant_of(a), variant_of(b)
    diffs = []
    if fa != fb:
        diffs.append({"item": "function id", "a": fa, "b": fb})
    if va is not None and vb is not None and va != vb:
        diffs.append({"item": "variant", "a": va, "b": vb})
    model = [{"item": name, "a": get(a), "b": get(b)} for name, get in MODEL_ITEMS
             if get(a) != get(b)]
    context = [{"item": name, "a": get(a), "b": get(b)} for name, get in CONTEXT_ITEMS
               if get(a) != get(b)]
    diffs += model + context
    if fa != fb:
        kind = "different-functions"
        text = (f"Not like with like: A and B are different functions ({fa} and {fb}); no "
                "version bump applies between them.")
    elif _origin(a) != _origin(b):
        kind = "different-origins"
        text = (f"Not like with like: A is {_origin(a)} and B {_origin(b)} of {fa}; no "
                "version bump applies between them.")
    elif va is not None and vb is not None and va != vb:
        kind = "different-variants"
        text = (f"Not like with like: A and B are different variants of {fa} ({va} and "
                f"{vb}), each with its own version chain; no version bump applies between "
                "them.")
    elif model:
        kind = "different-models"
        text = (f"Not like with like: A and B are different models of {fa} "
                f"({model_summary(a)} and {model_summary(b)}); published after A in one "
                "variant, B would be a major version.")
    else:
        kind = "same-model"
        text = f"Like with like: the same model of {fa} ({model_summary(a)})"
        if context:
            text += ", fitted on other data"
        text += "."
    same_chain = kind in ("same-model", "different-models")
    chain = va or vb or DEFAULT_VARIANT
    if same_chain and chain != DEFAULT_VARIANT:
        text += f" Variant: {chain}."
    return {"kind": kind, "like_with_like": kind == "same-model",
            "same_chain": same_chain,
            "statement": text, "differences": diffs}


# ----------------------------------------------------------------------------- the diff
def diff_files(path_a, path_b, *, at=None, level=None) -> dict:
    """Compare two coefficient files (see the module docstring); JSON-ready dict.

    Raises
    ------
    UnreadableInputError
        A path does not exist or cannot be read.
    InvalidDataError
        A file is not a coefficient file: empty, not JSON, not an object, or its hash or
        schema is wrong (:func:`refit.coefficients.format.read_record`).
    """
    from refit.coefficients.format import read_record
    from refit.publish.registry import required_bump

    a, b = read_record(path_a), read_record(path_b)
    like = comparison(a, b)
    bump, changes = required_bump(a, b) if like["same_chain"] else (None, {})
    notes = []
    if [p["name"] for p in a.get("predictors", [])] != [p["name"] for p in b.get("predictors", [])]:
        notes.append("different predictors: no comparison at reference values")
    return {
        "a": _header(path_a, a), "b": _header(path_b, b), "comparison": like,
        "bump": bump, "changes": changes, "notes": notes,
        "coefficients": coefficient_rows(a, b),
        "fit": [_row("quantity", k, a.get(k), b.get(k)) for k in FIT_FIELDS],
        "domain": domain_rows(a, b), "cv": cv_rows(a, b),
        "provenance": provenance_rows(a, b),
        "at_reference": reference_rows(path_a, path_b, a, b, at=at, level=level),
    }


def _header(path, c: dict) -> dict:
    from refit.coefficients.format import variant_of

    return {"path": str(Path(path)), "function_id": c.get("function_id"),
            "variant": variant_of(c), "version": c.get("version"), "status": c.get("status"),
            "sha256": c.get("sha256"), "created": c.get("created"),
            "response": (c.get("response") or {}).get("name"),
            "unit": (c.get("response") or {}).get("unit")}
