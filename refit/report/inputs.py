"""Everything a report needs from a run folder, reloaded and checked.

A run folder (see :mod:`refit.validate.runfolder`) holds the leaderboard, the out-of-fold
predictions and a coefficient record per candidate, but not the calibration records. The
report reloads them from where ``run.json`` says they came from (a store at the recorded
dataset version, or a table) and refits the chosen candidate with
:func:`refit.validate.refits.refit_record` (the same rebuild of the data set as ``refit
verify``'s, :func:`refit.select.dataset.dataset_from_record`), then checks that the refit
gives the coefficients recorded in the run: a report never draws a fit the run did not make.
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


def _read_json(path: Path, part: str) -> dict:
    """``run.json`` or ``leaderboard.json`` (``part``: ``run``, ``leaderboard``), read and
    checked against its part of ``schemas/run.folder.schema.json``."""
    try:
        content = json.loads(path.read_text("utf-8"))
    except FileNotFoundError:
        raise UnreadableInputError(f"{path} not found: is this a run folder written by "
                                   "`refit fit --out RUN`?") from None
    except (OSError, UnicodeDecodeError, ValueError, RecursionError) as exc:
        raise UnreadableInputError(f"{path} cannot be read as JSON ({exc}); rerun "
                                   "`refit fit` to rewrite the run folder") from None
    problems = run_folder_problems(content, part)
    if problems:
        more = f" (and {len(problems) - 1} more)" if len(problems) > 1 else ""
        raise InvalidDataError(f"{path} is not a run file refit wrote: {problems[0]}{more}; "
                               "rerun `refit fit --out RUN` to rewrite the run folder")
    return content


def run_folder_problems(content, part: str) -> list[str]:
    """Where ``content`` breaks the ``part`` (``run`` or ``leaderboard``) of
    ``schemas/run.folder.schema.json``: ``$.path: message`` per problem, first by path."""
    import jsonschema

    from refit._util.resources import schemas_dir

    schema = json.loads((schemas_dir() / "run.folder.schema.json").read_text("utf-8"))
    validator = jsonschema.Draft202012Validator({"$ref": f"#/$defs/{part}",
                                                 "$defs": schema["$defs"]})
    errors = sorted(validator.iter_errors(content), key=lambda e: list(e.absolute_path))
    return ["$" + "".join(f"[{p}]" if isinstance(p, int) else f".{p}"
                          for p in e.absolute_path) + f": {e.message}" for e in errors]


def _fit_record(path: Path) -> dict:
    """The chosen candidate's coefficient file, through the one coefficient-file reader
    (hash, schema and bytes checked)."""
    from refit.coefficients.format import read_record

    try:
        return read_record(path)
    except UnreadableInputError:
        raise UnreadableInputError(f"{path} not found: the run folder is incomplete; rerun "
                                   "`refit fit` to rewrite it") from None


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
    from refit.validate.candidates import normalise_candidate

    name = normalise_candidate(candidate)
    if name not in labels:
        raise UsageError(f"--candidate {candidate!r} is not in the run's leaderboard; "
                         "choose one of: " + ", ".join(labels))
    return name


def _refit(record: dict, location, dataset: dict):
    """Rebuild the data set and subset, refit the recorded candidate, check it reproduces."""
    from refit.validate.refits import refit_record

    data, fit = refit_record(record, location, dataset=dataset)
    got = np.asarray(fit.result.coefficients, dtype=float)
    want = np.asarray(record.get("coefficients", []), dtype=float)
    if got.shape != want.shape or not np.allclose(got, want, rtol=TOLERANCE, atol=0):
        raise InvalidDataError(f"refitting {record.get('candidate')} does not reproduce the "
                               f"run's coefficients (run {want.tolist()}, refit "
                               f"{got.tolist()}): the data or refit's version differ")
    return data, fit


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
    run = _read_json(run_dir / "run.json", "run")
    board_json = _read_json(run_dir / "leaderboard.json", "leaderboard")
    board = _read_csv(run_dir / "leaderboard.csv")
    label = _chosen(board, board_json, candidate)
    record = _fit_record(run_dir / "fits" / fit_filename(label))
    oof = _read_csv(run_dir / "oof_predictions.csv")
    oof = oof[oof["candidate"] == label].reset_index(drop=True)
    data, fit = _refit(record, store, _recorded_dataset(run, record))
    kept = data.records.index.isin(data.frame.index)
    return ReportInputs(run_dir, run, board, board_json, oof, label, record,
                        data.records, np.asarray(kept), data.subset, data.recipe, fit)


def _recorded_dataset(run: dict, record: dict) -> dict:
    """The record's ``provenance.dataset`` with the run's path to the data (coefficient
    records leave the path out; run.json keeps it), and the worksheet of an xlsx table
    (``sheet``, kept by run.json only)."""
    ds = dict((record.get("provenance") or {}).get("dataset") or run.get("dataset") or {})
    path = (run.get("dataset") or {}).get("path")
    if path and not ds.get("path"):
        ds["path"] = path
    sheet = (run.get("dataset") or {}).get("sheet")
    if sheet is not None and "sheet" not in ds:
        ds["sheet"] = sheet
    return ds
