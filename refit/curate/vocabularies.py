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
    vocab = {k: set(v) for k, v in base.items()
             if not k.startswith("$") and k not in ("closed", SYNONYMS)}
    synonyms: dict[str, dict[str, str]] = {}
    _add_synonyms(synonyms, base.get(SYNONYMS, {}), vocab, "schemas/vocabularies.json")
    for path in extra_files:
        if path is None:
            continue
        extra = _read_json(Path(path))
        for key, terms in extra.items():
            if key.startswith("$") or key == SYNONYMS:
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
        _add_synonyms(synonyms, extra.get(SYNONYMS, {}), vocab, path)
    vocab[SYNONYMS] = synonyms
    return vocab


#: Key of the synonym section of a vocabulary file: ``{vocabulary: {synonym: term}}``.
SYNONYMS = "synonyms"


def _add_synonyms(out: dict, section, vocab: dict, path) -> None:
    """Merge a ``synonyms`` section into ``out`` (keys loosened with :func:`vocab_key`)."""
    if not isinstance(section, dict):
        raise UsageError(f"{path}: 'synonyms' must be an object such as "
                         '{"parent_material": {"till": "glacial till"}}.')
    for name, pairs in section.items():
        if name not in vocab or not isinstance(pairs, dict):
            raise UsageError(f"{path}: synonyms for {name!r}: give an object of synonym -> "
                             f"term for one of {', '.join(sorted(vocab))}.")
        for syn, term in pairs.items():
            if term not in vocab[name]:
                raise UsageError(f"{path}: synonym {syn!r} points to {term!r}, which is not "
                                 f"a {name} term; point it to one of the vocabulary's terms.")
            out.setdefault(name, {})[vocab_key(syn)] = term


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


def match_vocabulary(values: pd.Series, terms: Iterable[str], synonyms=None):
    """Match text values to a vocabulary (work is done once per distinct value).

    ``synonyms`` maps loosened synonyms (:func:`vocab_key`) to terms; a value matching one
    is a variant too (the caller tells the two kinds apart with :func:`synonym_of`).

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
    for v in seen:
        if v not in terms and v not in variants and vocab_key(v) in (synonyms or {}):
            variants[v] = synonyms[vocab_key(v)]
    unknowns = [v for v in seen if v not in terms and v not in variants]
    variant = values.isin(list(variants)) if variants else _false(values)
    unknown = values.isin(unknowns) if unknowns else _false(values)
    canonical = values
    if variants:
        canonical = values.copy()
        canonical[variant] = values[variant].map(variants)
    return canonical, variant, unknown


def _did_you_mean(terms, synonyms) -> "dict":
    """A function value -> " (did you mean 'term'?)" or "" (difflib ratio at least 0.6)."""
    import difflib

    loose = {vocab_key(t): t for t in terms}
    loose.update({k: v for k, v in (synonyms or {}).items()})

    def hint(value) -> str:
        hit = difflib.get_close_matches(vocab_key(str(value)), list(loose), n=1, cutoff=0.6)
        return f" (did you mean '{loose[hit[0]]}'?)" if hit else ""
    return hint


def _false(values: pd.Series) -> pd.Series:
    return pd.Series(np.zeros(len(values), dtype=bool), index=values.index)


def _closed() -> set[str]:
    return set(_read_json(_schema_file("vocabularies.json")).get("closed", []))


def check_vocabularies(work: pd.DataFrame, probs, vocab: dict) -> list[str]:
    """Report unknown terms (errors), variant spellings and synonyms (warnings; the frame
    then holds the term).

    Returns
    -------
    list of str
        One line per synonym read as its term, e.g.
        ``"parent_material 'till' -> 'glacial till' (synonym; 156 rows)"``, for the notes
        beside the column mappings.
    """
    closed = _closed()
    lines = []
    for name in VOCABULARY_COLUMNS:
        if name not in work.columns or name not in vocab:
            continue
        values = work[name]
        synonyms = vocab.get(SYNONYMS, {}).get(name, {})
        canonical, variant, unknown = match_vocabulary(values, vocab[name], synonyms)
        is_syn = _false(values)
        if variant.any() and synonyms:  # a synonym, not a spelling variant of a term
            loose = {vocab_key(t) for t in vocab[name]}
            syn_values = [v for v in values[variant].unique()
                          if isinstance(v, str) and vocab_key(v) not in loose]
            is_syn = values.isin(syn_values) if syn_values else is_syn
        if is_syn.any():
            pos = np.flatnonzero(is_syn.to_numpy())
            vals, canon = values.iloc[pos], canonical.iloc[pos]
            probs.add("warning", "vocabulary-synonym", pos, name, vals,
                      "'" + vals + f"' in {name} is read as '" + canon + "' (a synonym "
                      "in vocabularies.json); write '" + canon + "' to silence this warning.")
            counts = vals.groupby([vals, canon], sort=False).size()
            lines += [f"{name} {v!r} -> {t!r} (synonym; {k} row{'s' if k != 1 else ''})"
                      for (v, t), k in counts.items()]
            variant = variant & ~is_syn
        if variant.any() or is_syn.any():
            work[name] = canonical
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
                      "'" + vals + f"' is not in the {name} vocabulary" + vals.map(
                          _did_you_mean(vocab[name], synonyms)) + f". Allowed: "
                      f"{allowed}; {how}")
            probs.flag(pos, name)
    return lines
