"""Model checks: plain functions on a pair's rows and draws, composed by the results stage."""

from __future__ import annotations

import numpy as np


def pair_rows(x: np.ndarray, y: np.ndarray, row_numbers: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A pair's rows as flat float arrays with their row numbers, checked to be of one length."""
    x = np.asarray(x, dtype=float).ravel()
    y = np.asarray(y, dtype=float).ravel()
    row_numbers = np.asarray(row_numbers).ravel()
    if x.size != y.size or x.size != row_numbers.size:
        raise ValueError(f"x, y and row_numbers must have the same length, got {x.size}, {y.size}, "
                         f"{row_numbers.size}")
    return x, y, row_numbers
