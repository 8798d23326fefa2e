"""The store's manifest: its schema, its agreement with records.csv, and its repair.

``STORE/manifest.json`` is described by ``schemas/store.manifest.schema.json`` (JSON
Schema, draft 2020-12). Opening a store checks, in order: the manifest parses and follows
the schema; records.csv has the manifest's sha256; the manifest's row count is the number
of rows of records.csv; the last changelog entry records the same sha256 and row count;
the version is the last version entry's (0 when there is none). Any disagreement stops
with a message naming both values and the repair command, ``refit admit --repair-manifest
STORE`` (:func:`repair_manifest`): it recomputes the hash, the row count and the columns
from records.csv, keeps the changelog entries that follow the schema, and appends a
``"kind": "repair"`` entry (a new version) when records.csv changed, saying what changed.
It never runs silently: it prints every change it made.
"""

from __future__ import annotations

import datetime as dt
import functools
import json
from pathlib import Path

from refit.errors import InvalidDataError

REPAIR = "refit admit --repair-manifest {store}"


@functools.lru_cache(maxsize=1)
def _validator():
    import jsonschema

    from refit._util.resources import schemas_dir

    schema = json.loads((schemas_dir() / "store.manifest.schema.json").read_text("utf-8"))
    return jsonschema.Draft202012Validator(schema)


def schema_errors(manifest) -> list[str]:
    """Where ``manifest`` breaks the schema: ``$.path: message`` per error."""
    errors = sorted(_validator().iter_errors(manifest), key=lambda e: list(e.absolute_path))
    return ["$" + "".join(f"[{p}]" if isinstance(p, int) else f".{p}" for p in e.absolute_path)
            + f": {e.message[:200]}" for e in errors]


def check_manifest(store_dir: Path, manifest, records_sha256: str,
                   row_count: int | None = None) -> None:
    """Raise unless the manifest follows its schema and agrees with records.csv.

    Without ``row_count`` only the schema and the hash are checked.

    Raises
    ------
    InvalidDataError
        Naming what disagrees and the repair command.
    """
    fix = (f"; if records.csv is right, run '{REPAIR.format(store=store_dir)}' (it "
           "recomputes the manifest from records.csv and says what changed), otherwise "
           "restore the store from a backup")
    where = store_dir / "manifest.json"
    errors = schema_errors(manifest)
    if errors:
        raise InvalidDataError(f"{where} does not follow schemas/store.manifest.schema.json: "
                               + "; ".join(errors[:3]) + fix)
    if manifest["records_sha256"] != records_sha256:
        raise InvalidDataError(
            f"{store_dir / 'records.csv'} does not match its manifest (sha256 "
            f"{records_sha256[:12]}... but manifest.json records "
            f"{manifest['records_sha256'][:12]}...): it was edited outside refit. Add new "
            "soils with 'refit admit' instead of editing the file" + fix)
    if row_count is None:
        return
    log = manifest["changelog"]
    versions = [e["version"] for e in log if e.get("kind") != "attempt"]
    problems = []
    if manifest["row_count"] != row_count:
        problems.append(f"row_count is {manifest['row_count']} but records.csv has {row_count} "
                        "rows")
    if not log and (manifest["version"] or row_count):
        problems.append(f"the changelog is empty but the store is at version "
                        f"{manifest['version']} with {row_count} rows")
    if log and (log[-1]["records_sha256"], log[-1]["row_count_after"]) != \
            (records_sha256, row_count):
        problems.append(f"the last changelog entry (version {log[-1]['version']}) records "
                        f"{log[-1]['row_count_after']} rows and sha256 "
                        f"{log[-1]['records_sha256'][:12]}..., records.csv has {row_count} "
                        f"rows and sha256 {records_sha256[:12]}...")
    if manifest["version"] != max(versions, default=0):
        problems.append(f"version is {manifest['version']} but the changelog's last version "
                        f"is {max(versions, default=0)}")
    if problems:
        raise InvalidDataError(f"{where} disagrees with the store: " + "; ".join(problems) + fix)


def repair_manifest(store_dir, *, today: str | None = None) -> list[str]:
    """Recompute ``manifest.json`` from records.csv; return what changed (empty: nothing).

    Raises
    ------
    UsageError
        The folder has no records.csv.
    InvalidDataError
        records.csv cannot be read as a table.
    """
    from refit._util.atomic import sha256_file, write_bytes_atomic
    from refit.curate.store_commit import _locked
    from refit.errors import UsageError

    store_dir = Path(store_dir)
    records = store_dir / "records.csv"
    if not records.is_file():
        raise UsageError(f"{store_dir} has no records.csv; there is nothing to repair from. "
                         "Give the folder of a store")
    with _locked(store_dir, 5.0):
        old = _read_json(store_dir / "manifest.json")
        sha, columns, n = sha256_file(records), *_shape(records)
        new, changes = _repaired(store_dir, old, sha, columns, n, today)
        if new != old:
            data = (json.dumps(new, indent=2, ensure_ascii=False) + "\n").encode("utf-8")
            write_bytes_atomic(store_dir / "manifest.json", data)
    return changes


def _entry_ok(entry) -> bool:
    import jsonschema

    schema = _validator().schema
    entry_schema = {**schema["$defs"]["entry"], "$defs": schema["$defs"]}
    return jsonschema.Draft202012Validator(entry_schema).is_valid(entry)


def _read_json(path: Path):
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError, RecursionError):
        return None


def _shape(records: Path) -> tuple[list[str], int]:
    import pandas as pd

    try:
        frame = pd.read_csv(records, dtype=str, keep_default_na=False, encoding="utf-8")
    except (ValueError, UnicodeDecodeError, pd.errors.ParserError) as exc:
        raise InvalidDataError(f"{records} cannot be read as a table ({exc}); restore it from "
                               "a backup") from None
    return [str(c) for c in frame.columns], len(frame)


def _repaired(store_dir, old, sha, columns, n, today):
    """(new manifest, list of changes) from the old manifest and records.csv's facts."""
    changes = []
    if not isinstance(old, dict):
        changes.append("manifest.json was unreadable or not a JSON object: rebuilt")
        old = {}
    log = old.get("changelog")
    if not isinstance(log, list):
        changes.append("the changelog was missing: a new one starts here (the history before "
                       "this repair is not known)")
        log = []
    kept = [e for e in log if _entry_ok(e)]
    if len(kept) != len(log):
        changes.append(f"dropped {len(log) - len(kept)} changelog entr(ies) of the wrong shape")
    version = max([e["version"] for e in kept if e.get("kind") != "attempt"], default=0)
    if kept and (kept[-1]["records_sha256"], kept[-1]["row_count_after"]) == (sha, n):
        pass
    elif n or kept:
        version += 1
        before = kept[-1]["row_count_after"] if kept else 0
        kept.append({"kind": "repair", "version": version,
                     "date": today or dt.date.today().isoformat(), "row_count_after": n,
                     "records_sha256": sha, "columns": columns,
                     "note": f"records.csv changed outside refit: {before} rows recorded "
                             f"before, {n} now; recorded by a manifest repair"})
        changes.append(f"records.csv ({n} rows, sha256 {sha[:12]}...) differs from the last "
                       f"changelog entry: recorded as version {version} (kind 'repair')")
    new = {**old, "name": old.get("name") if isinstance(old.get("name"), str) and old.get("name")
           else store_dir.name, "format": "refit-store/1", "version": version,
           "records_sha256": sha, "row_count": n, "columns": columns, "changelog": kept}
    for key in ("name", "version", "records_sha256", "row_count"):
        if old.get(key) != new[key]:
            changes.append(f"{key}: {old.get(key)!r} -> {new[key]!r}")
    return new, changes
