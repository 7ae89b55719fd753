"""Whether a target column holds class labels or a quantity, when `data.task` is `auto`."""
from __future__ import annotations

import numpy as np
from .lazy import pd   # pandas loads when a table is read

from ..losses import CLASSIFICATION, REGRESSION

# An integer target with at most this many distinct values, each in at least MIN_ROWS_PER_CODE rows,
# is read as class codes (a rule of thumb, not a test: data.task overrides it).
MAX_CLASS_CODES = 10
MIN_ROWS_PER_CODE = 5


def infer_task(target: pd.Series) -> tuple[str, str]:
    """(task, reason). Text or boolean: classification; exactly two values: classification; integers
    with few distinct values, each frequent: classification (numeric class codes); else regression."""
    values = target.dropna()
    levels = pd.unique(values)
    name = target.name
    if pd.api.types.is_bool_dtype(values) or not pd.api.types.is_numeric_dtype(values):
        return CLASSIFICATION, f"column '{name}' holds text or true/false values ({len(levels)} distinct)"
    if len(levels) < 2:
        return REGRESSION, f"column '{name}' holds one value"
    if len(levels) == 2:
        return CLASSIFICATION, f"column '{name}' holds two distinct values ({_shown(levels)})"
    numbers = values.to_numpy(dtype=float)
    if len(levels) <= MAX_CLASS_CODES and np.all(np.isfinite(numbers)) and np.all(numbers == np.round(numbers)):
        counts = values.value_counts()
        if counts.min() >= MIN_ROWS_PER_CODE:
            return CLASSIFICATION, (f"column '{name}' holds {len(levels)} integer codes ({_shown(levels)}), each in at "
                                    f"least {MIN_ROWS_PER_CODE} rows")
    return REGRESSION, f"column '{name}' holds {len(levels)} distinct numbers"


def _shown(levels) -> str:
    ordered = sorted((str(v) for v in levels), key=lambda v: (len(v), v))
    return ", ".join(ordered[:6]) + (" ..." if len(ordered) > 6 else "")
