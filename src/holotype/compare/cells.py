"""Cells of a parsed table or document, classified: number, missing, or text."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

NUMBER, MISSING, TEXT = 0, 1, 2
MISSING_TOKENS = frozenset({"", "NA", "N/A", "n/a", "null", "NULL", "None", "<NA>"})


def parse_number(text: str) -> float | None:
    """A float in any Python float syntax ('1_000.5', ' -Infinity ', 'nan', '1e-3'), else None."""
    try:
        return float(text)
    except (ValueError, OverflowError):
        return None


def classify(values: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(numbers as float64, kinds, original objects) for a column of mixed cells."""
    n = values.shape[0]
    nums = np.zeros(n, dtype=np.float64)
    kinds = np.zeros(n, dtype=np.int8)
    for i, v in enumerate(values.tolist()):
        if isinstance(v, bool):
            kinds[i] = TEXT
        elif isinstance(v, (int, float)):
            if isinstance(v, float) and math.isnan(v):
                kinds[i] = MISSING  # pandas' own marker for an absent field
            else:
                nums[i] = float(v)
        elif v is None:
            kinds[i] = MISSING
        else:
            text = str(v)
            if text.strip() in MISSING_TOKENS:
                kinds[i] = MISSING
                continue
            x = parse_number(text)
            if x is None:
                kinds[i] = TEXT
            else:
                nums[i] = x
    return nums, kinds, values


def column_arrays(values: Any) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None]:
    """Fast path for numeric columns: (float64 values, None, None); else the classified triple."""
    arr = np.asarray(values)
    if arr.dtype.kind in "fiu":
        return arr.astype(np.float64, copy=False), None, None
    nums, kinds, objs = classify(arr.astype(object))
    return nums, kinds, objs
