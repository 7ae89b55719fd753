"""The table of feature maps: each kind with its settings model, output width and builder.

A new map is one `register_map(MapKind(...))` call in the module that defines it; the
config's `features.maps` union is assembled from this table when `pipeline.config` is
imported, so register before that.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

from pydantic import BaseModel


@dataclass(frozen=True)
class MapKind:
    kind: str
    # pydantic model of the map's settings; its `kind` field is Literal[kind]
    settings: type[BaseModel]
    # (settings, seed) → unfitted scikit-learn transformer with get_feature_names_out(input_names)
    build: Callable[[Any, int], Any]
    # (settings, n_inputs, n_rows or None) → columns it will produce, known before building it
    width: Callable[[Any, int, "int | None"], int]
    # False: the map reads the raw input columns instead of standardised ones (identity)
    standardised_input: bool = True
    # True: the map takes a scipy sparse matrix and gives one back (no densifying); others get dense rows
    sparse_input: bool = False


MAPS: dict[str, MapKind] = {}


def register_map(entry: MapKind) -> MapKind:
    declared = entry.settings.model_fields.get("kind")
    if declared is None or getattr(declared.annotation, "__args__", None) != (entry.kind,):
        raise ValueError(f"settings of map {entry.kind!r} need a field kind: Literal[{entry.kind!r}]")
    MAPS[entry.kind] = entry
    return entry


def get_map(kind: str) -> MapKind:
    if kind not in MAPS:
        raise ValueError(f"unknown feature map '{kind}'; known: {sorted(MAPS)}")
    return MAPS[kind]


def output_width(spec, n_inputs: int, n_rows: int | None = None) -> int:
    """Columns a map will produce, known before building it (for the memory estimate)."""
    return int(get_map(spec.kind).width(spec, n_inputs, n_rows))
