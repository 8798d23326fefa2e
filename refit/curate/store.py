"""The calibration store: a folder of versioned modern-soil records.

Layout::

    STORE/records.csv      canonical columns (schema order, then extras alphabetically),
                           rows in admission order; rows are only ever appended
    STORE/manifest.json    name, version, records_sha256, row_count, columns, changelog
    STORE/quarantine/      <version>-<stem>.csv: every rejected row unchanged, with
                           _reasons and _source_row; <version>-<stem>.problems.csv: every
                           problem of that batch, machine-readable
    STORE/vocabularies.json  optional vocabulary extensions of this store
    STORE/.lock            held while a process reads or changes the store

Dataset version k is the first ``row_count_after`` rows of records.csv given in the
changelog entry of version k, restricted to that entry's ``columns``
(:meth:`Store.records_at` rebuilds it and checks its sha256). Version 0 is the empty store.
Every admit that accepts at least one row makes a new version. An admit that accepts
nothing makes no new dataset version but is recorded in the changelog as an attempt
(``"kind": "attempt"``, the unchanged version, records hash and row count), with its
quarantine file, so each batch and its sha256 stay on record. A file whose sha256 is
already in the changelog is refused (:class:`AlreadyAdmittedError`) unless ``again``.

An admit lands whole or not at all: the new files are staged in ``STORE/.pending-<id>/``,
a ``COMMIT`` marker is written atomically once all are complete, then each file is moved
into place with ``os.replace``. Any store operation first finishes a committed staging
folder (roll forward) or deletes an uncommitted one (roll back), and says so.

Locking, staging, commit and recovery live in ``refit/curate/store_commit.py``; duplicate detection
in ``refit/curate/duplicates.py``.
"""

from __future__ import annotations

import datetime as dt
import functools
import io
import json
import re
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from refit._util.atomic import TMP_PREFIX, sha256_bytes
from refit.curate.duplicates import (  # MEASUREMENTS is also store API
    DUPLICATE_TOLERANCE_DEG, MEASUREMENTS, find_duplicates,
)
from refit.curate.batch import (  # noqa: F401 (AlreadyAdmittedError, records_bytes: store API)
    AlreadyAdmittedError, records_bytes, _all_problems, _cell, _refuse_readmit, _screen, _quarantine_bytes, _reason_counts, _rejected_rows, _warning_counts,
)
from refit.curate.store_manifest import check_manifest
from refit.curate.store_records import (  # typed_records, canonical_order: store API
    canonical_order, header_of, records_after, typed_from_bytes, typed_records,
)
from refit.curate.store_commit import (
    StoreNotWritableError, _commit, _locked, create_store, recover,
)
from refit.errors import InvalidDataError, UsageError

FORMAT = "refit-store/1"
#: How long an operation waits for another one to release the store [s].
LOCK_TIMEOUT_S = 5.0
QUARANTINE_EXTRA = ("_reasons", "_source_row")
_OWN_ENTRIES = re.compile(r"^(\.lock|\.pending-.*|" + re.escape(TMP_PREFIX) + r".*)$")

# --------------------------------------------------------------------------------------
# the store as read


@dataclass
class Store:
    """A calibration store as read from its folder (see the module docstring).

    ``raw`` holds records.csv's bytes as read (their sha256 checked against the manifest);
    the text and typed tables are parsed from them when first asked for.
    """

    path: Path
    manifest: dict
    raw: bytes = field(default=b"", repr=False)
    recovered: list[str] = field(default_factory=list)
    _parts: dict = field(default_factory=dict, repr=False)

    @property
    def version(self) -> int:
        return int(self.manifest["version"])

    @property
    def name(self) -> str:
        return str(self.manifest["name"])

    @functools.cached_property
    def records_text(self) -> pd.DataFrame:
        """Records as text, exactly as stored ('' for an empty cell)."""
        if not self.raw:
            return pd.DataFrame(columns=canonical_order([]), dtype=str)
        return _read_records(io.BytesIO(self.raw))

    @functools.cached_property
    def records(self) -> pd.DataFrame:
        """Records with schema number columns as float64 and empty cells as missing."""
        typed = typed_from_bytes(self.raw) if self.raw else None
        return typed if typed is not None else typed_records(self.records_text)

    @functools.cached_property
    def columns(self) -> list[str]:
        """The column names of records.csv, as the table readers name them."""
        if "records" in self.__dict__ or not self.raw:
            return [str(c) for c in self.records.columns]
        return [str(c) for c in header_of(self.raw)]

    @property
    def row_count(self) -> int:
        """Rows of records.csv (as pandas reads it)."""
        parts = [*self._parts.values(), *([self.records] if "records" in self.__dict__
                                          else [])]
        return len(parts[0]) if parts else len(self.records)

    def typed(self, columns) -> pd.DataFrame:
        """:attr:`records` restricted to those of ``columns`` it has (in file order), parsed
        alone (only those columns) unless the whole table already was."""
        wanted = [c for c in self.columns if c in set(columns)]
        if "records" in self.__dict__ or not self.raw:
            return self.records[wanted]
        key = tuple(wanted)
        if key not in self._parts:
            part = typed_from_bytes(self.raw, wanted)
            self._parts[key] = part if part is not None else self.records[wanted]
        return self._parts[key]

    @property
    def appendable(self) -> bool:
        """records.csv is the bytes refit wrote for its last changelog entry (whose sha256
        the manifest check matched), so new rows can be appended to ``raw`` as they are:
        ``records_bytes`` of the stored text gives ``raw`` back. Not after a manifest repair
        (the file may have been written by other software)."""
        log = self.manifest.get("changelog") or []
        return bool(self.raw) and bool(log) and log[-1].get("kind") != "repair" and \
            log[-1].get("records_sha256") == self.manifest.get("records_sha256")

    def records_at(self, version: int) -> pd.DataFrame:
        """The records of dataset ``version`` as text, checked against its recorded sha256."""
        if version == 0:
            return self.records_text.iloc[0:0][list(canonical_order([]))]
        entry = next((e for e in self.manifest["changelog"] if e["version"] == version), None)
        if entry is None:
            raise UsageError(f"store {self.path} has no version {version}; it has versions "
                             f"0 to {self.version}")
        rows = self.records_text.iloc[: entry["row_count_after"]][entry["columns"]]
        if sha256_bytes(records_bytes(rows)) != entry["records_sha256"]:
            raise InvalidDataError(
                f"{self.path}: rebuilding version {version} does not reproduce its recorded "
                "sha256; records.csv was edited outside refit")
        return rows


def _read_records(path: Path) -> pd.DataFrame:
    return pd.read_csv(path, dtype=str, keep_default_na=False, na_filter=False,
                       encoding="utf-8")


def open_store(store_dir, *, lock_timeout: float = LOCK_TIMEOUT_S) -> Store:
    """Open a store, first recovering from any interrupted admit.

    Raises
    ------
    UsageError
        The folder does not exist or is not a store (exit code 2).
    InvalidDataError
        records.csv does not match the sha256 in manifest.json (exit code 1).
    StoreBusyError
        Another process holds the store's lock for longer than ``lock_timeout``.
    """
    store_dir = Path(store_dir)
    if _state(store_dir) != "store":
        raise UsageError(f"{store_dir} is not a refit store (no manifest.json); give the "
                         "folder of a store, or create one with 'refit admit TABLE --into "
                         f"{store_dir}'")
    try:
        lock = _locked(store_dir, lock_timeout)
        lock.__enter__()
    except (StoreNotWritableError, PermissionError):  # read-only (e.g. installed with refit)
        if list(store_dir.glob(".pending-*")):
            raise InvalidDataError(
                f"{store_dir} holds an interrupted admit but is read-only; open it once with "
                "write access so refit can finish or undo it") from None
        return _load(store_dir, [])
    try:
        return _load(store_dir, recover(store_dir))
    finally:
        lock.__exit__()


def _load(store_dir: Path, recovered: list[str], columns=None) -> Store:
    """The store in ``store_dir``, its manifest checked against records.csv (schema, hash,
    row count); with ``columns``, only those are parsed (:meth:`Store.typed`)."""
    try:
        manifest = json.loads((store_dir / "manifest.json").read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError, RecursionError) as exc:
        raise InvalidDataError(
            f"{store_dir / 'manifest.json'} cannot be read ({str(exc)[:200]}); restore it from "
            f"a backup, or rebuild it with 'refit admit --repair-manifest {store_dir}'") from None
    records = store_dir / "records.csv"
    if not records.is_file():
        raise InvalidDataError(f"{records} is missing; restore it from a backup")
    raw = records.read_bytes()
    sha = sha256_bytes(raw)
    check_manifest(store_dir, manifest, sha)  # its schema and the hash, before parsing
    store = Store(store_dir, manifest, raw, recovered)
    if columns is not None:
        store.typed(columns)
    check_manifest(store_dir, manifest, sha, store.row_count)
    return store


def _empty_store(store_dir: Path, name: str | None = None) -> Store:
    return Store(store_dir, {"name": name or store_dir.name, "version": 0, "changelog": [],
                             "columns": canonical_order([])})


def _state(store_dir: Path) -> str:
    """'missing', 'new' (empty folder or only our own leftovers), 'store'; else refuse."""
    if not store_dir.exists():
        return "missing"
    if not store_dir.is_dir():
        raise UsageError(f"{store_dir} is a file, not a store folder; choose a folder path")
    if (store_dir / "manifest.json").is_file():
        return "store"
    others = [p.name for p in store_dir.iterdir() if not _OWN_ENTRIES.match(p.name)]
    if others:
        raise UsageError(
            f"{store_dir} exists but is not a refit store (no manifest.json; it holds "
            f"{', '.join(sorted(others)[:5])}{' ...' if len(others) > 5 else ''}); choose a "
            "new folder name or an empty folder")
    return "new"


# --------------------------------------------------------------------------------------
# admit


@dataclass
class AdmitResult:
    """What an admit did (or would do, on a dry run)."""

    table: str
    store: str
    dry_run: bool
    created: bool
    version_before: int
    version_after: int
    rows_read: int
    accepted: int
    rejected: int
    row_count_after: int
    reasons: dict[str, int]
    rejected_rows: list[dict]
    warnings: dict[str, int]
    quarantine_file: str | None
    problems_file: str | None
    records_file: str
    mappings: list[str]
    reader_notes: list[str]
    recovered: list[str]
    records_sha256: str | None
    suspect: int = 0
    suspect_accepted: int = 0
    suspect_rows: list = field(default_factory=list)
    unmapped: list = field(default_factory=list)
    consistency: list = field(default_factory=list)
    problem_groups: list = field(default_factory=list)
    new_version: bool = True

    def to_dict(self) -> dict:
        return asdict(self)


def admit(table_path, store_dir, *, dry_run: bool = False, vocabularies=None, vocab_files=(),
          today: str | dt.date | None = None, tolerance_deg: float = DUPLICATE_TOLERANCE_DEG,
          lock_timeout: float | None = None, units=None, accept_suspect: bool = False,
          again: bool = False, sheet: str | None = None) -> AdmitResult:
    """Admit the rows of a table into a store: check, split, append, quarantine, version.

    Parameters
    ----------
    table_path : str or Path
        Incoming table (csv/tsv/txt, xlsx, parquet).
    store_dir : str or Path
        The store folder; created (named after the folder) when it does not exist.
    dry_run : bool
        Work out and return the same accounting, but write nothing. (An interrupted earlier
        admit is still finished or undone first, as by any store operation.)
    vocabularies : dict, optional
        Vocabularies (from :func:`refit.curate.checks.load_vocabularies`); default the shipped ones
        extended by ``STORE/vocabularies.json`` and ``vocab_files``.
    vocab_files : sequence of path
        Extra vocabulary extension files.
    today : str or datetime.date, optional
        Date for ``added_on`` and the changelog (ISO); default today.
    tolerance_deg : float
        Same-site tolerance of the duplicate check [degree].
    lock_timeout : float, optional
        Seconds to wait for another process to release the store [s]; default
        ``LOCK_TIMEOUT_S``.
    units : dict of str to str, optional
        Units confirmed by the user (``--unit COLUMN=UNIT``; file or canonical column name
        to unit); they replace the declared unit and skip that column's slip test.
    accept_suspect : bool
        Admit the rows the consistency test holds as suspect (they are listed as warnings)
        instead of quarantining them.
    again : bool
        Admit a file whose sha256 is already in the changelog.
    sheet : str, optional
        Worksheet of an xlsx file; default the first visible one.

    Returns
    -------
    AdmitResult

    Raises
    ------
    InvalidDataError
        Table-level problems (missing required or climate columns, unconvertible units),
        a column that looks like another unit than declared, mixed units in a column;
        nothing is written.
    AlreadyAdmittedError
        The same file (sha256) was admitted before and ``again`` is false.
    UnreadableInputError, UsageError, StoreBusyError
        See :func:`refit.curate.tables.read_table`, :func:`open_store`.
    """
    from refit.curate.columns import check_unit_options, parse_column
    from refit.curate.tables import read_table
    from refit.curate.units import normalise_columns

    store_dir, today = Path(store_dir), _iso_day(today)
    units = dict(units or {})
    state = _state(store_dir)
    try:
        table = read_table(table_path, as_text=True, sheet=sheet)
    except InvalidDataError as exc:  # a repeated or blank column name, mixed decimals
        raise InvalidDataError(f"{Path(table_path)} cannot be admitted; nothing was written: "
                               f"{exc}") from None
    original = table.frame
    incoming = original.drop(columns=[c for c in QUARANTINE_EXTRA if c in original.columns])
    check_unit_options(units, incoming.columns)
    try:
        frame, mappings = normalise_columns(_as_numbers_read(table, incoming),
                                            positions=table.file_columns,
                                            parser=parse_column, units=units)
    except InvalidDataError as exc:
        raise InvalidDataError(f"{table.path} cannot be admitted; nothing was written: "
                               f"{exc}") from None
    if state != "store" and dry_run:  # nothing to lock or recover; create nothing
        return _admit_locked(table, incoming, frame, mappings, _empty_store(store_dir), True,
                             True, vocabularies, vocab_files, today, tolerance_deg,
                             (units, accept_suspect, again))
    timeout = LOCK_TIMEOUT_S if lock_timeout is None else lock_timeout
    args = (table, incoming, frame, mappings)
    options = (vocabularies, vocab_files, today, tolerance_deg, (units, accept_suspect, again))
    if state == "missing" and not dry_run:
        result = create_store(store_dir, timeout, lambda stage: _admit_locked(
            *args, _empty_store(stage, store_dir.name), True, False, *options))
        if result is not None:
            return result
        # another process created the store first: admit into it, after it
    if dry_run:
        try:
            with _locked(store_dir, timeout):
                pass
        except StoreNotWritableError:  # a read-only store: read it without its lock
            return _admit_locked(*args, open_store(store_dir), False, True, *options)
    with _locked(store_dir, timeout):
        recovered = recover(store_dir)
        state = _state(store_dir)
        store = (_load(store_dir, recovered, _admit_columns()) if state == "store"
                 else _empty_store(store_dir))
        store.recovered = recovered
        return _admit_locked(*args, store, state != "store", dry_run, *options)


def _admit_columns() -> list[str]:
    """The stored columns an admit reads: ids and sites, measurements (duplicates), and
    the columns of the consistency tests."""
    from refit.curate import consistency as cs

    return ["profile_id", "source", "latitude", "longitude", *MEASUREMENTS,
            *cs.SLIP_COLUMNS, *(c for pair in cs.REFERENCES for c in pair.columns)]


def _as_numbers_read(table, incoming: pd.DataFrame) -> pd.DataFrame:
    """``incoming`` with decimal-comma numbers written with a point (see
    :mod:`refit.curate.decimal_commas`); the quarantine keeps ``incoming`` itself, as in the file."""
    from refit.curate.decimal_commas import to_decimal_points

    return to_decimal_points(incoming, [c for c in table.decimal_comma if c in incoming])


def _iso_day(today) -> str:
    if today is None:
        return dt.date.today().isoformat()
    return today.isoformat() if isinstance(today, dt.date) else str(today)


def _admit_locked(table, incoming, frame, mappings, store, created, dry_run, vocabularies,
                  vocab_files, today, tolerance_deg, options) -> AdmitResult:
    from refit.curate.checks import check_frame, load_vocabularies

    units, accept_suspect, again = options
    _refuse_readmit(store, table, again)
    if vocabularies is None:
        own = store.path / "vocabularies.json"
        vocabularies = load_vocabularies(own if own.is_file() else None, *vocab_files)
    report = check_frame(frame, source_rows=table.source_rows, vocabularies=vocabularies,
                         path=str(table.path))
    table_errors = report.table_errors()
    if len(table_errors):
        messages = [" ".join(str(m).split()) for m in table_errors["message"]]
        raise InvalidDataError(f"{table.path} cannot be admitted; nothing was written: "
                               + " | ".join(f"({k}) {m}" for k, m in
                                            enumerate(messages, start=1)))
    n = len(frame)
    original = _as_numbers_read(table, incoming)
    stored = store.typed(_admit_columns())
    rejected, problems = _split_rows(report, frame, stored, table.source_rows, original,
                                     tolerance_deg)
    suspect, problems, screening = _screen(report, stored, incoming, table, rejected,
                                           problems, units, accept_suspect)
    held = rejected | suspect
    new_version = bool((~held).any())
    version = store.version + 1 if new_version else store.version
    stem = re.sub(r"[^A-Za-z0-9._-]+", "_", Path(table.path).stem) or "table"
    if not new_version:  # an attempt: named apart from the version's own batch
        stem = f"attempt{len(store.manifest.get('changelog', [])) + 1}-{stem}"
    q_rel = f"quarantine/{version:04d}-{stem}.csv" if held.any() else None
    p_rel = f"quarantine/{version:04d}-{stem}.problems.csv" if len(problems) else None
    data, columns, n_after = records_after(store, report.frame.loc[~held], today,
                                            new_version or created)
    reasons = _reason_counts(problems, table.source_rows[held])
    entry = {
        "version": version, "date": today, "source_file": Path(table.path).name,
        "source_sha256": table.sha256, "rows_read": n, "accepted": int((~held).sum()),
        "rejected": int(rejected.sum()), "suspect": int(suspect.sum()),
        "quarantine_file": q_rel, "problems_file": p_rel,
        "row_count_after": n_after, "records_sha256": sha256_bytes(data),
        "columns": columns, "reasons": reasons, "mappings": list(mappings),
    }
    if not new_version:
        entry = {"kind": "attempt", **entry}
    result = AdmitResult(
        table=str(table.path), store=str(store.path), dry_run=dry_run, created=created,
        version_before=store.version, version_after=store.version if dry_run else version,
        rows_read=n, accepted=entry["accepted"], rejected=entry["rejected"],
        row_count_after=n_after, reasons=reasons,
        rejected_rows=_rejected_rows(problems, report.frame, table.source_rows, held),
        warnings=_warning_counts(problems), quarantine_file=q_rel, problems_file=p_rel,
        records_file="records.csv", mappings=list(mappings) + list(report.notes),
        reader_notes=list(table.notes), recovered=list(store.recovered),
        records_sha256=entry["records_sha256"], new_version=new_version, **screening)
    if dry_run:
        return result
    files = {"manifest.json": _manifest_bytes(store, entry, tolerance_deg)}
    if new_version or created:
        files["records.csv"] = data
    if q_rel:
        files[q_rel] = _quarantine_bytes(incoming, held, problems, table.source_rows)
    if p_rel:
        files[p_rel] = problems.to_csv(index=False, lineterminator="\n").encode("utf-8")
    _commit(store.path, files, {"version": version, "source_file": entry["source_file"]})
    return result


def _split_rows(report, frame, stored, source_rows, original, tolerance_deg):
    """(rejected mask, problems table with file_column and outcome) for a checked batch
    (``stored``: the store's typed records, at least :func:`_admit_columns`)."""
    from refit.curate.units import add_file_context

    n = len(frame)
    bad = np.isin(np.arange(n), frame.index.get_indexer(report.bad_rows()))
    dups = find_duplicates(report.frame, stored, bad, tolerance_deg)
    problems = add_file_context(_all_problems(report, dups, source_rows), original,
                                source_rows)
    rejected = bad | np.isin(np.arange(n), [d["pos"] for d in dups])
    problems["outcome"] = np.where(
        problems["row"].isna(), "",
        np.where(problems["row"].isin(source_rows[rejected]), "quarantined", "admitted"))
    return rejected, problems


# --------------------------------------------------------------------------------------
# building the files


def _manifest_bytes(store: Store, entry: dict, tolerance_deg: float) -> bytes:
    manifest = {
        "name": store.manifest.get("name", store.path.name),
        "format": FORMAT,
        "version": entry["version"],
        "records_sha256": entry["records_sha256"],
        "row_count": entry["row_count_after"],
        "columns": entry["columns"],
        "created": store.manifest.get("created", entry["date"]),
        "duplicate_tolerance_deg": tolerance_deg,
        "versioning": ("rows are only appended: dataset version k is the first "
                       "row_count_after rows of records.csv in the columns of changelog "
                       "entry k, whose sha256 is records_sha256"),
        "changelog": [*store.manifest.get("changelog", []), entry],
    }
    return (json.dumps(manifest, indent=2, ensure_ascii=False) + "\n").encode("utf-8")
