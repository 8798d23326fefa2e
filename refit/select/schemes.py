"""Cross-validation scheme names: the one list recipes and splitters share.

A recipe names its scheme in ``[validation] scheme``; :mod:`refit.validate.splitters` turns
the name into a splitter. Both read the names here (select never imports validate).

``SCHEMES``
    the canonical names, in the order they are listed to users;
``ALIASES``
    other spellings a recipe may use, mapped to the canonical name;
``NEEDS_GROUP_COLUMN``
    schemes that hold out whole groups of a column the recipe names (``groups = ...``);
``GROUPED``
    every scheme that holds out whole groups (the above, and spatial blocks, whose groups
    are made from the coordinates);
``NEEDS_COORDINATES``
    schemes that read ``latitude`` and ``longitude``.
"""

from __future__ import annotations

SCHEMES = ("kfold", "loo", "group-kfold", "leave-one-group-out", "spatial-block")
ALIASES = {"leave-one-out": "loo", "k-fold": "kfold", "group-k-fold": "group-kfold",
           "logo": "leave-one-group-out", "spatial-blocks": "spatial-block"}
NEEDS_GROUP_COLUMN = ("group-kfold", "leave-one-group-out")
GROUPED = NEEDS_GROUP_COLUMN + ("spatial-block",)
NEEDS_COORDINATES = ("spatial-block",)


def canonical_scheme(name):
    """The canonical scheme name for ``name`` (an alias or a canonical name).

    Anything else is returned unchanged, so the caller's own check reports it.

    >>> canonical_scheme("leave-one-out")
    'loo'
    """
    return ALIASES.get(name, name) if isinstance(name, str) else name
