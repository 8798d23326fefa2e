"""Coefficient files: build, write, load, validate, hash and evaluate them.

A coefficient file is one JSON document per transfer function, described by the JSON
Schema ``schemas/coefficients.schema.json`` (draft 2020-12) and checked against it on
write and on read. It carries everything another program needs to evaluate the equation
*and its prediction interval* without the calibration data (see the README section
"Evaluating a coefficient file" for the arithmetic, in words any language can follow).

Consumer API (light: numpy and the standard library; no pandas, scipy, statsmodels or
scikit-learn at import)::

    from refit.coefficients import load
    eq = load("map_from_bk_depth/1.0.0.json")      # refuses edited or invalid files
    res = eq.predict([40.0, 120.0])                # estimate, lower, upper, flags
    res.to_frame()                                 # a pandas DataFrame, if wanted

Loading never executes anything from the file. :func:`read_record` is the one reader every
command uses: the bytes are read (a missing or unreadable path: exit code 2), parsed as a
JSON object (NaN and infinities refused), the ``sha256`` of the canonical content (keys
sorted, no whitespace, UTF-8, without the ``sha256`` key) compared with the stored one, its
``schema_version`` major checked and the schema validated (a file that exists but fails any
of these is not a coefficient file: exit code 1). Any failure names the file and the JSON
path of the field.
"""

from __future__ import annotations

import json
import math
import re
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from refit.errors import InvalidDataError, UnreadableInputError, UsageError

SCHEMA_VERSION = "1.4.0"
CANDIDATE_VERSION = "0.0.0-candidate"
SCHEMA_FILE = "coefficients.schema.json"
CAUTION = ("An estimate from a transfer function carries a wide interval; use it for "
           "research, not for engineering, hazard or regulatory decisions.")


#: A variant name (``$.variant``, schema 1.3.0): lower case letters, digits, ``_`` and ``-``,
#: starting with a letter, at most 40 characters.
VARIANT_NAME = re.compile(r"^[a-z][a-z0-9_-]{0,39}$")
#: How the variant of a file without ``$.variant`` is named (never stored in a file).
DEFAULT_VARIANT = "default"
#: The schema version that introduced ``$.variant``.
VARIANT_SCHEMA = "1.3.0"
#: The schema version that introduced ``$.provenance.dataset.sheet`` (the worksheet of an
#: xlsx table a fit was made on).
SHEET_SCHEMA = "1.4.0"
#: The schema version written when the content needs nothing newer: files without a
#: sheet keep the bytes and the hash they had before the sheet member existed.
BASE_WRITE_SCHEMA = "1.3.0"


def recorded_sheet(content: dict) -> str | None:
    """``$.provenance.dataset.sheet``: the worksheet of an xlsx table the fit was made on,
    or ``None`` (a store, a csv/parquet table, a literature equation, or a file written
    before schema 1.4.0)."""
    ds = (content.get("provenance") or {}).get("dataset") if isinstance(content, dict) else None
    sheet = ds.get("sheet") if isinstance(ds, dict) else None
    return sheet if isinstance(sheet, str) else None


def schema_version_for(content: dict) -> str:
    """The lowest schema version that describes ``content``: :data:`SHEET_SCHEMA` when
    the provenance records a worksheet, else :data:`BASE_WRITE_SCHEMA` (so a fit from a
    store or a csv table is written byte for byte as before schema 1.4.0)."""
    return SHEET_SCHEMA if recorded_sheet(content) is not None else BASE_WRITE_SCHEMA


# ----------------------------------------------------------------------------- variants
def variant_name(name, where: str = "--variant") -> str | None:
    """A variant name as stored: ``None`` for the default variant (``None``, ``""`` or
    ``"default"``), else the name, checked against :data:`VARIANT_NAME`.

    Raises
    ------
    UsageError
        The name has other characters, starts with a digit or is longer than 40.
    """
    if name is None or name == "" or name == DEFAULT_VARIANT:
        return None
    if not isinstance(name, str) or not VARIANT_NAME.match(name):
        raise UsageError(f"{where}: {str(name)[:60]!r} is not a variant name; use lower case "
                         "letters, digits, '_' and '-', starting with a letter, at most 40 "
                         "characters (e.g. 'mixed' or 'ols-by-source')")
    return name


def variant_of(content: dict) -> str | None:
    """The variant a coefficient file belongs to.

    ``$.variant`` when present; :data:`DEFAULT_VARIANT` for a published file without it
    (every file published before variants existed, literature equations); ``None`` for
    a candidate not yet published, whose variant is chosen when it is published.
    """
    v = content.get("variant")
    if isinstance(v, str) and v:
        return v
    return DEFAULT_VARIANT if content.get("status") == "published" else None


# ----------------------------------------------------------------------------- plain JSON
def plain(value):
    """A JSON-ready copy of ``value``: numpy scalars and arrays to Python, NaN/inf to None."""
    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return plain(value.tolist())
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    if value is None or isinstance(value, str):
        return value
    pd = sys.modules.get("pandas")  # a pandas missing value exists only if pandas is loaded
    if pd is not None and (value is pd.NA or value is pd.NaT):
        return None
    return str(value)


def non_finite_path(value, path: str = "$") -> str | None:
    """The JSON path of the first NaN or infinite number in ``value`` (None if none)."""
    stack = [(value, path)]
    while stack:  # iterative: a deeply nested value cannot exhaust the recursion limit
        item, where = stack.pop()
        if isinstance(item, dict):
            stack.extend((v, f"{where}.{k}") for k, v in reversed(list(item.items())))
        elif isinstance(item, (list, tuple)):
            stack.extend((v, f"{where}[{i}]") for i, v in reversed(list(enumerate(item))))
        elif isinstance(item, (float, np.floating)) and not math.isfinite(item):
            return where
        elif isinstance(item, np.ndarray) and item.dtype.kind == "f" and \
                not np.isfinite(item).all():
            return where
    return None


def canonical_bytes(content: dict) -> bytes:
    """Canonical JSON bytes of ``content`` without its ``sha256`` key (keys sorted,
    compact separators, UTF-8).

    The canonical form is one-to-one: a NaN or an infinite number is refused here, never
    written as ``null`` (two contents that differ only there would share a hash).

    Raises
    ------
    InvalidDataError
        ``content`` holds a NaN or infinite number (its JSON path is named).
    """
    bad = non_finite_path(content)
    if bad is not None:
        raise InvalidDataError(f"{bad} is not a finite number; a coefficient file holds "
                               "finite numbers only (null where there is none), so its "
                               "hash is not computed: correct the value or use null")
    body = {k: v for k, v in plain(content).items() if k != "sha256"}
    return json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                      allow_nan=False).encode("utf-8")


def content_sha256(content: dict) -> str:
    """sha256 (hex) of :func:`canonical_bytes`."""
    import hashlib

    return hashlib.sha256(canonical_bytes(content)).hexdigest()


def with_hash(content: dict) -> dict:
    """A plain copy of ``content`` with ``sha256`` set to its canonical hash."""
    out = plain(content)
    out["sha256"] = content_sha256(out)
    return out


def dumps(content: dict) -> str:
    """The file text: JSON indented by one space, keys sorted, UTF-8 characters as they
    are (no ``\\u`` escapes), newline at the end.

    A function of the content alone (the same content has one spelling), so
    :func:`check_bytes` can refuse any other spelling: an edit of whitespace, key order or
    escapes is caught even though it leaves the content hash unchanged.
    """
    return json.dumps(plain(content), indent=1, sort_keys=True, ensure_ascii=False,
                      allow_nan=False) + "\n"


# ----------------------------------------------------------------------------- schema
_VALIDATOR = None


def schema() -> dict:
    """The coefficient-file JSON Schema (``schemas/coefficients.schema.json``)."""
    from refit._util.resources import schemas_dir

    return json.loads((schemas_dir() / SCHEMA_FILE).read_text("utf-8"))


def _validator():
    global _VALIDATOR
    if _VALIDATOR is None:
        from jsonschema import Draft202012Validator

        _VALIDATOR = Draft202012Validator(schema())
    return _VALIDATOR


def json_path(parts) -> str:
    """``$.interval.level`` / ``$.predictors[0].name`` from a jsonschema path."""
    out = "$"
    for p in parts:
        out += f"[{p}]" if isinstance(p, int) else f".{p}"
    return out


def schema_problems(content: dict) -> list[tuple[str, str]]:
    """``(json path, message)`` of every schema violation, sorted by path."""
    errs = sorted(_validator().iter_errors(content), key=lambda e: list(map(str, e.path)))
    return [(json_path(e.absolute_path), e.message) for e in errs]


def check_schema_version(content: dict, where: str) -> None:
    """Refuse a missing or unknown ``schema_version`` (only major 1 is understood)."""
    sv = content.get("schema_version") if isinstance(content, dict) else None
    if not isinstance(sv, str):
        raise InvalidDataError(f"{where}: $.schema_version is missing or not text; this is "
                               "not a refit coefficient file (expected e.g. \"1.0.0\")")
    major = sv.split(".")[0]
    if major != SCHEMA_VERSION.split(".")[0]:
        raise InvalidDataError(f"{where}: $.schema_version is {sv!r}; this refit reads "
                               f"major version {SCHEMA_VERSION.split('.')[0]} "
                               f"({SCHEMA_VERSION}); upgrade refit or re-export the file")


def check_content_hash(content: dict, where: str) -> None:
    """Refuse content whose ``sha256`` is missing or is not the hash of the content.

    The hash is :func:`content_sha256`: the README's language-neutral recipe (drop
    ``sha256``, keys sorted, separators ``,`` and ``:``, UTF-8, SHA-256 hex).

    Raises
    ------
    InvalidDataError
        Naming ``where``, the stored and the computed hash.
    """
    stated = content.get("sha256")
    if not isinstance(stated, str):
        raise InvalidDataError(f"{where}: $.sha256 is missing or not text; a coefficient file "
                               "carries the SHA-256 of its content: take the file again "
                               "from its registry or run")
    actual = content_sha256(content)
    if actual != stated:
        raise InvalidDataError(
            f"{where}: $.sha256 does not match the content (stored {stated[:12]}..., "
            f"computed {actual[:12]}...): the file was edited after it was written; take it "
            "again from its registry or run")


def check_schema(content: dict, where: str) -> None:
    """Schema version (major 1), the JSON Schema, then the cross-field rules.

    Raises
    ------
    InvalidDataError
        Naming ``where`` and the JSON path of the first offending field (and how many
        more there are).
    """
    check_schema_version(content, where)
    problems = schema_problems(content)
    if problems:
        path, msg = problems[0]
        more = f" (and {len(problems) - 1} more problem(s))" if len(problems) > 1 else ""
        raise InvalidDataError(f"{where}: {path}: {msg}{more}; the file does not follow "
                               f"the coefficient-file schema {SCHEMA_VERSION}")
    _check_consistency(content, where)


def validate(content: dict, *, where: str = "coefficient record",
             check_hash: bool = True) -> dict:
    """Check the content hash (optionally), then the schema; return ``content``.

    The order of the README's recipe and of :func:`read_record`: a file whose hash fails
    is refused before anything in it is interpreted.

    Raises
    ------
    InvalidDataError
        See :func:`check_content_hash` and :func:`check_schema`.
    """
    if check_hash:
        check_content_hash(content, where)
    check_schema(content, where)
    return content


def _check_consistency(c: dict, where: str) -> None:
    """Cross-field rules a schema cannot state: shapes of coefficients and covariance."""
    p = len(c["terms"])
    if len(c["coefficients"]) != p:
        raise InvalidDataError(f"{where}: $.coefficients has {len(c['coefficients'])} "
                               f"value(s) but $.terms names {p}")
    for path, mat in (("$.covariance", c.get("covariance")),
                      ("$.interval.between_covariance",
                       (c.get("interval") or {}).get("between_covariance"))):
        if mat is not None and (len(mat) != p or any(len(r) != p for r in mat)):
            raise InvalidDataError(f"{where}: {path} must be {p} x {p} (one row and "
                                   "column per term)")
    _check_group_interval(c.get("interval") or {}, p, where)
    if recorded_sheet(c) is not None and _version_tuple(c["schema_version"]) < \
            _version_tuple(SHEET_SCHEMA):
        raise InvalidDataError(f"{where}: $.provenance.dataset.sheet is set, but "
                               f"$.schema_version is {c['schema_version']!r}; the sheet "
                               f"member exists from schema {SHEET_SCHEMA} on: take the file "
                               "again from its registry or run")
    for name in c["equation"]["x"]:
        if not any(name in t for t in c["terms"]):
            raise InvalidDataError(f"{where}: $.equation.x names {name!r}, which no term "
                                   "uses")


def _version_tuple(text) -> tuple:
    """``"1.3.0"`` -> ``(1, 3, 0)``; text that is not one sorts first."""
    try:
        return tuple(int(p) for p in str(text).split("."))
    except ValueError:
        return (0,)


def _check_group_interval(iv: dict, p: int, where: str) -> None:
    """Shapes of a group-level interval's stored quantities."""
    if iv.get("method") not in ("group-jackknife+", "group-cv+"):
        return
    B, g, r = iv["left_out_coefficients"], iv["row_groups"], iv["row_abs_residuals"]
    G = iv["n_groups"]
    units = G if iv["method"] == "group-jackknife+" else len(B)
    problems = []
    if len(B) != units or any(len(row) != p for row in B):
        problems.append(f"$.interval.left_out_coefficients must be {units} x {p}")
    if len(g) != len(r):
        problems.append("$.interval.row_groups and row_abs_residuals must have one entry "
                        "per calibration soil each")
    if any(v >= G for v in g) or len(set(g)) != G:
        problems.append(f"$.interval.row_groups must use every group index 0..{G - 1}")
    folds = iv.get("group_folds")
    if iv["method"] == "group-cv+" and (folds is None or len(folds) != G
                                        or any(v >= len(B) for v in folds)):
        problems.append(f"$.interval.group_folds must give a fold below {len(B)} for each "
                        f"of the {G} groups")
    if problems:
        raise InvalidDataError(f"{where}: {problems[0]}")


# ----------------------------------------------------------------------------- files
#: JSON's names for the Python types :func:`json.loads` returns
_JSON_TYPES = {"list": "an array", "str": "a string", "int": "a number", "float": "a number",
               "bool": "true or false", "NoneType": "null"}


#: The largest JSON number a coefficient file may hold (the largest finite double).
_MAX_FLOAT = float(np.finfo(float).max)


def _reject_constant(token: str):
    raise ValueError(f"{token} is not allowed in a coefficient file (use null)")


def _finite_float(token: str) -> float:
    value = float(token)
    if not math.isfinite(value):
        raise ValueError(f"the number {token[:40]} overflows to infinity; a coefficient file "
                         "holds finite numbers only (use null)")
    return value


def _finite_int(token: str) -> int:
    if len(token.lstrip("-")) > 309:
        raise ValueError(f"the integer {token[:20]}... ({len(token)} digits) is beyond any "
                         "finite number; a coefficient file holds finite numbers only")
    return int(token)


def read_bytes(path) -> bytes:
    """The raw bytes of a coefficient file.

    Raises
    ------
    UnreadableInputError
        The path does not exist, is a folder or cannot be read (exit code 2).
    """
    import os

    if not isinstance(path, (str, os.PathLike)) or not str(path):
        raise UsageError(f"a coefficient file is named by a path (text or pathlib.Path); "
                         f"got {type(path).__name__} {str(path)[:40]!r}")
    path = Path(path)
    try:
        return path.read_bytes()
    except FileNotFoundError:
        raise UnreadableInputError(f"{path}: no such coefficient file; check the "
                                   "path") from None
    except IsADirectoryError:
        raise UnreadableInputError(f"{path}: is a folder, not a coefficient file; name a "
                                   "file such as <function_id>/<version>.json") from None
    except OSError as err:
        raise UnreadableInputError(f"{path}: cannot read the coefficient file "
                                   f"({err.strerror}); check its permissions") from None


def parse_bytes(raw: bytes, where) -> dict:
    """The JSON object in a coefficient file's bytes; nothing in it is executed.

    Raises
    ------
    InvalidDataError
        The bytes are empty, not UTF-8, not JSON (NaN and infinities refused) or not a
        JSON object: the file exists but is not a coefficient file (exit code 1).
    """
    if not raw.strip():
        raise InvalidDataError(f"{where}: the file is empty, not a coefficient file; take "
                               "it again from its registry or run")
    try:
        content = json.loads(raw.decode("utf-8"), parse_constant=_reject_constant,
                             parse_float=_finite_float, parse_int=_finite_int)
    except RecursionError:
        raise InvalidDataError(f"{where}: the JSON is nested too deeply to be a coefficient "
                               "file (a coefficient file nests a few levels); take it again "
                               "from its registry or run") from None
    except UnicodeDecodeError as err:
        raise InvalidDataError(f"{where}: not UTF-8 text (byte {err.start}), not a "
                               "coefficient file; the file is damaged: take it again from "
                               "its registry or run") from None
    except ValueError as err:
        raise InvalidDataError(f"{where}: not valid JSON ({err}); the file is truncated or "
                               "damaged: take it again from its registry or run") from None
    if not isinstance(content, dict):
        found = _JSON_TYPES.get(type(content).__name__, type(content).__name__)
        raise InvalidDataError(f"{where}: $: a coefficient file is a JSON object; found "
                               f"{found}: name a file refit wrote (a run's fits/*.json or a "
                               "registry's <function_id>/<version>.json)")
    return content


def read_file(path) -> tuple[dict, bytes]:
    """The JSON content and raw bytes of a coefficient file, not yet checked
    (:func:`read_bytes`, then :func:`parse_bytes`)."""
    raw = read_bytes(path)
    return parse_bytes(raw, str(path)), raw


#: the first schema version refit wrote in one spelling (keys sorted, :func:`dumps`);
#: files of earlier versions were written with keys in the order they were built
ONE_SPELLING_FROM = (1, 2, 0)


def legacy_spelling(content: dict) -> bool:
    """Whether ``content`` is of a schema version before :data:`ONE_SPELLING_FROM`,
    whose files refit wrote with keys in the order they were built (:func:`legacy_dumps`)."""
    try:
        sv = tuple(int(p) for p in str(content.get("schema_version")).split("."))
    except ValueError:
        return False
    return sv < ONE_SPELLING_FROM


def legacy_dumps(content: dict) -> str:
    """How refit wrote files before :data:`ONE_SPELLING_FROM`: as :func:`dumps`, with keys
    in the order they stand (the parsed file's own order)."""
    return json.dumps(plain(content), indent=1, ensure_ascii=False, allow_nan=False) + "\n"


def check_bytes(raw: bytes, content: dict, where) -> None:
    """Refuse bytes that are not exactly :func:`dumps` of their own content.

    The content hash covers the numbers and texts; this covers the rest: whitespace, key
    order, ``\\u`` escapes, line ends. refit writes only :func:`dumps` output, so any
    other spelling of the same content was edited after refit wrote it. A file of a schema
    version before :data:`ONE_SPELLING_FROM` may also be spelled as refit wrote it then
    (:func:`legacy_dumps`): whitespace, line ends and escapes are still checked, the key
    order of such files cannot be.

    Raises
    ------
    InvalidDataError
        Naming the first differing byte and its line.
    """
    want = dumps(content).encode("utf-8")
    if raw == want or (legacy_spelling(content)
                       and raw == legacy_dumps(content).encode("utf-8")):
        return
    at = next((i for i, (a, b) in enumerate(zip(raw, want)) if a != b),
              min(len(raw), len(want)))
    line = raw[:at].count(b"\n") + 1
    raise InvalidDataError(
        f"{where}: bytes check failed: the bytes differ from how refit writes this content "
        f"(first at byte {at}, line {line}); the content hash still matches, but spaces, line "
        "ends, key order or escapes were changed by hand or by another program: take the "
        "file again from its registry or run")


def read_record(path) -> dict:
    """The one reader of coefficient files: read, parse, check the hash, the schema, then
    the exact bytes (:func:`check_bytes`).

    Every command that takes a coefficient file (apply, compare, verify, diff, publish)
    and :func:`load` read it here, so the same bad file gets the same message and exit
    code everywhere.

    Raises
    ------
    UnreadableInputError
        The path does not exist, is a folder or cannot be read (exit code 2).
    InvalidDataError
        The file is empty, not UTF-8, not JSON or not a JSON object; its hash is missing
        or does not match; unknown schema version or schema violation; the bytes are not
        exactly as refit writes the content (exit code 1).
    """
    content, raw = read_file(path)
    validate(content, where=str(path))
    check_bytes(raw, content, str(path))
    return content


def write_record(content: dict, path) -> Path:
    """Validate (schema, hash) and write ``content`` atomically; returns the path."""
    from refit._util.atomic import write_text_atomic

    path = Path(path)
    validate(content, where=str(path))
    write_text_atomic(path, dumps(content))
    return path


# ----------------------------------------------------------------------------- consumer
@dataclass
class Prediction:
    """Estimates and intervals [units of the response] and flags (';'-joined text);
    ``cautions`` says why limits are infinite (a group-level interval with too few
    groups for the level).

    ``other_lower``, ``other_upper``: where a forward line's classical-calibration set is
    two rays (flag ``two-rays``), ``lower``/``upper`` are the ray holding the estimate and
    these the other ray (one end infinite, cut at the physical bounds), as
    ``Fit.predict``'s columns of the same names; NaN for every other row (and every row of
    an inverse file). When the estimate lies outside the physical bounds and its ray
    wholly outside them, ``lower``/``upper`` are the other ray cut at the bounds and these
    NaN (:func:`refit.models.inversion.classical.bound_line_set`). ``lower_untruncated``/``upper_untruncated``: a forward file's limits
    cut at a physical bound (flag ``truncated-at-bound``) before the cut, NaN where nothing
    was cut (None: not computed)."""

    estimate: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    flags: np.ndarray
    level: float | None
    method: str
    exact: bool
    cautions: tuple = ()
    other_lower: np.ndarray | None = None
    other_upper: np.ndarray | None = None
    lower_untruncated: np.ndarray | None = None
    upper_untruncated: np.ndarray | None = None

    def __post_init__(self):
        for name in ("other_lower", "other_upper"):
            if getattr(self, name) is None:
                setattr(self, name, np.full(len(self.estimate), np.nan))

    def __len__(self) -> int:
        return len(self.estimate)

    @property
    def two_rays(self) -> bool:
        """Whether any row's set is two rays (``other_lower``/``other_upper`` filled)."""
        return bool(np.isfinite(self.other_lower).any() | np.isfinite(self.other_upper).any())

    def to_frame(self, index=None):
        """The columns ``estimate``, ``lower``, ``upper``, ``flags`` as a pandas DataFrame,
        ``other_lower``, ``other_upper`` when some row's set is two rays (as
        ``Fit.predict``), ``lower_untruncated``, ``upper_untruncated`` when some limit was
        cut at a physical bound."""
        import pandas as pd

        cols = {"estimate": self.estimate, "lower": self.lower, "upper": self.upper,
                "flags": self.flags}
        if self.two_rays:
            cols.update(other_lower=self.other_lower, other_upper=self.other_upper)
        if self.truncated():
            cols |= {"lower_untruncated": self.lower_untruncated,
                     "upper_untruncated": self.upper_untruncated}
        return pd.DataFrame(cols, index=index)

    def truncated(self) -> bool:
        """True when some limit was cut at a physical bound."""
        return self.lower_untruncated is not None and bool(
            (~np.isnan(self.lower_untruncated)).any()
            | (~np.isnan(self.upper_untruncated)).any())


def _refuse_complex(values, names) -> None:
    kind = getattr(getattr(values, "dtype", None), "kind", None)
    if kind == "c" or isinstance(values, complex):
        raise InvalidDataError(f"values for {names} are complex numbers; a measurement is "
                               "a real number: pass the real values")


def _values(values, names: list[str]) -> np.ndarray:
    """New values as an (m, k) float array; a mapping or DataFrame is read by column."""
    k = len(names)
    _refuse_complex(values, names)
    if hasattr(values, "keys") and not isinstance(values, np.ndarray):
        missing = [n for n in names if n not in values]
        if missing:
            raise UsageError(f"values lack column(s) {missing}; the equation needs {names}")
        cols = [values[n] for n in names]
        for c in cols:
            _refuse_complex(c, names)
        try:
            return np.column_stack([np.atleast_1d(np.asarray(c, dtype=float)) for c in cols])
        except (TypeError, ValueError) as err:
            raise InvalidDataError(f"values for {names} must be numbers ({err})")
    try:
        arr = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as err:
        raise InvalidDataError(f"values must be numbers; {err}: correct them or leave the "
                               "cells empty (NaN)")
    if arr.ndim <= 1:
        arr = arr.reshape(-1, 1) if k == 1 else arr.reshape(1, -1)
    if arr.ndim != 2 or arr.shape[1] != k:
        raise UsageError(f"values must have {k} column(s) ({names}); got shape {arr.shape}")
    return arr


def _weights(weights, m: int) -> np.ndarray:
    """Weights of ``m`` new observations: one number, or one per value."""
    if weights is None:
        return np.ones(m)
    _refuse_complex(weights, "weights")
    try:
        w = np.asarray(weights, dtype=float)
    except (TypeError, ValueError):
        raise InvalidDataError(f"weights must be numbers; got {str(weights)[:60]}") from None
    if w.ndim > 1 or (w.ndim == 1 and w.size not in (1, m)):
        raise UsageError(f"weights must be one number or one per value ({m}); got "
                         f"{w.size} in shape {w.shape}")
    return np.broadcast_to(w.reshape(-1)[0] if w.size == 1 else w, (m,))


@dataclass
class Equation:
    """A loaded coefficient file (:func:`load`); ``record`` is its validated content."""

    record: dict
    path: Path | None = None

    def __getattr__(self, name):
        rec = self.__dict__.get("record", {})
        if name in rec:
            return rec[name]
        raise AttributeError(name)

    @property
    def predictor_names(self) -> list[str]:
        """Names of the values :meth:`predict` takes, in order."""
        return [p["name"] for p in self.record["predictors"]]

    def predict(self, values, level: float | None = None, *, weights=None) -> Prediction:
        """Estimate, interval and flags for new feature values, from the file alone.

        Parameters
        ----------
        values : scalar, array_like (m,) or (m, k), mapping or DataFrame
            The predictor(s) as measured [units of ``predictors[*].unit``]; NaN gives NaN
            and the flag ``missing-value``.
        level : float, optional
            Interval coverage; default the file's ``interval.level``. Another level needs
            the t quantile (scipy, imported then) or the stored resampling quantities;
            a quantile-curve or published interval has one level only.
        weights : float or array_like, optional
            Weight ``w0`` of each new observation (variance ``s^2 / w0``), analytic and
            bootstrap intervals; default 1.

        Returns
        -------
        Prediction
            ``estimate``, ``lower``, ``upper`` [units of the response] and ``flags``; for a
            forward line whose set is two rays, the other ray in ``other_lower``,
            ``other_upper``; ``lower_untruncated``, ``upper_untruncated``: a limit cut at a
            physical bound (flag ``truncated-at-bound``) before the cut, NaN elsewhere.
        """
        from refit.coefficients.evaluate import evaluate

        iv = self.record["interval"]
        if level is None:
            level = iv.get("level")
            level = 0.95 if level is None else float(level)
        if not (isinstance(level, (int, float)) and 0 < level < 1):
            raise UsageError(f"level must be a number between 0 and 1 (e.g. 0.95); "
                             f"got {level!r}")
        if iv["method"] == "published" and iv.get("level") is not None and \
                abs(level - iv["level"]) > 1e-12:
            raise UsageError(f"the published interval has level {iv['level']} only")
        v = _values(values, self.predictor_names)
        if np.isinf(v).any():
            raise InvalidDataError("values hold infinite numbers; use finite values or NaN")
        w0 = _weights(weights, v.shape[0])
        if not np.all(np.isfinite(w0) & (w0 > 0)):
            raise InvalidDataError("weights of new observations must be finite and > 0")
        # values far outside the domain overflow to inf; the evaluator turns non-finite
        # results into an empty estimate with a flag, so numpy's warning says nothing more
        with np.errstate(over="ignore", invalid="ignore", under="ignore"):
            est, lo, hi, flags, o_lo, o_hi, lo_u, hi_u = evaluate(
                self.record, v, float(level), w0, with_rays=True, untruncated=True)
        cautions = ()
        if iv["method"] in ("group-jackknife+", "group-cv+"):
            from refit.models.intervals.group_conformal import too_few_groups

            reason = too_few_groups(int(iv["n_groups"]), 1.0 - float(level))
            cautions = (reason,) if reason else ()
        if iv["method"] in ("published", "none"):
            level = iv.get("level")
        return Prediction(est, lo, hi, flags, level, iv["method"],
                          bool(iv.get("exact", True)), cautions, other_lower=o_lo,
                          other_upper=o_hi, lower_untruncated=lo_u, upper_untruncated=hi_u)


    def posterior(self, values, sd=None, prior=None, level: float = 0.95, **options):
        """Posterior for climate of each fossil from this forward file alone.

        Parameters
        ----------
        values : array_like (m,)
            The feature as measured [unit of ``predictors[0].unit``]; NaN: not measured.
        sd : float or array_like, optional
            Measurement SDs of the values [same unit]; NaN beside a value is taken as 0
            and flagged ``measurement-sd-missing``.
        prior : refit.models.posterior.Prior or dict, optional
            Default uniform over the file's calibration range of climate.
        level : float
            Probability of the equal-tailed interval and the highest-density region.
        **options
            ``n_grid``, ``keep_density``, ``hdi`` of
            :func:`refit.coefficients.posterior.posterior_from_records`.

        Returns
        -------
        refit.models.posterior.Posterior

        Raises
        ------
        UsageError
            An inverse file, a file whose only error figure is a published +-, a file
            without a covariance (see :mod:`refit.coefficients.posterior`).
        """
        from refit.coefficients.posterior import posterior_from_records

        return posterior_from_records([self.record], values, sd, prior=prior, level=level,
                                      **options)


def load(path) -> Equation:
    """Load a coefficient file (hash-checked and validated by :func:`read_record`)."""
    return Equation(read_record(path), Path(path))
