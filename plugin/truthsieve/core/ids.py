"""Item and source ids as arrays: one Arrow string array, or a NumPy unicode array for sorting."""

from __future__ import annotations

from typing import Any

import numpy as np
import pyarrow as pa


def id_array(values: Any) -> pa.Array:
    """Ids as one Arrow string array: from an Arrow column, a pandas column or index, or a list."""
    if not isinstance(values, (pa.Array, pa.ChunkedArray)):
        try:
            values = pa.array(values)
        except (pa.ArrowException, TypeError, ValueError):
            values = pa.array(np.asarray(values, dtype=object).astype(str))
    if isinstance(values, pa.ChunkedArray):  # pandas' Arrow-backed columns come chunked
        values = values.combine_chunks()
    if values.type != pa.string():
        values = values.cast(pa.string())
    return values


def as_ids(values: Any) -> np.ndarray:
    """Ids as a NumPy unicode array: sorts and compares in C, whatever pandas' string dtype."""
    return np.asarray(values, dtype=object).astype(str)
