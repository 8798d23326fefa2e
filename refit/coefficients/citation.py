"""The short citation of a literature equation ("Retallack 1994", "Sheldon et al. 2002").

A published equation is named on screen, in tables and in figures by its source, as a
reader cites it, so it is never mistaken for a refit of the same function id and version.
The full citation stays in the file's ``provenance.citation``. Standard library only.
"""

from __future__ import annotations

import re

#: "Surname, A.B." (initials with dots, hyphens allowed) in an author list
_AUTHOR = re.compile(r"((?:[a-z]+ )*[A-Z][^\s,&()]*(?: [A-Z][^\s,&().]+)*), (?:[A-Z][a-z]?\.[ -]?)+")
_YEAR = re.compile(r"\((\d{4}[a-z]?)\)")


def short_citation(record: dict) -> str:
    """``Surname YEAR``, ``A & B YEAR`` or ``Surname et al. YEAR`` of a literature file.

    Parameters
    ----------
    record : dict
        A coefficient record; only ``provenance.kind == "literature"`` records have one.

    Returns
    -------
    str
        The short citation, or "" when the record is not a literature equation or its
        citation gives no year in parentheses.

    Examples
    --------
    >>> short_citation({"provenance": {"kind": "literature", "citation":
    ...     "Sheldon, N.D., Retallack, G.J. & Tanaka, S. (2002). Geochemical ..."}})
    'Sheldon et al. 2002'
    """
    prov = record.get("provenance") or {}
    if prov.get("kind") != "literature":
        return ""
    text = str(prov.get("citation") or "")
    year = _YEAR.search(text)
    if not year:
        return ""
    authors = _AUTHOR.findall(text[: year.start()])
    if not authors:
        first = text[: year.start()].split(",")[0].strip()
        return f"{first} {year.group(1)}" if first else ""
    if len(authors) == 1:
        return f"{authors[0]} {year.group(1)}"
    if len(authors) == 2:
        return f"{authors[0]} & {authors[1]} {year.group(1)}"
    return f"{authors[0]} et al. {year.group(1)}"
