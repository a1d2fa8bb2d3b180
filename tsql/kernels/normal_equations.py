"""Least squares from the normal equations: the Cholesky factor of a cross-product matrix and the
solve from it, shared by the kernels that regress row by row in compiled code (the unit-root tests,
the cycles that change_points removes and the spread that follows them)."""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = ["cholesky", "solve"]


@njit(cache=True, error_model="numpy")
def cholesky(g, tolerance=0.0):
    """Lower Cholesky factor of the cross products ``g`` (only its lower triangle is read) and the
    squared pivots (a QR's squared diagonal).

    A column whose squared pivot is not above ``tolerance`` times its own length ``g[j, j]`` (in the
    span of the earlier ones, or of no length) gets a zero column: the factor then fits the other
    columns alone, and that column's coefficient is 0.
    """
    size = g.shape[0]
    low = np.zeros((size, size))
    pivots = np.zeros(size)
    for j in range(size):
        s = g[j, j]
        for c in range(j):
            s -= low[j, c] * low[j, c]
        pivots[j] = s
        if not s > tolerance * g[j, j]:
            continue
        root = math.sqrt(s)
        low[j, j] = root
        for i in range(j + 1, size):
            t = g[i, j]
            for c in range(j):
                t -= low[i, c] * low[j, c]
            low[i, j] = t / root
    return low, pivots


@njit(cache=True, error_model="numpy")
def solve(low, rhs):
    """The coefficients of the normal equations ``(L L^T) b = rhs`` from their :func:`cholesky` factor
    ``low``, by forward then back substitution; a column with a zero pivot gets coefficient 0."""
    k = len(rhs)
    coef = np.zeros(k)
    for a in range(k):
        if low[a, a] > 0.0:
            v = rhs[a]
            for b in range(a):
                v -= low[a, b] * coef[b]
            coef[a] = v / low[a, a]
    for a in range(k - 1, -1, -1):
        if low[a, a] > 0.0:
            v = coef[a]
            for i in range(a + 1, k):
                v -= low[i, a] * coef[i]
            coef[a] = v / low[a, a]
    return coef
