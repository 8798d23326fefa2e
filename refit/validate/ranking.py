"""The ranking rule of the fit matrix, and the words that say why the winner won.

Ranking rule (:func:`rank_candidates`)
--------------------------------------
1. A candidate's intervals *cover* when the data do not show them falling short of the
   nominal level: the one-sided exact (Clopper-Pearson, 95 %) upper confidence bound of
   its out-of-fold coverage reaches the nominal level, counting n = the soils of the
   subset (repeats add no independent soils). Equivalently its coverage is at least
   :func:`refit.validate.skill.least_passing_coverage` (e.g. 92.0 % for a 95 % interval
   on 187 soils: a one-sided tolerance of 3.0 percentage points that shrinks as n grows).
   Over-coverage is not penalised here; the interval score below charges its width.
   Under a grouped scheme the out-of-fold predictions are of soils from held-out groups,
   which is how a fossil from a new source is predicted.
2. Covering candidates come first, ordered by the mean interval score under the
   recipe's scheme (Gneiting & Raftery 2007, JASA 102:359, eq. 43: width plus 2/alpha
   times each miss; lower is better); the others follow, ordered the same way.
3. Ties go to fewer coefficients, then to the label.

A *simpler* candidate is pointed out when a calibrated one with fewer coefficients than
the winner scores within 5 % of it.

An interval with an infinite limit (a group-level conformal interval with too few
sources for its level) covers every soil with infinite width: it counts as covering and its
interval score is infinite, so it is ranked last among the covering candidates; the
leaderboard's ``unbounded_reason`` and the verdict say why it is unbounded.
"""

from __future__ import annotations

import numpy as np

NEAR_FRACTION = 0.05   # a simpler candidate within 5 % of the winner's score is named


def coverage_tolerance(level: float, n: int) -> float:
    """How far below ``level`` [fraction] an out-of-fold coverage of n soils may fall and
    still not be shown to under-cover (one-sided; see the module notes)."""
    from refit.validate.skill import least_passing_coverage

    return max(0.0, level - least_passing_coverage(level, n)) if n > 0 else float("inf")


def rank_candidates(table, level: float, n: int):
    """Rank a leaderboard table by the documented rule; returns (ranked table, tolerance).

    ``table`` needs the columns ``candidate``, ``n_params``, ``coverage`` and
    ``interval_score``; ``coverage_upper`` (the one-sided 95 % upper confidence bound of
    the coverage), ``coverage_ok`` and ``rank`` (1 = best) are added.
    """
    from refit.validate.skill import coverage_upper_bound

    tol = coverage_tolerance(level, n)
    if len(table) == 0:
        return table.assign(coverage_upper=[], coverage_ok=[], rank=[]), tol
    t = table.copy()
    cov = t["coverage"].astype(float)
    t["coverage_upper"] = [coverage_upper_bound(c * n, n) if np.isfinite(c) and n > 0
                           else np.nan for c in cov]
    t["coverage_ok"] = (t["coverage_upper"] >= level - 1e-12).fillna(False).astype(bool)
    score = t["interval_score"].astype(float).fillna(np.inf)
    t = t.assign(_miss=~t["coverage_ok"], _score=score)
    t = t.sort_values(["_miss", "_score", "n_params", "candidate"], kind="mergesort")
    t = t.drop(columns=["_miss", "_score"]).reset_index(drop=True)
    t.insert(0, "rank", np.arange(1, len(t) + 1))
    return t, tol


def _pct(x: float) -> str:
    return f"{100 * x:.1f}%"


def explain(board, level: float, tol: float, scheme: str, unit: str = "") -> dict:
    """Why the top candidate wins, and a simpler one that is nearly as good (if any).

    ``unit`` is the response's unit as printed (e.g. ``mm``): the score, the width and the
    RMSEP are in it."""
    u = f" {unit}" if unit else ""
    rule = (f"mean interval score under {scheme} (lower is better) among candidates whose "
            f"out-of-fold coverage is not shown to fall short of the nominal {_pct(level)} "
            f"(at least {_pct(level - tol)}: the one-sided 95% exact binomial bound, "
            f"{100 * tol:.1f} percentage points below nominal at most); a candidate that "
            "falls short is never ranked above one that covers; ties to fewer coefficients")
    if len(board) == 0:
        return {"rule": rule, "winner": None, "why": "no candidate could be fitted",
                "simpler": None, "simpler_why": None, "unbounded": []}
    top = board.iloc[0]
    n_ok = int(board["coverage_ok"].sum())
    if top["coverage_ok"]:
        why = (f"{top['candidate']} has the lowest mean interval score "
               f"({top['interval_score']:.4g}{u}) under {scheme} of the {n_ok} "
               f"candidate(s) whose coverage is not shown to fall short of {_pct(level)} "
               f"(its coverage {_pct(top['coverage'])}, mean width {top['mean_width']:.4g}{u}, "
               f"RMSEP {top['rmsep']:.4g}{u})")
    else:
        why = (f"every candidate's out-of-fold coverage falls short of {_pct(level)} "
               f"(below {_pct(level - tol)}); "
               f"{top['candidate']} has the lowest mean interval score "
               f"({top['interval_score']:.4g}{u}) but its coverage is "
               f"{_pct(top['coverage'])}: "
               "treat every interval here as unreliable")
    unbounded = unbounded_notes(board)
    if _reason(top):
        why += f"; its interval is unbounded: {_reason(top)}"
    simpler, simpler_why = _simpler(board, top)
    return {"rule": rule, "winner": str(top["candidate"]), "why": why,
            "simpler": simpler, "simpler_why": simpler_why, "unbounded": unbounded}


def _reason(row):
    r = row.get("unbounded_reason") if hasattr(row, "get") else None
    return r if isinstance(r, str) and r else None


def unbounded_notes(board) -> list[str]:
    """One sentence per candidate whose out-of-fold intervals were unbounded, with why
    (e.g. too few sources for a group-level conformal interval at this level)."""
    if "unbounded_reason" not in board:
        return []
    return [f"{row['candidate']} is unbounded (infinite width, counted as covering, ranked "
            f"last among the covering candidates): {_reason(row)}"
            for _, row in board.iterrows() if _reason(row)]


def _simpler(board, top) -> tuple[str | None, str | None]:
    """A candidate with fewer coefficients within 5 % of the winner's score, if any."""
    fewer = board[(board["coverage_ok"] == top["coverage_ok"])
                  & (board["n_params"] < top["n_params"])]
    if not len(fewer):
        return None, None
    s = fewer.iloc[0]
    gap = s["interval_score"] / top["interval_score"] - 1
    if not s["interval_score"] <= top["interval_score"] * (1 + NEAR_FRACTION):
        return None, (f"no candidate with fewer coefficients comes within "
                      f"{_pct(NEAR_FRACTION)} of the winner's score; the best of them, "
                      f"{s['candidate']}, scores {_pct(gap)} worse ({s['interval_score']:.4g})")
    return str(s["candidate"]), (
        f"{s['candidate']} has {int(top['n_params'] - s['n_params'])} fewer coefficient(s) "
        f"and scores within {_pct(gap)} of the winner ({s['interval_score']:.4g}); prefer "
        "it unless the difference matters to you")


def optimism(board) -> dict | None:
    """How much random k-fold flatters: median ratio of the scheme's RMSEP and interval
    score to random k-fold's over the candidates (None without a k-fold run beside)."""
    if "kfold_rmsep" not in board or board["kfold_rmsep"].isna().all():
        return None
    r = (board["rmsep"] / board["kfold_rmsep"]).replace([np.inf, -np.inf], np.nan)
    s = (board["interval_score"] / board["kfold_interval_score"]).replace(
        [np.inf, -np.inf], np.nan)
    return {"median_rmsep_ratio": float(r.median()), "median_score_ratio": float(s.median())}


