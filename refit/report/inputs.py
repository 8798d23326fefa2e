"""Everything a report needs from a run folder, reloaded and checked.

A run folder (see :mod:`refit.validate.runfolder`) holds the leaderboard, the out-of-fold
predictions and a coefficient record per candidate, but not the calibration records. The
report reloads them from where ``run.json`` says they came from (a store at the recorded
dataset version, or a table), rebuilds the subset with :mod:`refit.select.subsets`, refits the
chosen candidate with :func:`refit.validate.candidates.fit_whole` and checks that the refit gives the
coefficients recorded in the run: a report never draws a fit the run did not make.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from refit.errors import InvalidDataError, UnreadableInputError, UsageError

#: relative agreement required between the refit and the run's recorded coefficients
TOLERANCE = 1e-8


@dataclass
class ReportInputs:
    """A run folder's files, the rebuilt calibration subset and the chosen fit."""

    run_dir: Path
    run: dict            # run.json
    board: object        # leaderboard.csv (pandas DataFrame, ranked)
    board_json: dict     # leaderboard.json (verdict, tolerance, skipped, ...)
    oof: object          # oof_predictions.csv rows of the chosen candidate (DataFrame)
    candidate: str       # the chosen candidate's label
    record: dict         # fits/<candidate>.json
    records: object      # every record of the dataset version (DataFrame)
    kept: np.ndarray     # bool per record: the subset kept it
    subset: object       # refit.select.subsets.SubsetResult
    recipe: object       # refit.select.recipe.Recipe rebuilt from the record
    fit: object          # refit.models.fitting.Fit refitted on the subset


def _read_json(path: Path) -> dict:
    try:
        return json.loads(path.read_text("utf-8"))
    except FileNotFoundError:
        raise UnreadableInputError(f"{path} not found: is this a run folder written by "
                                   "`refit fit --out RUN`?") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise UnreadableInputError(f"{path} cannot be read as JSON ({exc}); rerun "
                                   "`refit fit` to rewrite the run folder") from None


def _read_csv(path: Path):
    import pandas as pd

    if not path.is_file():
        raise UnreadableInputError(f"{path} not found: the run folder is incomplete; rerun "
                                   "`refit fit` to rewrite it")
    try:
        return pd.read_csv(path, keep_default_na=True)
    except (OSError, ValueError) as exc:
        raise UnreadableInputError(f"{path} cannot be read as CSV ({exc})") from None


def _chosen(board, board_json: dict, candidate: str | None) -> str:
    labels = [str(c) for c in board["candidate"]]
    if candidate is None:
        winner = (board_json.get("verdict") or {}).get("winner")
        if winner is None and not labels:
            raise InvalidDataError("the run's leaderboard is empty: no candidate could be "
                                   "fitted, so there is nothing to report")
        return str(winner or labels[0])
    if candidate not in labels:
        raise UsageError(f"--candidate {candidate!r} is not in the run's leaderboard; "
                         "choose one of: " + ", ".join(labels))
    return candidate


def _dataset_records(ds: dict, store: Path | None):
    """The records the run was fitted on, checked against the recorded hash."""
    from refit.curate.store import open_store, typed_records

    kind = ds.get("kind")
    where = Path(store) if store is not None else Path(str(ds.get("path") or ""))
    hint = ("; pass --store PATH (a store) or --table PATH (a table) to say where the "
            "data are now")
    if kind == "store":
        if not (where / "manifest.json").is_file():
            raise UnreadableInputError(f"the run's store {str(where)!r} is not found (no "
                                       f"manifest.json){hint}")
        st = open_store(where)
        version = ds.get("version")
        if ds.get("name") is not None and ds.get("name") != st.name:
            raise InvalidDataError(f"the run used store {ds.get('name')!r}, but {where} is "
                                   f"store {st.name!r}{hint}")
        entry = next((e for e in st.manifest.get("changelog", [])
                      if e["version"] == version), None)
        if entry is None or entry.get("records_sha256") != ds.get("sha256"):
            raise InvalidDataError(f"store {where} has no version {version} with records "
                                   f"sha256 {str(ds.get('sha256'))[:12]}...: not the data "
                                   f"the run was fitted on{hint}")
        return typed_records(st.records_at(version)), f"store {st.name!r} (version {version})"
    if kind == "table":
        from refit._util.atomic import sha256_file
        from refit.curate.checks import check_file

        if not where.is_file():
            raise UnreadableInputError(f"the run's table {str(where)!r} is not found{hint}")
        if sha256_file(where) != ds.get("sha256"):
            raise InvalidDataError(f"table {where} has changed since the run (its sha256 "
                                   "differs from run.json's): not the data the run was "
                                   "fitted on")
        return check_file(where).frame, f"table {where.name!r}"
    raise InvalidDataError(f"run.json names no dataset kind ('store' or 'table'): got "
                           f"{kind!r}; rerun `refit fit` to rewrite the run folder")


def _refit(record: dict, frame, source: str, rows_after):
    """Rebuild the subset, refit the recorded candidate and check it reproduces."""
    from refit.errors import RefitError
    from refit.validate.candidates import fit_whole
    from refit.select.subsets import select
    from refit.publish.verify import recipe_from_record, spec_from_record

    recipe = recipe_from_record(record)
    try:
        sub = select(recipe, frame, source)
    except RefitError as exc:
        raise InvalidDataError(f"the run's subset cannot be rebuilt: {exc}") from None
    if rows_after is not None and rows_after != len(sub.frame):
        raise InvalidDataError(f"the run's subset kept {rows_after} records, rebuilding it "
                               f"keeps {len(sub.frame)}: the data are not the run's")
    fit, _ = fit_whole(sub.frame.reset_index(drop=True), recipe, spec_from_record(record))
    got = np.asarray(fit.result.coefficients, dtype=float)
    want = np.asarray(record.get("coefficients", []), dtype=float)
    if got.shape != want.shape or not np.allclose(got, want, rtol=TOLERANCE, atol=0):
        raise InvalidDataError(f"refitting {record.get('candidate')} does not reproduce the "
                               f"run's coefficients (run {want.tolist()}, refit "
                               f"{got.tolist()}): the data or refit's version differ")
    return recipe, sub, fit


def load_run(run_dir, *, candidate: str | None = None, store=None) -> ReportInputs:
    """Read a run folder, reload its data and refit the chosen candidate.

    Parameters
    ----------
    run_dir : str or Path
        A folder written by ``refit fit --out RUN``.
    candidate : str, optional
        The candidate to report (a leaderboard label); default the run's winner.
    store : str or Path, optional
        Where the run's store or table is now, if it has moved.

    Raises
    ------
    UnreadableInputError
        A file of the run folder, or the data it names, is missing or unreadable.
    InvalidDataError
        The data are no longer the run's (hash, subset size or refit differ).
    UsageError
        ``candidate`` is not in the leaderboard.
    """
    from refit.validate.runfolder import fit_filename

    run_dir = Path(run_dir)
    if not run_dir.is_dir():
        raise UnreadableInputError(f"run folder {run_dir} not found; name a folder written "
                                   "by `refit fit --out RUN`")
    run = _read_json(run_dir / "run.json")
    board_json = _read_json(run_dir / "leaderboard.json")
    board = _read_csv(run_dir / "leaderboard.csv")
    label = _chosen(board, board_json, candidate)
    record = _read_json(run_dir / "fits" / fit_filename(label))
    oof = _read_csv(run_dir / "oof_predictions.csv")
    oof = oof[oof["candidate"] == label].reset_index(drop=True)
    records, source = _dataset_records(run.get("dataset") or {}, store)
    rows_after = (run.get("subset") or {}).get("rows_after")
    recipe, sub, fit = _refit(record, records, source, rows_after)
    kept = records.index.isin(sub.frame.index)
    return ReportInputs(run_dir, run, board, board_json, oof, label, record,
                        records, np.asarray(kept), sub, recipe, fit)
