"""Explicit feature maps, always fitted on training rows only.

`FeatureBuilder` (builder.py) standardises the input columns, applies each configured map and
concatenates the outputs, then standardises every output column. Both families
receive the same standardised matrix Z; coefficients on Z are mapped back to the
scale of the map outputs (for the identity map: the original columns) with
`to_output_scale`. Sparse input rows stay a sparse matrix when every map takes one (the identity
map does): the scalers then scale without centring, and Z is sparse too.

`MAPS` (pipeline.features.registry) is the one table of maps; maps.py holds each map's settings, width and
builder as data and registers them; the transformers (basic.py, extra.py) and `FeatureBuilder` load
scikit-learn, so they are imported only when a fit needs them (reading a config does not).
"""
from __future__ import annotations

from . import maps  # noqa: F401  (importing it registers the maps)
from ..matrices import is_sparse
from .registry import MAPS, MapKind, get_map, output_width, register_map

__all__ = ["FeatureBuilder", "MAPS", "MapKind", "get_map", "keeps_sparse", "output_width", "register_map"]


def keeps_sparse(X, maps) -> bool:
    """Whether features built from X stay sparse: X is sparse and every map takes sparse input."""
    return is_sparse(X) and all(get_map(spec.kind).sparse_input for spec in maps)


def __getattr__(name):
    if name == "FeatureBuilder":
        from .builder import FeatureBuilder
        return FeatureBuilder
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
