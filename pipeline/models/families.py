"""The model families, declared once. Everything outside pipeline.models loops over FAMILIES or
looks a family up by its key, and reads its properties; nothing else names a family.

Adding a family: a subpackage exporting a `Family` (pipeline.models.interface) and one entry here
(plus its config section).
"""
from __future__ import annotations

from pipeline.models.interface import Family, PathFit
from pipeline.models.ridge import RIDGE
from pipeline.models.sparse import SPARSE

# Order matters: comparisons between two families report first minus second.
FAMILIES: tuple[Family, ...] = (SPARSE, RIDGE)
KEYS: tuple[str, ...] = tuple(f.key for f in FAMILIES)
_BY_KEY = {f.key: f for f in FAMILIES}

__all__ = ["FAMILIES", "KEYS", "Family", "PathFit", "get_family", "title", "compared_pair"]


def get_family(key: str) -> Family:
    try:
        return _BY_KEY[key]
    except KeyError:
        raise ValueError(f"unknown model family '{key}': known are {', '.join(KEYS)}") from None


def title(key: str) -> str:
    """The family's display title ("sparse (L1)", ...) from its key."""
    return get_family(key).title


def compared_pair() -> tuple[Family, Family]:
    """The two families a paired comparison sets against each other, in the sign order (first − second)."""
    return FAMILIES[0], FAMILIES[1]
