"""The equation a coefficient record *uses* for its estimates, written out.

Most interval methods centre their interval on the full-data fit, whose coefficients are the
record's ``coefficients``. Split-conformal does not: it fits on one part of the data and
calibrates on the other, and its estimates come from that part's coefficients
(``interval.centre_coefficients``). A reader who quotes the printed equation must get the
numbers refit gives, so the equation shown is always the one used, and says which it is.
Pure functions on the record's JSON content; numpy only.
"""

from __future__ import annotations

import math

import numpy as np

_SUPERSCRIPT = str.maketrans("0123456789", "⁰¹²³⁴⁵⁶⁷⁸⁹")


def term_text(term: str) -> str:
    """``bk_depth_cm^2`` -> ``bk_depth_cm²``."""
    if "^" in term:
        name, power = term.rsplit("^", 1)
        return name + power.translate(_SUPERSCRIPT)
    return term


def _num(v: float, digits: int = 4) -> str:
    return f"{float(v):.{digits}g}"


def used_coefficients(record: dict) -> tuple[np.ndarray, str]:
    """The coefficients that produce the record's estimates, and where they come from.

    Parameters
    ----------
    record : dict
        A coefficient record (a run's ``fits/<candidate>.json`` or a published file).

    Returns
    -------
    coefficients : ndarray
        ``interval.centre_coefficients`` for split-conformal (the estimate is the training
        part's fit), else ``coefficients`` (the full-data fit).
    source : str
        ``"split-centre"`` or ``"full-data"``.
    """
    iv = record.get("interval") or {}
    full = np.asarray(record["coefficients"], dtype=float)
    if iv.get("method") == "split-conformal" and iv.get("centre_coefficients") is not None:
        centre = np.asarray(iv["centre_coefficients"], dtype=float)
        if centre.shape == full.shape:
            return centre, "split-centre"
    return full, "full-data"


def lhs_text(record: dict) -> str:
    """The left-hand side: the equation's y, ``ln(y)`` on a log scale."""
    eq = record.get("equation") or {}
    y = eq.get("y") or (record.get("response") or {}).get("name") or "y"
    return f"ln({y})" if eq.get("scale") == "log" else str(y)


def equation_text(terms, coefficients, lhs: str, std_errors=None, *, ascii_only=False) -> str:
    """``map_mm = 387.2 + 2.33 × bk_depth_cm``, standard errors in brackets when given."""
    times = "*" if ascii_only else "×"
    pm = "+/-" if ascii_only else "±"
    parts = []
    ses = [None] * len(terms) if std_errors is None else list(std_errors)
    for i, (t, c, s) in enumerate(zip(terms, coefficients, ses)):
        body = _num(abs(c))
        if s is not None and not (isinstance(s, float) and math.isnan(s)):
            body += f" ({pm} {_num(s, 3)})"
        if t != "intercept":
            body += f" {times} {t if ascii_only else term_text(t)}"
        sign = "-" if c < 0 else "+"
        parts.append(("-" if sign == "-" else "") + body if i == 0 else f" {sign} {body}")
    return f"{lhs} = " + "".join(parts)


def used_equation(record: dict, *, ascii_only: bool = False) -> dict:
    """The equation used for estimates, with a note when it is not the full-data fit.

    Returns a dict with ``text`` (the equation used), ``coefficients``, ``source``
    (see :func:`used_coefficients`), ``full_text`` (the full-data fit, same as ``text``
    unless split-conformal) and ``note`` (empty unless the two differ).
    """
    terms = list(record["terms"])
    used, source = used_coefficients(record)
    lhs = lhs_text(record)
    text = equation_text(terms, used, lhs, ascii_only=ascii_only)
    full_text = equation_text(terms, record["coefficients"], lhs, ascii_only=ascii_only)
    note = ""
    if source == "split-centre":
        iv = record["interval"]
        n_train, n = iv.get("n_train"), record.get("n")
        note = (f"split-conformal estimates come from the fit on its training part "
                f"({n_train} of {n} soils, seed {iv.get('seed')}), shown here; the full-data "
                f"fit, {full_text}, gives the file's `coefficients`, covariance and R² but "
                "not its estimates (they use `interval.centre_coefficients`)")
    return {"text": text, "coefficients": [float(c) for c in used], "source": source,
            "full_text": full_text, "note": note}
