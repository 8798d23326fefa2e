"""Apply the consistency tests of :mod:`refit.curate.consistency` to an incoming batch.

:func:`column_slips` finds columns whose whole file looks like another unit (the evidence
said once per file); :func:`mixed_units` finds columns whose rows disagree on their unit;
:func:`suspect_rows` scores each row against the store's reference line. The thresholds and
their sources are in :mod:`refit.curate.consistency`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from refit.curate import consistency as cs

_num = cs.values  # a column as floats; a derived index (CIA-K) computed from its oxides


def references(records: pd.DataFrame, *, robust: bool = True, pairs=None):
    """(list of Reference, list of notes): the lines the store supports among ``pairs``
    (default :data:`refit.curate.consistency.REFERENCES`), and why others are skipped (too
    few soils)."""
    refs, notes = [], []
    for pair in cs.REFERENCES if pairs is None else pairs:
        y, x = pair.response, pair.predictor
        ref = cs.reference_fit(records, pair, robust=robust)
        if ref is None:
            both = cs.soils_with_both(records, y, x)
            notes.append(f"consistency test of {y} on {x} (reference pair {pair.label!r}) "
                         f"skipped: the store has {both} soils with both (at least "
                         f"{cs.MIN_STORE_ROWS} are needed for a reference line)")
        else:
            refs.append(ref)
            notes.append(f"consistency test against {ref.describe()}: rows beyond |z| "
                         f"{ref.threshold:g} are suspect ({pair.source})")
    return refs, notes


def _rescaled_z(ref, frame, origins, column):
    """{unit: z of every row with ``column`` read in that unit} for the other units (none
    for a column without a unit, e.g. CIA-K)."""
    x, y = _num(frame, ref.predictor), _num(frame, ref.response)
    out = {}
    if column not in cs.SLIP_COLUMNS:
        return out
    for unit, g in cs.alternatives(column, origins):
        xs, ys = (x * g, y) if column == ref.predictor else (x, y * g)
        out[unit] = (ref.z(xs, ys), g)
    return out


def column_slips(frame, records, refs, origins, confirmed=()) -> list[dict]:
    """Columns whose values, taken together, look like another unit than declared.

    Returns
    -------
    list of dict
        ``column``, ``file_column``, ``declared`` (unit), ``likely`` (unit), ``factor``,
        ``median_file`` and ``median_store`` [canonical unit], and ``evidence`` (a sentence).
    """
    out, done, said = [], set(), set()
    for ref in refs:
        x, y = _num(frame, ref.predictor), _num(frame, ref.response)
        both = np.isfinite(x) & np.isfinite(y)
        if both.sum() < 5:
            continue
        now = np.median(np.abs(ref.z(x[both], y[both])))
        for column in (ref.predictor, ref.response):
            if column in confirmed or column in said:
                continue
            best = min(((np.median(np.abs(z[both])), u, g) for u, (z, g)
                        in _rescaled_z(ref, frame, origins, column).items()), default=None)
            if now <= cs.SLIP_MEDIAN_Z:
                # the file fits the line as declared: judged by the line, not by the
                # medians, unless the line fits another unit as well (it cannot tell them
                # apart, e.g. MAP in inches at low CIA-K): then the medians still judge
                if not (best and best[0] <= cs.FITS_Z):
                    done.add(column)
                continue
            done.add(column)
            if best and best[0] <= cs.FITS_Z:
                said.add(column)  # one slip per column, from the first pair that sees it
                out.append(_slip(column, frame, records, origins, best[1], best[2],
                                 f"median |z| against {ref.describe()} is {now:.1f} as "
                                 f"declared and {best[0]:.1f} if in {cs.unit_label(best[1])}"))
    for column in cs.SLIP_COLUMNS:
        if column in done or column in confirmed or column not in frame:
            continue
        got, have = _num(frame, column), _num(records, column)
        got, have = got[np.isfinite(got) & (got > 0)], have[np.isfinite(have) & (have > 0)]
        if len(got) < 5 or len(have) < cs.MIN_STORE_ROWS:
            continue
        ratio = np.median(got) / np.median(have)
        if abs(np.log(ratio)) <= np.log(cs.SLIP_RATIO):
            continue
        best = min((abs(np.log(ratio * g)), u, g) for u, g in cs.alternatives(column, origins))
        if best[0] <= np.log(1.5):
            out.append(_slip(column, frame, records, origins, best[1], best[2],
                             f"the file's median is {ratio:.3g} times the store's"))
    return out


def _slip(column, frame, records, origins, unit, factor, why) -> dict:
    got, have = _num(frame, column), _num(records, column)
    declared = cs.declared_unit(column, origins)
    med_f, med_s = float(np.nanmedian(got)), float(np.nanmedian(have))
    file_col = origins.get(column, (column, None))[0]
    return {"column": column, "file_column": file_col, "declared": declared,
            "likely": unit, "factor": factor, "median_file": med_f, "median_store": med_s,
            "evidence": (f"column {file_col!r} ({column}) looks like {cs.unit_label(unit)}, "
                         f"not {cs.unit_label(declared)}: its median is {med_f:.4g} against "
                         f"the store's {med_s:.4g} ({column}); read in "
                         f"{cs.unit_label(unit)} (x {factor:.6g}) it would be "
                         f"{med_f * factor:.4g}; {why}. Confirm the unit with "
                         f"--unit '{file_col}={_short(unit)}' (or "
                         f"--unit '{file_col}={_short(declared)}' to keep it as declared)")}


def _short(unit: str) -> str:
    return {"inch": "in", "foot": "ft", "millimeter": "mm", "centimeter": "cm",
            "meter": "m"}.get(unit, unit)


def suspect_rows(frame, refs, origins, candidates: np.ndarray) -> list[dict]:
    """Rows (positions among ``candidates``) beyond their pair's threshold against each
    reference; a row suspect by two pairs has one item per pair.

    Returns
    -------
    list of dict
        ``pos``, ``pair`` (its label), ``column`` (the response), ``value``, ``z``,
        ``fits`` (a unit, or None) and ``message`` (naming the pair).
    """
    out = []
    for ref in refs:
        x, y = _num(frame, ref.predictor), _num(frame, ref.response)
        z = ref.z(x, y)
        bad = candidates & np.isfinite(z) & (np.abs(z) > ref.threshold)
        if not bad.any():
            continue
        tries = [(col, u, zz, g) for col in (ref.response, ref.predictor)
                 for u, (zz, g) in _rescaled_z(ref, frame, origins, col).items()]
        for pos in np.flatnonzero(bad):
            fits = [(abs(zz[pos]), col, u, g) for col, u, zz, g in tries
                    if abs(zz[pos]) <= cs.FITS_Z]
            derived = (f" (from {', '.join(cs.DERIVED[ref.predictor][0])})"
                       if ref.predictor in cs.DERIVED else "")
            text = (f"{ref.response} {y[pos]:.4g} at {ref.predictor} {x[pos]:.4g}{derived} has a "
                    f"standardised leave-one-out predictive residual of {z[pos]:+.1f} "
                    f"against {ref.describe()}; the threshold is |z| {ref.threshold:g}.")
            fit, fit_col = None, None
            if fits:
                zf, col, unit, g = min(fits)
                fit, fit_col = unit, col
                value = (y if col == ref.response else x)[pos]
                file_col = origins.get(col, (col, None))[0]
                text += (f" This value fits if it is in {cs.unit_label(unit)}: "
                         f"{file_col} read in {cs.unit_label(unit)} gives {col} "
                         f"{value * g:.4g} and z {zf:+.1f}.")
            else:
                text += " No other unit makes it fit; check both values."
            out.append({"pos": int(pos), "pair": ref.label, "column": ref.response,
                        "value": float(y[pos]),
                        "z": float(z[pos]), "fits": fit, "fit_column": fit_col,
                        "message": text})
    return out


def mixed_units(suspects: list[dict], frame, origins, n_rows: int) -> list[dict]:
    """Columns where many rows fit only in one other unit: ``column``, ``unit``, ``rows``
    (positions)."""
    by = {}
    for s in suspects:  # a row held by two pairs counts once
        if s["fits"] and s["pos"] not in by.get((s["fit_column"], s["fits"]), ()):
            by.setdefault((s["fit_column"], s["fits"]), []).append(s["pos"])
    return [{"column": c, "unit": u, "positions": p} for (c, u), p in by.items()
            if len(p) >= cs.MIXED_MIN_ROWS and len(p) >= cs.MIXED_MIN_SHARE * n_rows]


__all__ = ["references", "column_slips", "suspect_rows", "mixed_units"]


def screen_batch(frame, records, origins, confirmed, candidates, path,
                 source_rows) -> tuple[list, list]:
    """Every consistency test of one batch: (suspects, notes); raises when the file must
    be refused (a column slip, or mixed units), saying why once, nothing written.

    Raises
    ------
    InvalidDataError
        With the evidence of each slipped column, or the rows of a mixed column.
    """
    from refit.errors import InvalidDataError

    refs, notes = references(records)
    slips = column_slips(frame.loc[candidates], records, refs, origins, confirmed)
    if slips:
        raise InvalidDataError(
            f"{path} cannot be admitted; nothing was written: the unit of "
            + ("a column looks" if len(slips) == 1 else f"{len(slips)} columns look")
            + " wrong:\n  - " + "\n  - ".join(s["evidence"] for s in slips))
    suspects = suspect_rows(frame, refs, origins, candidates)
    mixed = [m for m in mixed_units(suspects, frame, origins, int(candidates.sum()))
             if m["column"] not in confirmed]
    if mixed:
        rows = pd.Series(np.asarray(source_rows))
        lines = [f"column {origins.get(m['column'], (m['column'],))[0]!r} ({m['column']}): "
                 f"{len(m['positions'])} rows fit only in {cs.unit_label(m['unit'])} "
                 f"(file rows {', '.join(str(int(rows.iloc[p])) for p in m['positions'])})"
                 for m in mixed]
        raise InvalidDataError(
            f"{path} cannot be admitted; nothing was written: mixed units within a column:"
            "\n  - " + "\n  - ".join(lines) + "\nPut each unit in its own column (e.g. "
            "'Depth to Bk (cm)' and 'Depth to Bk (in)') or convert the rows that disagree.")
    return suspects, notes
