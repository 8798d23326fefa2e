"""Controlled vocabularies of calibration tables, and matching values against them.

The shipped vocabularies live in ``schemas/vocabularies.json``: ``soil_order`` (the twelve
USDA Soil Taxonomy orders) and ``sequence_kind`` are closed lists; ``vegetation`` and
``parent_material`` are open and can be extended per store (``STORE/vocabularies.json``)
or per run (``refit check --vocab FILE``); see :func:`load_vocabularies` for the format.

Matching ignores case, surrounding spaces, ``_`` or ``-`` for a space and a trailing
plural ``s`` ("mollisol" -> "Mollisols"). Such a variant is accepted with a warning
(``vocabulary-form``) naming the canonical term, which the checked frame then holds; a
value matching no term is an error (``vocabulary``) listing the allowed terms.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any, Iterable

import numpy as np
import pandas as pd

from refit.errors import UnreadableInputError, UsageError

#: Vocabularies checked, in the order their problems are reported.
VOCABULARY_COLUMNS = ("soil_order", "vegetation", "parent_material", "sequence_kind")


def load_vocabularies(*extra_files: str | Path | None) -> dict[str, set[str]]:
    """The controlled vocabularies, extended by any extra files.

    Parameters
    ----------
    *extra_files : str or Path or None
        Extension files (``None`` entries are skipped). Each is a JSON object mapping an
        open vocabulary to a list of new terms, for example::

            {"vegetation": ["sagebrush steppe"], "parent_material": ["ignimbrite"]}

        Keys starting with ``$`` (e.g. ``"$comment"``) are ignored. Put it in a store as
        ``STORE/vocabularies.json`` (used by ``refit admit``) or pass it to
        ``refit check --vocab FILE``. The closed vocabularies (``soil_order``: the twelve
        USDA Soil Taxonomy orders; ``sequence_kind``) cannot be extended.

    Returns
    -------
    dict of str to set of str
        ``soil_order``, ``sequence_kind``, ``vegetation``, ``parent_material``.

    Raises
    ------
    UnreadableInputError
        An extension file is missing or not JSON.
    UsageError
        An extension file names an unknown or closed vocabulary, or terms are not text.
    """
    base = _read_json(_schema_file("vocabularies.json"))
    closed = _closed()
    vocab = {k: set(v) for k, v in base.items() if not k.startswith("$") and k != "closed"}
    for path in extra_files:
        if path is None:
            continue
        for key, terms in _read_json(Path(path)).items():
            if key.startswith("$"):
                continue
            if key in closed or key not in vocab:
                raise UsageError(
                    f"{path}: {key!r} cannot be extended; an extension file may add terms "
                    f"to {', '.join(sorted(set(vocab) - closed))} only "
                    f"({', '.join(sorted(closed))} are closed lists).")
            if not isinstance(terms, list) or not all(
                    isinstance(t, str) and t.strip() for t in terms):
                raise UsageError(
                    f"{path}: {key!r} must be a list of non-empty texts, e.g. "
                    f'{{"{key}": ["new term"]}}.')
            vocab[key] |= {t.strip() for t in terms}
    return vocab


def _schema_file(name: str) -> Path:
    from refit._util.resources import schemas_dir

    return schemas_dir() / name


def _read_json(path: Path) -> dict[str, Any]:
    try:
        data = json.loads(Path(path).read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise UnreadableInputError(
            f"{path}: vocabulary file not found; check the path.") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise UnreadableInputError(
            f"{path}: cannot read the vocabulary file as JSON ({exc}); it must be a JSON "
            'object such as {"vegetation": ["new term"]}.') from None
    if not isinstance(data, dict):
        raise UnreadableInputError(
            f"{path}: a vocabulary file must hold a JSON object such as "
            '{"vegetation": ["new term"]}.')
    return data


def vocab_key(term: str) -> str:
    """Loose form of a term: lower case, '_'/'-' as space, single spaces, no plural 's'."""
    key = " ".join(term.lower().replace("_", " ").replace("-", " ").split())
    return key[:-1] if len(key) > 3 and key.endswith("s") else key


def match_vocabulary(values: pd.Series, terms: Iterable[str]):
    """Match text values to a vocabulary (work is done once per distinct value).

    Returns
    -------
    canonical : pandas.Series
        ``values`` with known variants replaced by their vocabulary term.
    variant : pandas.Series of bool
        Known term written in another form (case, separator, plural).
    unknown : pandas.Series of bool
        Value not in the vocabulary in any form.
    """
    terms = set(terms)
    by_key: dict[str, str] = {}
    for t in sorted(terms):
        by_key.setdefault(vocab_key(t), t)
    seen = [v for v in values.unique() if isinstance(v, str)]
    variants = {v: by_key[vocab_key(v)] for v in seen
                if v not in terms and vocab_key(v) in by_key}
    unknowns = [v for v in seen if v not in terms and v not in variants]
    variant = values.isin(list(variants)) if variants else _false(values)
    unknown = values.isin(unknowns) if unknowns else _false(values)
    canonical = values
    if variants:
        canonical = values.copy()
        canonical[variant] = values[variant].map(variants)
    return canonical, variant, unknown


def _false(values: pd.Series) -> pd.Series:
    return pd.Series(np.zeros(len(values), dtype=bool), index=values.index)


def _closed() -> set[str]:
    return set(_read_json(_schema_file("vocabularies.json")).get("closed", []))


def check_vocabularies(work: pd.DataFrame, probs, vocab: dict) -> None:
    """Report unknown terms (errors) and variant spellings (warnings, canonicalised)."""
    closed = _closed()
    for name in VOCABULARY_COLUMNS:
        if name not in work.columns or name not in vocab:
            continue
        values = work[name]
        canonical, variant, unknown = match_vocabulary(values, vocab[name])
        if variant.any():
            pos = np.flatnonzero(variant.to_numpy())
            vals, canon = values.iloc[pos], canonical.iloc[pos]
            # common practice: accept spelling variants of a known term, but say so
            probs.add("warning", "vocabulary-form", pos, name, vals,
                      "'" + vals + f"' in {name} is read as the vocabulary term '"
                      + canon + "'; write '" + canon + "' to silence this warning.")
            work[name] = canonical
        if unknown.any():
            pos = np.flatnonzero(unknown.to_numpy())
            vals = values.iloc[pos]
            allowed = ", ".join(sorted(vocab[name], key=str.lower))
            if name in closed:
                how = "this list is closed and cannot be extended."
            else:
                how = ("use one of these, or if the term is right add it to the store's "
                       "vocabularies.json or a file passed with --vocab, e.g. "
                       f'{{"{name}": ["new term"]}}.')
            probs.add("error", "vocabulary", pos, name, vals,
                      "'" + vals + f"' is not in the {name} vocabulary. Allowed: "
                      f"{allowed}; {how}")
            probs.flag(pos, name)
