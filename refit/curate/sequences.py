"""Sequence checks: along a sequence only its own state factor should vary.

A soil sequence (columns ``sequence_id`` and ``sequence_kind``) holds all soil-forming
factors but one roughly constant (Jenny's state factors: climate, organisms, relief,
parent material, time). A transfer function is only as clean as the sequence behind it,
so for each sequence refit reports the factors that should be held constant but vary.

=================  ==================  ================================================
sequence_kind      factor that varies  columns compared
=================  ==================  ================================================
climosequence      climate             ``map_mm``, ``mat_c``
biosequence        vegetation          ``vegetation``
toposequence       landform            ``landform``, ``slope_deg``
lithosequence      parent material     ``parent_material``
chronosequence     age                 ``age_ka``
=================  ==================  ================================================

"Held constant" means (common practice; thresholds are judgement, tune them here):
one vegetation, one parent material and one landform; MAP within 200 mm; MAT within
2 °C; slope within 5 degrees; the oldest soil no more than twice the age of the youngest
(or within 1 ka of it). All findings are warnings:

``sequence-factor-varies``   a factor that should be held constant varies
``sequence-factor-constant`` the sequence's own factor does not vary at all
``sequence-mixed-kinds``     one sequence_id with several sequence kinds
``sequence-kind-missing``    a sequence_id without a sequence_kind
``sequence-id-missing``      a sequence_kind without a sequence_id (row-level)
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: The state factor that varies along each kind of sequence.
VARIES = {
    "climosequence": "climate",
    "biosequence": "vegetation",
    "toposequence": "landform",
    "lithosequence": "parent material",
    "chronosequence": "age",
}

#: Columns of each state factor with how "held constant" is judged. Common practice,
#: not a published threshold: ("distinct", None) = a single value; ("spread", d) =
#: max - min <= d in the column's unit; ("ratio", None) = oldest <= 2 x youngest or
#: within AGE_WITHIN_KA.
FACTORS = {
    "climate": [("map_mm", "spread", 200.0), ("mat_c", "spread", 2.0)],
    "vegetation": [("vegetation", "distinct", None)],
    "landform": [("landform", "distinct", None), ("slope_deg", "spread", 5.0)],
    "parent material": [("parent_material", "distinct", None)],
    "age": [("age_ka", "ratio", None)],
}
AGE_WITHIN_KA = 1.0
_UNITS = {"map_mm": "mm", "mat_c": "°C", "slope_deg": "degrees", "age_ka": "ka"}
_OUT = ["severity", "rule", "position", "column", "value", "message"]


def sequence_problems(frame: pd.DataFrame) -> pd.DataFrame:
    """Warnings about the sequences of a (parsed) calibration table.

    Parameters
    ----------
    frame : pandas.DataFrame
        Checked table with a RangeIndex: numbers as float, vocabulary terms canonical.

    Returns
    -------
    pandas.DataFrame
        Columns severity, rule, position (0-based row, <NA> for a whole sequence),
        column, value, message.
    """
    out: list[dict] = []
    has_id = "sequence_id" in frame.columns
    if "sequence_kind" in frame.columns:
        no_id = frame["sequence_kind"].notna()
        if has_id:
            no_id &= frame["sequence_id"].isna()
        pos = np.flatnonzero(no_id.to_numpy())
        kinds = frame["sequence_kind"].to_numpy(dtype=object)
        out += [_problem("sequence-id-missing", p, "sequence_id", "",
                         f"a sequence_kind ({kinds[p]}) without a sequence_id; name the "
                         "sequence the profile belongs to, or leave both empty.")
                for p in pos]
    if has_id and frame["sequence_id"].notna().any():
        out += _per_sequence(frame[frame["sequence_id"].notna()])
    return pd.DataFrame(out, columns=_OUT)


def _problem(rule, position, column, value, message) -> dict:
    return {"severity": "warning", "rule": rule, "position": position,
            "column": column, "value": value, "message": message}


def _per_sequence(seq: pd.DataFrame) -> list[dict]:
    groups = seq.groupby("sequence_id", sort=True)
    if "sequence_kind" in seq.columns:
        n_kinds = groups["sequence_kind"].nunique()
        kind = groups["sequence_kind"].first()
    else:
        n_kinds = pd.Series(0, index=list(groups.groups))
        kind = pd.Series(None, index=n_kinds.index, dtype=object)
    out = []
    for sid in n_kinds.index[n_kinds > 1]:
        found = sorted(seq.loc[seq["sequence_id"] == sid, "sequence_kind"].dropna().unique())
        out.append(_problem(
            "sequence-mixed-kinds", pd.NA, "sequence_kind", ", ".join(found),
            f"sequence '{sid}' is given several kinds ({', '.join(found)}); a sequence "
            "varies one state factor. Give all its profiles one kind or split it. Its "
            "factors were not compared."))
    for sid in n_kinds.index[n_kinds == 0]:
        out.append(_problem(
            "sequence-kind-missing", pd.NA, "sequence_kind", "",
            f"sequence '{sid}' has no sequence_kind, so refit cannot tell which factor "
            f"should vary along it; set one of {', '.join(VARIES)}."))
    single = kind[(n_kinds == 1) & kind.isin(list(VARIES))]
    if len(single):
        out += _compare_factors(seq[seq["sequence_id"].isin(single.index)], single)
    return out


def _varies(groups, column: str, how: str, tol):
    """Per sequence: does the column vary beyond the tolerance? (and does it vary at all)"""
    if how == "distinct":
        n = groups[column].nunique()
        return n > 1, n > 1
    lo, hi = groups[column].min(), groups[column].max()
    spread = hi - lo
    if how == "spread":
        return spread > tol, spread > 0
    # age: common practice, oldest more than twice the youngest and over 1 ka apart
    return (spread > np.maximum(AGE_WITHIN_KA, lo)), spread > 0


def _found(seq: pd.DataFrame, sid, column: str, how: str) -> str:
    vals = seq.loc[seq["sequence_id"] == sid, column].dropna()
    if how == "distinct":
        uniq = sorted(map(str, vals.unique()))
        more = f" and {len(uniq) - 8} more" if len(uniq) > 8 else ""
        return ", ".join(uniq[:8]) + more
    unit = _UNITS.get(column, "")
    return f"{vals.min():g} to {vals.max():g} {unit} over {len(vals)} profiles".replace(
        "  ", " ")


def _compare_factors(seq: pd.DataFrame, kind: pd.Series) -> list[dict]:
    groups = seq.groupby("sequence_id", sort=True)
    out = []
    moves = pd.Series(False, index=kind.index)
    for factor, specs in FACTORS.items():
        for column, how, tol in specs:
            if column not in seq.columns:
                continue
            too_much, at_all = (s.reindex(kind.index, fill_value=False)
                                for s in _varies(groups, column, how, tol))
            moves |= at_all & (kind.map(VARIES) == factor)
            held = kind.map(VARIES) != factor
            for sid in kind.index[too_much & held]:
                found = _found(seq, sid, column, how)
                out.append(_problem(
                    "sequence-factor-varies", pd.NA, column, found,
                    f"sequence '{sid}' is a {kind[sid]}: only {VARIES[kind[sid]]} should "
                    f"vary along it, but {column} varies ({found}). A transfer function "
                    "fitted on it mixes two state factors; split the sequence or leave "
                    "these profiles out."))
    for sid in kind.index[~moves]:
        factor = VARIES[kind[sid]]
        cols = [c for c, _, _ in FACTORS[factor] if c in seq.columns]
        if cols:
            out.append(_problem(
                "sequence-factor-constant", pd.NA, "|".join(cols), "",
                f"sequence '{sid}' is a {kind[sid]} but its {factor} "
                f"({', '.join(cols)}) does not vary; check the sequence_kind."))
    return out
