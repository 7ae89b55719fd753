"""The data section's row-weight column (data.weights): read out of the table (never a feature) and checked."""
from __future__ import annotations

import numpy as np

from .dataset import DataError
from .lazy import pd


def take_weights(frame: pd.DataFrame, column: str | None, target: str, source: str,
                 design_columns=()) -> tuple[pd.DataFrame, np.ndarray | None]:
    """The frame without the weight column, and the weights: positive finite numbers, one per row.

    Zero is refused as well as negative and missing values: a row that should not count is left out of
    the file, so every row the splits, folds and resamples draw carries weight."""
    if column is None:
        return frame, None
    if column == target:
        raise DataError(f"data.weights: column '{column}' is the target; name the column of row weights.")
    if column in design_columns:
        raise DataError(f"data.weights: column '{column}' is also named in the split section; a column is either "
                        f"row weights or a design column, not both.")
    if column not in frame.columns:
        shown = ", ".join(repr(c) for c in frame.columns[:10]) + (" ..." if frame.shape[1] > 10 else "")
        raise DataError(f"data.weights: column '{column}' is not in {source} (columns: {shown}).")
    raw = frame[column]
    values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float) \
        if not pd.api.types.is_bool_dtype(raw) else np.full(len(raw), np.nan)
    bad = ~np.isfinite(values) | (values <= 0)
    if bad.any():
        row = int(np.flatnonzero(bad)[0])
        found = "a missing value" if pd.isna(raw.iloc[row]) else f"{raw.iloc[row]!r}"
        raise DataError(f"data.weights: column '{column}' of {source} has {int(bad.sum())} value(s) that are not "
                        f"positive finite numbers, first {found} at data row {row + 1}; row weights must be numbers "
                        f"above 0 (leave out of the file any row that should not count).")
    return frame.drop(columns=[column]), values
