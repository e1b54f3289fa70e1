"""Split a label sequence into runs: the one helper every sequence module uses."""

from __future__ import annotations

import numpy as np


def split_runs(values: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(start index, length, value) of each run of equal consecutive values, in array order.

    Works in whatever order the caller's array is in (up-section or top-down); an empty array
    gives three empty arrays.
    """
    v = np.asarray(values)
    if v.size == 0:
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty, v[:0]
    starts = np.r_[0, np.flatnonzero(v[1:] != v[:-1]) + 1]
    lengths = np.diff(np.r_[starts, v.size])
    return starts, lengths, v[starts]
