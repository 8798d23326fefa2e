"""The posterior for climate of each paleosol from forward coefficient files (``refit apply
--posterior``).

Per paleosol and climate variable, every forward file with an analytic interval whose
feature the fossil table gives is a proxy; the measured features (decompacted and derived
as for the frequentist estimates) and their measurement SDs give

- on each forward file's own row, the posterior of that proxy alone;
- one ``posterior`` row per paleosol measured by two or more proxies: the combined
  posterior (the likelihoods multiplied for the one shared climate value), which is the
  answer, with the consistency test of the proxies (``proxy_chi2``, ``proxy_chi2_p``) and
  ``proxies-disagree`` where p < 0.05, the numbers in ``flag_details``.

Measurement SDs: a feature read as measured takes its ``<stem>_sd_<unit>`` column; a
feature computed from others (an index from oxides, a depth decompacted for burial) takes
the SD of its seeded Monte Carlo draws (the oxides' and the burial depth's SDs carried
through the formula). No SD at all: taken as 0 and flagged ``measurement-sd-missing``.

Inverse files and files whose only error figure is a published +- give no posterior (the
predictive density of the feature needs a forward fit with its covariance and residual SE;
see :mod:`refit.coefficients.posterior`): their rows keep empty posterior columns and
``posterior_note`` says why.

The prior and the grid of every posterior are recorded: ``posterior_prior`` per row, and
:func:`posterior_record` for the JSON written beside the CSV.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd

from refit.errors import RefitError, UsageError

#: columns a posterior adds to the results (``Posterior.columns`` plus what reproduces it)
POSTERIOR_COLUMNS = [
    "posterior_median", "posterior_mode", "posterior_lower", "posterior_upper",
    "posterior_hdi_lower", "posterior_hdi_upper", "posterior_hdi_pieces", "proxy_chi2",
    "proxy_chi2_p", "posterior_flags", "posterior_prior", "posterior_note",
]
COMBINED_ID = "posterior"


def parse_prior(text: str | None):
    """A :class:`refit.models.posterior.Prior` from ``uniform:LOW:HIGH`` or
    ``normal:MEAN:SD`` [climate unit]; None: the default (uniform over the calibration
    range).

    Raises
    ------
    UsageError
        Any other spelling, with the two accepted ones.
    """
    from refit.coefficients.posterior import normal_prior, uniform_prior

    if text is None or str(text).strip() == "":
        return None
    parts = [p.strip() for p in str(text).split(":")]
    how = "give --prior uniform:LOW:HIGH or normal:MEAN:SD (climate units), e.g. " \
          "uniform:200:1400"
    if len(parts) != 3 or parts[0] not in ("uniform", "normal"):
        raise UsageError(f"--prior {text!r} is not understood; {how}")
    try:
        a, b = float(parts[1]), float(parts[2])
    except ValueError:
        raise UsageError(f"--prior {text!r}: {parts[1]!r} and {parts[2]!r} must be numbers; "
                         f"{how}") from None
    return uniform_prior(a, b) if parts[0] == "uniform" else normal_prior(a, b)


def usable(record: dict) -> str:
    """Why a file gives no posterior ('' when it does)."""
    if record.get("direction") != "forward":
        return "inverse file: the posterior needs a forward fit (feature on climate)"
    method = (record.get("interval") or {}).get("method")
    if method != "analytic":
        return (f"interval {method!r}: the posterior needs a forward file with the analytic "
                "interval's covariance and residual SE")
    return ""


def measurement_sds(frame, inputs, preds, decompact, record, seed, n_draws, draws_fn,
                    base_columns) -> np.ndarray:
    """(m, K) measurement SDs of the predictors ``preds`` [their units]; NaN: none given.

    A predictor read as measured takes its SD column; one computed from other columns
    (index, decompacted depth) the SD of its Monte Carlo draws (``draws_fn``, seeded per
    row as the frequentist propagation)."""
    from refit.curate.fossils import sd_column

    m, out = len(frame), np.full((len(frame), len(preds)), np.nan)
    for k, p in enumerate(preds):
        if base_columns(p, decompact) == (p,):
            col = sd_column(p)
            if col in frame.columns:
                out[:, k] = pd.to_numeric(frame[col], errors="coerce").to_numpy(float)
            continue
        for i in range(m):
            rng = np.random.default_rng([int(seed), i])
            d, _ = draws_fn(frame, i, [p], decompact, record, rng, n_draws)
            if d is not None:
                v = d[:, 0][np.isfinite(d[:, 0])]
                out[i, k] = float(np.std(v, ddof=1)) if v.size > 1 else math.nan
    return out


def _prior_text(post) -> str:
    rec = {"prior": post.prior, "grid": post.grid, "level": post.level}
    if post.consistency_grid is not None:
        rec["consistency_grid"] = post.consistency_grid
    return json.dumps(rec, sort_keys=True)


def _fill(results: pd.DataFrame, where: np.ndarray, post, pick) -> None:
    """Write the posterior's columns into ``results`` rows ``where`` (rows ``pick`` of the
    posterior)."""
    for col, vals in post.columns().items():
        results.loc[where, col] = np.asarray(vals)[pick]
    results.loc[where, "posterior_prior"] = _prior_text(post)


def _disagree_text(post, i: int, names, unit: str) -> str:
    parts = ", ".join(f"{n} {post.proxy_mean[i, k]:.4g} ± {post.proxy_sd[i, k]:.3g} {unit}"
                      for k, n in enumerate(names) if np.isfinite(post.proxy_mean[i, k]))
    return (f"proxy consistency: chi2 = {post.chi2[i]:.3g} on {int(post.chi2_dof[i])} df, "
            f"p = {post.chi2_p[i]:.3g} (each proxy's own posterior mean ± SD: {parts})")


def add_posteriors(results: pd.DataFrame, equations, inputs, sds_for, *, prior=None,
                   level: float = 0.95) -> tuple[pd.DataFrame, list[dict], list[dict]]:
    """Posterior columns on each forward file's rows and one combined row per paleosol.

    Parameters
    ----------
    results : DataFrame
        The frequentist results (:data:`refit.apply.estimates.RESULT_COLUMNS`), rows in
        fossil order per file.
    equations : list of (str, Equation)
    inputs : DataFrame
        The predictor table (decompacted, indices derived), one row per fossil row.
    sds_for : callable
        ``sds_for(preds) -> (m, K)`` measurement SDs (:func:`measurement_sds`).
    prior : Prior, optional
    level : float

    Returns
    -------
    tuple
        The results with the posterior columns and the combined rows, the records of each
        posterior (prior, grid, files) and the problems (dicts).
    """
    from refit.coefficients.posterior import posterior_from_records

    out = results.copy()
    for col in POSTERIOR_COLUMNS:
        out[col] = np.nan if col not in ("posterior_flags", "posterior_prior",
                                         "posterior_note") else ""
    m = len(inputs)
    records, problems, combined = [], [], []
    groups: dict[str, list] = {}
    for label, eq in equations:
        rows = ((out["coefficient_file"] == label) & out["status"].ne("combined")).to_numpy()
        why = usable(eq.record)
        if why:
            out.loc[rows, "posterior_note"] = why
            continue
        if rows.sum() == m:
            groups.setdefault(eq.record["response"]["name"], []).append((label, eq, rows))
    for members in groups.values():
        combined += _group(out, members, inputs, sds_for, prior, level, records,
                           problems, posterior_from_records)
    if combined:
        out = pd.concat([out, pd.DataFrame(combined)], ignore_index=True)
    # a count: whole numbers, empty where no posterior was read (not 1.0 / NaN)
    out["posterior_hdi_pieces"] = pd.to_numeric(out["posterior_hdi_pieces"]).astype("Int64")
    return out, records, problems


def _group(out, members, inputs, sds_for, prior, level, records, problems, run):
    """Single-proxy posteriors of one climate variable's files, and the combined rows."""
    seen, proxies = set(), []
    for label, eq, rows in members:
        pred = eq.predictor_names[0]
        v = inputs[pred].to_numpy(float).copy()
        v[out.loc[rows, "problem"].fillna("").ne("").to_numpy()] = np.nan  # not usable
        sd = sds_for([pred])[:, 0]
        try:
            post = run([eq.record], v, sd, prior=prior, level=level)
        except RefitError as err:
            problems.append({"paleosol_id": "", "row": None, "file": label,
                             "message": f"{label}: no posterior: {err}"})
            out.loc[rows, "posterior_note"] = f"no posterior: {err}"
            continue
        _fill(out, np.flatnonzero(rows), post, slice(None))
        records.append(_record([label], post))
        if pred not in seen:             # one fit per feature enters the combination
            seen.add(pred)
            proxies.append((label, eq, pred, v, sd))
    if len(proxies) < 2:
        return []
    recs = [eq.record for _, eq, _, _, _ in proxies]
    V = np.column_stack([p[3] for p in proxies])
    S = np.column_stack([p[4] for p in proxies])
    try:
        post = run(recs, V, S, prior=prior, level=level)
    except RefitError as err:
        problems.append({"paleosol_id": "", "row": None, "file": "",
                         "message": f"combined posterior: {err}"})
        return []
    records.append(_record([p[0] for p in proxies], post))
    return _combined_rows(out, proxies, post, V, level)


def _record(labels, post) -> dict:
    return {"files": list(labels), "proxies": list(post.proxies), "prior": post.prior,
            "grid": post.grid, "consistency_grid": post.consistency_grid,
            "level": post.level}


def _combined_rows(out, proxies, post, V, level) -> list[dict]:
    """One result row per paleosol with two or more proxies measured."""
    first = out[(out["coefficient_file"] == proxies[0][0])
                & out["status"].ne("combined")].reset_index(drop=True)
    names = [p[2] for p in proxies]
    unit = str(first["unit"].iloc[0]) if len(first) else ""
    cols = post.columns()
    rows = []
    for i in np.flatnonzero(np.isfinite(V).sum(axis=1) >= 2):
        base = first.iloc[i]
        flags = str(post.flags[i])
        details = [_disagree_text(post, i, names, unit)]
        r = {c: None for c in out.columns}
        r.update({"paleosol_id": base["paleosol_id"], "row": base["row"],
                  "coefficient_file": " + ".join(p[0] for p in proxies),
                  "function_id": COMBINED_ID, "version": "", "status": "combined",
                  "candidate": "", "direction": "forward", "response": base["response"],
                  "unit": unit,
                  "predictors_used": " + ".join(f"{n}={V[i, k]:.4g}"
                                                for k, n in enumerate(names)),
                  "estimate": post.median[i], "lower": post.lower[i],
                  "upper": post.upper[i], "level": level,
                  "interval": f"posterior, {len(names)} proxies multiplied (equal-tailed)",
                  "lower_without_propagation": math.nan,
                  "upper_without_propagation": math.nan, "propagation": "none",
                  "flags": flags, "flag_details": "; ".join(details), "problem": "",
                  "posterior_prior": _prior_text(post), "posterior_note": ""})
        for col, vals in cols.items():
            r[col] = np.asarray(vals)[i]
        rows.append(r)
    return rows


def posterior_record(records: list[dict], level: float) -> dict:
    """The JSON written beside the CSV: what reproduces every posterior."""
    from refit.models.posterior import DISAGREE_P, N_GRID

    return {"what": "posterior for climate (refit apply --posterior)", "level": level,
            "default_grid_points": N_GRID, "disagree_p": DISAGREE_P,
            "measurement_sd": "the <stem>_sd_<unit> column for a feature read as measured; "
                              "the SD of the seeded Monte Carlo draws for an index or a "
                              "decompacted depth; none: 0, flagged measurement-sd-missing",
            "posteriors": records}


__all__ = ["COMBINED_ID", "POSTERIOR_COLUMNS", "UsageError", "add_posteriors",
           "measurement_sds", "parse_prior", "posterior_record", "usable"]
