"""Paths named inside files (a recipe, a registry index) must stay inside their folder.

The check resolves both paths first (``os.path.realpath``: ``..``, absolute paths and
symbolic links at every level), so a link inside the folder that points elsewhere is
caught, not followed.
"""

from __future__ import annotations

import os
from pathlib import Path


def resolved(path) -> Path:
    """``path`` with every ``..`` and symbolic link resolved (it need not exist)."""
    return Path(os.path.realpath(path))


def outside(folder, target) -> Path | None:
    """Where ``target`` really is if that is outside ``folder`` (both resolved), else None."""
    base, real = resolved(folder), resolved(target)
    return None if real == base or real.is_relative_to(base) else real
