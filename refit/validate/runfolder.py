"""Writing a run folder: the leaderboard, every out-of-fold prediction and the candidates.

::

    RUN/
      leaderboard.csv       one row per valid candidate, ranked (see refit.validate.candidates)
      leaderboard.json      the same rows, the ranking rule, the verdict, skipped candidates
      oof_predictions.csv   every out-of-fold prediction with its interval, fold and scheme
      fits/<candidate>.json one coefficient record per candidate, fitted on the whole subset
      run.json              the recipe, the dataset version and hash, seed, command, timings

The folder is assembled under a temporary name beside RUN and renamed into place when
complete, so a run folder is never half-written (each file is written atomically too).
An existing RUN is replaced only when asked (``overwrite=True``).
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import json
import os
import shutil
from pathlib import Path

from refit._util.atomic import TMP_PREFIX, fsync_dir, write_text_atomic
from refit.coefficients import CAUTION, dumps, plain
from refit.coefficients.build import fit_record
from refit.errors import UsageError
from refit.validate.crossval import GROUP_CV_FOLDS

#: interval methods whose coefficient file falls back to ``none`` when the format cannot
#: carry them (never to another interval)
GROUP_FILE_FALLBACK = ("group-jackknife+", "group-cv+")
OOF_COLUMNS = ("candidate", "scheme", "row", "profile_id", "repeat", "fold", "observed",
               "estimate", "lower", "upper", "flags")


def shareable(dataset: dict) -> dict:
    """The dataset's provenance without this machine's path: coefficient files get
    published and shared, so they name the data by name, version and hash only (the run's
    own run.json keeps the path, for `refit report`). The worksheet of an xlsx table
    (``sheet``) is kept when one was read (coefficient-file schema 1.4.0), so `refit verify
    --store BOOK.xlsx` rereads that sheet; it is absent otherwise."""
    return {k: v for k, v in dataset.items()
            if k != "path" and not (k == "sheet" and v is None)}


def fit_filename(label: str) -> str:
    """File name of a candidate's record: its one name and ``.json``
    (``quadratic__ols__inverse__jackknife+.json``); other spellings are normalised."""
    from refit.validate.candidates import normalise_candidate

    return normalise_candidate(label) + ".json"


def check_target(out: Path, *, overwrite: bool) -> None:
    """Refuse an existing, non-empty RUN folder unless ``overwrite`` (exit code 2)."""
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise UsageError(f"--out {out} is a file; name a folder for the run")
    if out.is_dir() and any(out.iterdir()) and not overwrite:
        raise UsageError(f"run folder {out} already exists and is not empty; choose another "
                         "--out or pass --overwrite to replace it")


def _dumps(content) -> str:
    return json.dumps(plain(content), indent=1, ensure_ascii=False, allow_nan=False) + "\n"


def _scheme_dict(scheme) -> dict | None:
    return None if scheme is None else dataclasses.asdict(scheme)


def cv_summary(res: dict) -> dict:
    """The ``cv`` block of a candidate record: the scheme, its skill, and random k-fold's."""
    main, kfold = res["main"], res["kfold"]
    out = {**_scheme_dict(main.scheme), "scheme": main.scheme.name, **main.metrics,
           "details": main.details}
    if kfold is not None:
        out["random_kfold"] = {**_scheme_dict(kfold.scheme), **kfold.metrics}
    return out


def recompute_cv(content: dict, data) -> dict:
    """The ``cv`` block of a coefficient record, computed again from rebuilt data.

    ``data`` is the :class:`refit.select.dataset.Dataset` that
    :func:`refit.validate.refits.refit_record` rebuilt from the record. The record's
    recipe (scheme, folds, repeats, seed, level; a fit with groups: its groups column and
    random slope) drives the same splits and the same out-of-fold predictions as the run,
    so every number agrees with the file's when nothing was edited (``refit verify
    --store``). The ``file_interval_note`` text, which no computation makes, is kept.
    """

    from refit.validate.candidates import _make_splits, _one, schemes_for
    from refit.validate.refits import (recorded_groups, recorded_random_slope,
                                       spec_from_record)

    frame = data.frame.reset_index(drop=True)
    recipe = data.recipe
    had_groups, column = recorded_groups(content)
    if had_groups and column:
        recipe = dataclasses.replace(recipe, groups=column,
                                     random_slope=recorded_random_slope(content))
    main, kfold = schemes_for(recipe, len(frame))
    schemes = {"main": main, "kfold": kfold}
    splits = {k: None if s is None else _make_splits(frame, s, recipe)
              for k, s in schemes.items()}
    _, _, res = _one(frame, recipe, spec_from_record(content), schemes, splits, 1,
                     lambda label: None)
    return plain(cv_summary(res))


def _leaderboard_json(run) -> dict:
    m = run.matrix
    return {"function_id": run.recipe.function_id, "level": run.recipe.level,
            "scheme": _scheme_dict(m.schemes["main"]),
            "compared_with": _scheme_dict(m.schemes["kfold"]),
            "split_details": m.split_details,
            "coverage_tolerance": m.tolerance, "n": m.n, "verdict": m.verdict,
            "dataset": run.data, "rows": m.leaderboard.to_dict(orient="records"),
            "skipped": m.skipped, "cautions": [CAUTION],
            "warnings": run.warnings, "source_check": run.source_check,
            "defaults_applied": run.defaults}


def _run_json(run, argv, created: str) -> dict:
    import numpy as np
    import pandas as pd

    import refit

    m = run.matrix
    return {"created": created, "command": list(argv or []),
            "recipe": {**run.recipe.to_dict(), "text": run.recipe.path.read_text("utf-8")},
            "dataset": run.data, "seed": run.recipe.seed,
            "subset": run.subset.to_dict(),
            "schemes": {k: _scheme_dict(v) for k, v in m.schemes.items()},
            "split_details": m.split_details,
            "candidates": len(m.specs), "skipped": m.skipped,
            "timings": {**run.timings, "per_candidate_s": m.timings},
            "warnings": run.warnings, "source_check": run.source_check,
            "defaults_applied": run.defaults,
            "software": {"refit": refit.__version__, "numpy": np.__version__,
                         "pandas": pd.__version__},
            "cautions": [CAUTION]}


def file_interval(method: str) -> tuple[str, str | None]:
    """The interval method a candidate's coefficient file carries, and why it differs.

    A group-level conformal interval goes into the file only when the coefficient format
    knows it (its name among ``refit.models.fitting.INTERVALS``); until then the file
    carries the equation with interval ``none`` and says so, never another interval.
    """
    from refit.models.fitting import INTERVALS

    if method in INTERVALS:
        return method, None
    return "none", (f"the {method} interval is cross-validated in this run, but this "
                    "version's coefficient files do not carry it yet: the file holds the "
                    "equation without an interval")


def fit_records(run, created: str) -> dict[str, dict]:
    """``file name -> coefficient record`` for every valid candidate."""
    from refit.errors import RefitError

    m = run.matrix
    out = {}
    for spec in m.specs:
        subset = run.subset.to_dict() | {"filters": [f.to_dict() for f in run.recipe.subset]}
        kw = dict(function_id=run.recipe.function_id,
                  provenance={"dataset": shareable(run.data), "subset": subset,
                              "recipe": run.recipe.to_dict(),
                              "recipe_sha256": run.recipe.sha256},
                  cv=cv_summary(m.cv[spec.label]), level=run.recipe.level,
                  seed=run.recipe.seed, candidate=spec.label, form_label=spec.form_label,
                  created=created)
        if spec.interval == "group-cv+":
            kw["folds"] = GROUP_CV_FOLDS   # the folds of whole sources cross-validation used
        method, why = file_interval(spec.interval)
        if why:
            kw["cv"]["file_interval_note"] = why
        try:
            rec = fit_record(m.fits[spec.label], interval_method=method, **kw)
        except RefitError as exc:
            if spec.interval not in GROUP_FILE_FALLBACK:
                raise
            kw["cv"]["file_interval_note"] = (f"the {method} interval cannot go into the "
                                              f"file ({exc}): the file holds no interval")
            rec = fit_record(m.fits[spec.label], interval_method="none", **kw)
        out[fit_filename(spec.label)] = rec
    return out


def _oof_frame(predictions):
    cols = [c for c in OOF_COLUMNS if c in predictions.columns]
    rest = [c for c in predictions.columns if c not in cols]
    return predictions[cols + rest]


def write_run(run, out, *, argv=None, overwrite: bool = False) -> Path:
    """Write a run folder (see the module docstring); returns its path."""
    out = Path(out)
    check_target(out, overwrite=overwrite)
    created = _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds")
    out.parent.mkdir(parents=True, exist_ok=True)
    stage = out.parent / f"{TMP_PREFIX}{out.name}-{os.getpid()}"
    if stage.exists():
        shutil.rmtree(stage)
    try:
        board = run.matrix.leaderboard
        write_text_atomic(stage / "leaderboard.csv", board.to_csv(index=False))
        write_text_atomic(stage / "leaderboard.json", _dumps(_leaderboard_json(run)))
        write_text_atomic(stage / "oof_predictions.csv",
                          _oof_frame(run.matrix.predictions).to_csv(index=False))
        for name, rec in fit_records(run, created).items():
            write_text_atomic(stage / "fits" / name, dumps(rec))  # the one file spelling
        write_text_atomic(stage / "run.json", _dumps(_run_json(run, argv, created)))
        _swap_into_place(stage, out)
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise
    return out


def _swap_into_place(stage: Path, out: Path) -> None:
    old = None
    if out.exists():
        old = out.parent / f"{TMP_PREFIX}{out.name}-old-{os.getpid()}"
        os.replace(out, old)
    os.replace(stage, out)
    fsync_dir(out.parent)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
