"""The numbers and words of the report, formatted for the template (no HTML here)."""

from __future__ import annotations

import math
import os
import shlex
from pathlib import Path

import numpy as np

from refit.report.equations import equation_text, lhs_text, term_text, used_equation



def num(v, digits: int = 4) -> str:
    """A number with ``digits`` significant digits; blank for missing values."""
    if v is None:
        return ""
    try:
        f = float(v)
    except (TypeError, ValueError):
        return str(v)
    if math.isnan(f):
        return ""
    if math.isinf(f):
        return "∞" if f > 0 else "-∞"
    return f"{f:.{digits}g}"


def pct(v, digits: int = 1) -> str:
    """A fraction as a percentage."""
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return ""
    return f"{100 * float(v):.{digits}f}%"


def shown_path(path) -> str:
    """A path as a reader should see it: relative to the working folder when inside it
    (so a report never carries one machine's absolute paths), else as recorded."""
    if not path:
        return ""
    p = Path(str(path))
    try:
        rel = os.path.relpath(p.resolve(), Path.cwd().resolve())
    except ValueError:
        return str(path)
    return str(path) if rel.startswith("..") else rel


def equation(record: dict, fit) -> dict:
    """The chosen fit's equation as used for its estimates, and one row per coefficient.

    For split-conformal the estimates come from the training part's fit: that equation is
    shown (without standard errors, which belong to the full-data fit) and ``note`` says
    so and gives the full-data fit beside it.
    """
    terms = list(record["terms"])
    used = used_equation(record)
    b = np.asarray(used["coefficients"], dtype=float)
    se = fit.std_errors.to_numpy(dtype=float)
    if used["source"] != "full-data":
        se = np.full(len(terms), np.nan)
    lhs = lhs_text(record)
    if lhs == (record.get("equation") or {}).get("y") and fit.form.log_response:
        lhs = f"ln({lhs})"
    text = equation_text(terms, b, lhs, None if used["note"] else se)
    rows = [{"term": term_text(t), "coefficient": num(c, 6), "std_error": num(s, 4),
             "t": num(c / s, 3) if s > 0 else ""} for t, c, s in zip(terms, b, se)]
    eq = record.get("equation") or {}
    return {"text": text, "rows": rows, "note": used["note"],
            "residual_se": num(record.get("residual_std_error"))
            + _unit_suffix(record, lhs, fit.form.log_response),
            "df": df_text(record.get("df_resid")), "n": record.get("n"),
            "r_squared": num(record.get("r_squared"), 3),
            "smearing": num(eq.get("smearing")) if eq.get("smearing") else ""}


def _unit_suffix(record: dict, lhs: str, log_response: bool) -> str:
    """`` mm``: the unit of the equation's left-hand side (its residuals are in it); none
    for a log response or a column the file gives no unit for."""
    if log_response or lhs.startswith("ln("):
        return ""
    cols = [record.get("response") or {}, *(record.get("predictors") or [])]
    unit = next((c.get("unit") for c in cols if c.get("name") == lhs), None)
    if not unit:
        return ""
    from refit.curate.schema import unit_notation

    return f" {unit_notation(unit)}"


def df_text(df) -> str:
    """Residual degrees of freedom as read: a whole number as it is, a fractional one (a
    mixed fit's, e.g. Satterthwaite's) to one decimal."""
    if df is None:
        return ""
    f = float(df)
    if math.isnan(f):
        return ""
    return f"{f:.0f}" if f == round(f) else f"{f:.1f}"


def direction_words(fit) -> str:
    """How the equation is used, in one sentence."""
    if fit.direction == "inverse":
        return (f"Inverse fit: {fit.response} regressed on {', '.join(fit.predictors)} and "
                "applied directly (estimates shrink toward the calibration mean).")
    return (f"Forward fit: {fit.y_name} regressed on {fit.response} (the way the soil "
            f"responds), inverted as a classical calibration to estimate {fit.response} "
            "from a measured value, with its own interval.")


_BOARD = (("rank", "#", None), ("candidate", "candidate", None), ("rmsep", "RMSEP", num),
          ("bias", "bias", num), ("coverage", "coverage", pct),
          ("mean_width", "mean width", num), ("interval_score", "interval score", num),
          ("r2_prediction", "R² out of fold", lambda v: num(v, 3)),
          ("r2_in_sample", "R² in sample", lambda v: num(v, 3)), ("aic", "AIC", num),
          ("direction", "direction", None))


def leaderboard(board, chosen: str) -> dict:
    """Header and formatted rows of the leaderboard (every candidate, ranked)."""
    rows = []
    for rec in board.to_dict(orient="records"):
        cells = [f(rec.get(k)) if f else str(rec.get(k, "")) for k, _, f in _BOARD
                 if k in board.columns]
        rows.append({"cells": cells, "chosen": rec["candidate"] == chosen,
                     "honest": bool(rec.get("coverage_ok"))})
    return {"header": [h for k, h, _ in _BOARD if k in board.columns], "rows": rows,
            "any_short": any(not r["honest"] for r in rows)}


def cv_comparison(inp) -> dict:
    """The recipe's scheme beside random k-fold: per-candidate numbers and the optimism."""
    bj = inp.board_json
    main, kfold = bj.get("scheme") or {}, bj.get("compared_with")
    details = (bj.get("split_details") or {}).get("main") or {}
    opt = (bj.get("verdict") or {}).get("optimism")
    words = _scheme_words(main, details)
    out = {"scheme": words, "random": _scheme_words(kfold, {}) if kfold else None,
           "optimism": None, "rows": [],
           "scheme_name": main.get("name") or ""}
    if opt:
        verb = ("Random k-fold flatters" if opt["median_rmsep_ratio"] > 1
                else "Random k-fold does not flatter here")
        out["optimism"] = (f"{verb}: under {main.get('name')} the RMSEP is "
                           f"{opt['median_rmsep_ratio']:.2f}× and the interval score "
                           f"{opt['median_score_ratio']:.2f}× random k-fold's (median over "
                           "candidates).")
    for r in inp.board.to_dict(orient="records"):
        out["rows"].append([str(r["rank"]), r["candidate"], num(r.get("rmsep")),
                            num(r.get("kfold_rmsep")), num(r.get("rmsep_ratio"), 3),
                            pct(r.get("coverage")), pct(r.get("kfold_coverage")),
                            num(r.get("interval_score")), num(r.get("kfold_interval_score"))])
    return out


def _scheme_words(s: dict, details: dict) -> str:
    if not s:
        return ""
    text = f"{s.get('name')}, {s.get('folds')} folds × {s.get('repeats')} repeat(s)"
    if s.get("groups"):
        text += f", grouped by {s['groups']}"
        if details.get("n_groups"):
            text += f" ({details['n_groups']} groups)"
    if s.get("block_km"):
        text += f", blocks of {s['block_km']} km"
    return text + f", seed {s.get('seed')}"


def flags(inp, facts: dict) -> list[str]:
    """Everything a reader should know before using the chosen fit."""
    out = []
    row = inp.board[inp.board["candidate"] == inp.candidate].iloc[0]
    verdict = inp.board_json.get("verdict") or {}
    if not bool(row.get("coverage_ok")):
        level = inp.board_json.get("level")
        least = level - inp.board_json.get("coverage_tolerance", 0.0)
        out.append(f"The chosen candidate's out-of-fold coverage ({pct(row['coverage'])}) "
                   f"falls short of the nominal {pct(level, 0)} (below {pct(least)}, the "
                   "one-sided 95% exact binomial bound): its intervals are too narrow for "
                   "a soil like the held-out ones.")
    if verdict.get("simpler"):
        out.append(verdict.get("simpler_why"))
    n_bad = int((~inp.board["coverage_ok"].astype(bool)).sum())
    if n_bad:
        out.append(f"{n_bad} of {len(inp.board)} candidates fall short of the nominal "
                   f"coverage under {row['scheme']}; they are ranked after every candidate "
                   "that covers.")
    out += list((inp.record.get("domain") or {}).get("cautions") or [])
    out += list(((inp.record.get("cv") or {}).get("details") or {}).get("cautions") or [])
    out += _oof_flags(inp.oof)
    if facts.get("influential"):
        out.append("Influential records (Cook's distance or leverage above the guides): "
                   + ", ".join(facts["influential"]) + ".")
    het = facts.get("heteroscedasticity") or {}
    if het.get("changes"):
        out.append(f"The residual spread changes with {', '.join(inp.fit.x_names)} "
                   f"(Breusch-Pagan p = {het['p']:.2g}): see below the residual figure.")
    out += [f"Subset: {n}" for n in (inp.run.get("subset") or {}).get("notes") or []]
    return [f for f in out if f]


def _oof_flags(oof) -> list[str]:
    if "flags" not in oof or oof["flags"].isna().all():
        return []
    counts = oof["flags"].dropna().astype(str).str.split(";").explode().value_counts()
    return [f"{int(c)} of {len(oof)} out-of-fold predictions were flagged '{f}'."
            for f, c in counts.items() if f]


def recipe_path(run: dict) -> str:
    """The recipe as the fit command named it (run.json keeps only its file name)."""
    cmd = run.get("command") or []
    recorded = str((run.get("recipe") or {}).get("path") or "")
    if len(cmd) > 2 and cmd[1] == "fit" and Path(cmd[2]).name == Path(recorded).name:
        return cmd[2]
    return shown_path(recorded)


def sentence(text: str) -> str:
    """``text`` as a sentence: capital first letter, a full stop at the end."""
    text = str(text).strip()
    if not text:
        return text
    text = text[0].upper() + text[1:]
    return text if text.endswith((".", "!", "?")) else text + "."


def cautions_and_flags(inp, flag_list: list[str]) -> dict:
    """The banner's cautions and the flags list: the banner holds the general caution(s)
    of the run (research use, wide intervals); a caution of this fit alone (its domain,
    its interval method, a mixed fit's between-source note) goes to the flags list as a
    sentence, once, beside the other flags."""
    general = list(dict.fromkeys(inp.run.get("cautions") or []))
    rec = inp.record.get("cautions") or []
    if not general and rec:
        general = [rec[0]]  # a run without its own: the file's first (refit's caution)
    seen = {sentence(f) for f in flag_list}
    extra = [sentence(c) for c in dict.fromkeys(rec)
             if c not in general and sentence(c) not in seen]
    return {"cautions": general, "flags": [*flag_list, *extra]}


def why_chosen(inp) -> str:
    """Why this candidate is reported: the run's verdict, or that it was asked for."""
    verdict = inp.board_json.get("verdict") or {}
    if verdict.get("winner") == inp.candidate:
        return str(verdict.get("why") or "")
    rank = int(inp.board.loc[inp.board["candidate"] == inp.candidate, "rank"].iloc[0])
    return (f"{inp.candidate} (rank {rank}) is reported as asked (--candidate); the run's "
            f"top candidate is {verdict.get('winner')}: {verdict.get('why')}")


def build(inp, figures: list[dict], facts: dict, *, report_command: list[str] | None) -> dict:
    """The template's context."""
    ds = inp.run.get("dataset") or {}
    sub = inp.run.get("subset") or {}
    rec = inp.record
    fit_cmd = inp.run.get("command") or []
    return {
        "title": f"{rec['function_id']}: {inp.candidate}",
        "function_id": rec["function_id"], "candidate": inp.candidate,
        "response": rec["response"], "predictors": rec["predictors"],
        "dataset": {"kind": ds.get("kind"), "name": ds.get("name"), "version": ds.get("version"),
                    "sha256": ds.get("sha256"), "rows": ds.get("rows"),
                    "path": shown_path(ds.get("path")),
                    # the worksheet read: the coefficient file's (schema 1.4.0), else run.json's
                    "sheet": (((rec.get("provenance") or {}).get("dataset") or {}).get("sheet")
                              or ds.get("sheet"))},
        "subset": {"before": sub.get("rows_before"), "after": sub.get("rows_after"),
                   "steps": sub.get("steps") or []},
        "recipe": {"path": recipe_path(inp.run),
                   "sha256": (inp.run.get("recipe") or {}).get("sha256"),
                   "text": (inp.run.get("recipe") or {}).get("text")},
        "verdict": inp.board_json.get("verdict") or {},
        "why": why_chosen(inp),
        "leaderboard": leaderboard(inp.board, inp.candidate),
        "skipped": inp.board_json.get("skipped") or [],
        "equation": equation(rec, inp.fit), "direction": direction_words(inp.fit),
        "domain": {k: [num(a), num(b)] for k, (a, b) in inp.fit.ranges.items()},
        "interval": rec.get("interval", {}).get("method"),
        "level": pct(rec.get("interval", {}).get("level"), 0),
        "cv": cv_comparison(inp), **cautions_and_flags(inp, flags(inp, facts)),
        "commands": [shlex.join(fit_cmd)] + ([shlex.join(report_command)]
                                             if report_command else []),
        "created": inp.run.get("created"), "software": inp.run.get("software") or {},
        "figures": figures,
    }
