"""Multiple-comparison control across channels × contrasts.

Adjusted p-values for Benjamini–Hochberg false discovery rate, Holm's step-down
family-wise control and Bonferroni.  Pure functions on arrays; NaN p-values are
left out of the family (they stay NaN and do not count towards ``m``).
"""

from __future__ import annotations

import numpy as np

__all__ = ["CORRECTIONS", "adjust_pvalues", "fdr_bh", "holm", "bonferroni"]

#: Accepted names of the correction methods (one spelling each).
CORRECTIONS: tuple[str, ...] = ("fdr", "holm", "bonferroni", "none")


def _finite(p: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    p = np.asarray(p, dtype=float)
    if p.ndim != 1:
        raise ValueError(f"p-values must be one-dimensional, got shape {p.shape}")
    mask = np.isfinite(p)
    if np.any((p[mask] < 0) | (p[mask] > 1)):
        raise ValueError("p-values must lie in [0, 1]")
    return p, mask


def _adjust_sorted(p: np.ndarray, step) -> np.ndarray:
    """Apply ``step`` (sorted finite p-values -> adjusted) and return them in input order."""
    p, mask = _finite(p)
    out = np.full(p.shape, np.nan)
    values = p[mask]
    if values.size == 0:
        return out
    order = np.argsort(values, kind="mergesort")
    adjusted = np.empty(values.size)
    adjusted[order] = step(values[order])
    out[mask] = adjusted
    return out


def fdr_bh(p: np.ndarray) -> np.ndarray:
    """Benjamini–Hochberg adjusted p-values (step-up false discovery rate).

    Parameters
    ----------
    p : ndarray, shape (m,)
        Unadjusted p-values; NaN entries are ignored and returned as NaN.

    Returns
    -------
    ndarray, shape (m,)
        Adjusted p-values in the input order.  Rejecting where the adjusted value
        is <= q controls the FDR at q for independent or positively dependent tests.

    Notes
    -----
    With the finite p-values sorted, ``p_(1) <= ... <= p_(m)``, the adjusted value is
    ``min_{j >= i} min(1, m p_(j) / j)``.  Rejecting adjusted values <= q is the same as
    rejecting the k smallest, k the largest i with ``p_(i) <= i q / m``.

    References
    ----------
    Benjamini Y, Hochberg Y (1995). Controlling the false discovery rate: a practical
    and powerful approach to multiple testing. J R Stat Soc B 57(1):289-300.
    """

    def step(ordered: np.ndarray) -> np.ndarray:
        m = ordered.size
        ranked = ordered * m / np.arange(1, m + 1)
        return np.minimum(np.minimum.accumulate(ranked[::-1])[::-1], 1.0)

    return _adjust_sorted(p, step)


def holm(p: np.ndarray) -> np.ndarray:
    """Holm step-down adjusted p-values (family-wise error rate).

    Parameters
    ----------
    p : ndarray, shape (m,)
        Unadjusted p-values; NaN entries are ignored and returned as NaN.

    Returns
    -------
    ndarray, shape (m,)
        Adjusted p-values in the input order.

    Notes
    -----
    ``max_{j <= i} min(1, (m - j + 1) p_(j))``: the i-th smallest p-value is compared
    with ``alpha / (m - i + 1)`` and testing stops at the first that fails.

    References
    ----------
    Holm S (1979). A simple sequentially rejective multiple test procedure.
    Scand J Statist 6:65-70.
    """

    def step(ordered: np.ndarray) -> np.ndarray:
        ranked = ordered * (ordered.size - np.arange(ordered.size))
        return np.maximum.accumulate(np.minimum(ranked, 1.0))

    return _adjust_sorted(p, step)


def bonferroni(p: np.ndarray) -> np.ndarray:
    """Bonferroni adjusted p-values, ``min(1, m p)``.

    Parameters
    ----------
    p : ndarray, shape (m,)
        Unadjusted p-values; NaN entries are ignored and returned as NaN.

    Returns
    -------
    ndarray, shape (m,)
        Adjusted p-values in the input order.
    """
    p, mask = _finite(p)
    out = np.full(p.shape, np.nan)
    out[mask] = np.minimum(p[mask] * mask.sum(), 1.0)
    return out


def adjust_pvalues(p: np.ndarray, method: str) -> np.ndarray:
    """Adjusted p-values by the named method.

    Parameters
    ----------
    p : ndarray, shape (m,)
        Unadjusted p-values (NaN = not part of the family).
    method : {"fdr", "holm", "bonferroni", "none"}
        ``"fdr"`` is Benjamini–Hochberg; ``"none"`` returns a copy of ``p``.

    Returns
    -------
    ndarray, shape (m,)
    """
    if method == "fdr":
        return fdr_bh(p)
    if method == "holm":
        return holm(p)
    if method == "bonferroni":
        return bonferroni(p)
    if method == "none":
        return np.array(p, dtype=float, copy=True)
    raise ValueError(f"unknown correction {method!r}; choose one of {CORRECTIONS}")
