"""Spearman rank correlation of many columns at once, exact under missing values (pairwise complete).

Takes a numeric matrix (rows: target dates, columns: features; NaN: missing) and returns the matrix of
Spearman correlations between its columns, and of each column with a target vector. Pure numpy/scipy; no
file I/O.

Spearman's rho of two columns is Pearson's r of their ranks (average ranks for ties), both ranked on the
rows where both are present, as :func:`scipy.stats.spearmanr` with ``nan_policy="omit"`` does pair by
pair. Feature tables have a few missing-value patterns shared by hundreds of columns (a window's length
decides which rows it misses), so the columns are grouped by pattern: for each pair of patterns the rows
present in both are ranked once for all columns of the two groups and the correlations come from one
matrix product. The cost is that of a few dense correlation matrices, not of p^2 separate pairs.
"""

from __future__ import annotations

import numpy as np
from scipy.stats import rankdata

__all__ = ["MIN_PAIRS", "spearman_matrix", "spearman_with"]

#: Fewest rows present in both columns for a correlation; fewer give NaN.
MIN_PAIRS = 3


def _standardised_ranks(values: np.ndarray) -> np.ndarray:
    """Ranks of each column (average ties), centred and scaled to unit norm; constant columns -> NaN."""
    r = rankdata(values, axis=0) if values.shape[0] else values
    r = r - r.mean(axis=0)
    norm = np.sqrt((r**2).sum(axis=0))
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(norm > 0, r / np.where(norm > 0, norm, 1.0), np.nan)


def _patterns(present: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distinct column masks (patterns x rows) and each column's pattern number (first seen, first numbered)."""
    packed = np.packbits(present, axis=0)
    number: dict[bytes, int] = {}
    which = np.empty(present.shape[1], dtype=np.int64)
    first = []
    for c in range(present.shape[1]):
        key = packed[:, c].tobytes()
        if key not in number:
            number[key] = len(first)
            first.append(c)
        which[c] = number[key]
    return present[:, first].T.copy(), which


def spearman_matrix(values: np.ndarray) -> np.ndarray:
    """Pairwise-complete Spearman correlations between the columns of ``values`` (rows x columns).

    Returns a symmetric columns x columns array (dimensionless, -1..1) with 1 on the diagonal of columns that
    vary; NaN for pairs with fewer than :data:`MIN_PAIRS` common rows or a constant column on them.
    """
    x = np.asarray(values, dtype=float)
    p = x.shape[1]
    out = np.full((p, p), np.nan)
    if p == 0:
        return out
    masks, which = _patterns(np.isfinite(x))
    groups = [np.flatnonzero(which == g) for g in range(len(masks))]
    own = [  # ranks of each group on its own rows
        _standardised_ranks(x[m][:, g]) if m.sum() >= MIN_PAIRS else None for m, g in zip(masks, groups, strict=True)
    ]

    def ranks(g: int, rows: np.ndarray) -> np.ndarray:
        cached = own[g]
        return (
            cached
            if cached is not None and np.array_equal(rows, masks[g])
            else _standardised_ranks(x[rows][:, groups[g]])
        )

    for i in range(len(masks)):
        for j in range(i, len(masks)):
            rows = masks[i] & masks[j]
            if rows.sum() < MIN_PAIRS:
                continue
            zi = ranks(i, rows)
            zj = zi if i == j else ranks(j, rows)
            block = np.clip(zi.T @ zj, -1.0, 1.0)
            out[np.ix_(groups[i], groups[j])] = block
            out[np.ix_(groups[j], groups[i])] = block.T
    return out


def spearman_with(values: np.ndarray, target: np.ndarray) -> np.ndarray:
    """Spearman correlation of each column of ``values`` with ``target`` (pairwise complete; NaN as above)."""
    x = np.asarray(values, dtype=float)
    y = np.asarray(target, dtype=float)
    out = np.full(x.shape[1], np.nan)
    if x.shape[1] == 0:
        return out
    masks, which = _patterns(np.isfinite(x))
    for g, mask in enumerate(masks):
        rows = mask & np.isfinite(y)
        cols = np.flatnonzero(which == g)
        if rows.sum() < MIN_PAIRS:
            continue
        zx = _standardised_ranks(x[rows][:, cols])
        zy = _standardised_ranks(y[rows][:, None])
        out[cols] = np.clip((zx * zy).sum(axis=0), -1.0, 1.0)
    return out
