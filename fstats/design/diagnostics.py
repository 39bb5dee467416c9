"""Design diagnostics: condition number, variance inflation, collinearity warnings,
a tidy table and a heat-map-ready view of a design matrix."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from fstats.design.matrix import DesignMatrix

__all__ = [
    "R2_WARN",
    "VIF_WARN",
    "CONDITION_WARN",
    "DesignImage",
    "condition_number",
    "variance_inflation",
    "nuisance_r2",
    "collinearity_report",
    "design_table",
    "design_image",
]

#: Warn when a task column's R² on the nuisance columns (drift, short, cardiac, aux,
#: motion, intercept) exceeds this: the task effect is then mostly explained away.
R2_WARN: float = 0.8
#: Warn when a task column's variance inflation factor exceeds this (common practice:
#: VIF > 10 signals serious collinearity).
VIF_WARN: float = 10.0
#: Warn when the condition number of the column-normalised design exceeds this.
CONDITION_WARN: float = 1e3


def condition_number(values: np.ndarray) -> float:
    """2-norm condition number of the design with each column scaled to unit length.

    Parameters
    ----------
    values : ndarray, shape (n_times, n_regressors)

    Returns
    -------
    float
        Ratio of the largest to the smallest singular value, computed as the square
        root of the eigenvalue ratio of the normalised cross-product matrix (inf if
        a column is 0 or the matrix is rank deficient).
    """
    return _condition_from_gram(_gram(values))


def _gram(x: np.ndarray) -> np.ndarray:
    """X'X accumulated over blocks of 256 rows.

    Small blocks keep each BLAS call single-threaded: one big threaded GEMM can stall
    for seconds on a busy shared machine, while the blocked sum costs the same flops.
    """
    gram = np.zeros((x.shape[1], x.shape[1]))
    for start in range(0, x.shape[0], 256):
        block = x[start : start + 256]
        gram += block.T @ block
    return gram


def _condition_from_gram(gram: np.ndarray) -> float:
    norms = np.sqrt(np.diag(gram))
    if np.any(norms == 0):
        return float("inf")
    eig = np.linalg.eigvalsh(gram / np.outer(norms, norms))
    if eig[0] <= eig[-1] * 1e-15:
        return float("inf")
    return float(np.sqrt(eig[-1] / eig[0]))


def _r2_from_gram(gram: np.ndarray, target: int, others: list[int], n: int, total: float) -> float:
    """R² of column ``target`` on ``others`` (which include a constant), from X'X."""
    if total <= 0:
        return 1.0
    g_oo = gram[np.ix_(others, others)]
    g_oy = gram[others, target]
    coef = np.linalg.lstsq(g_oo, g_oy, rcond=None)[0]
    rss = gram[target, target] - coef @ g_oy
    return float(min(1.0, max(0.0, 1.0 - rss / total)))


def variance_inflation(values: np.ndarray, names: tuple[str, ...], kinds: tuple[str, ...]) -> dict:
    """Variance inflation factor of every non-constant column.

    Parameters
    ----------
    values : ndarray, shape (n_times, n_regressors)
    names, kinds : tuple of str
        Column names and kinds.

    Returns
    -------
    dict of str to float
        VIF_j = 1 / (1 - R²_j), R²_j from regressing column j on all other columns
        plus an intercept (as ``statsmodels``' ``variance_inflation_factor`` with a
        constant column); inf for a constant or perfectly collinear column.
    """
    keep = [i for i, k in enumerate(kinds) if k != "constant"]
    x = np.column_stack([np.ones(values.shape[0]), values[:, keep]])
    return _vif_from_gram(_gram(x), [names[i] for i in keep], values.shape[0])


def _vif_from_gram(gram: np.ndarray, names: list[str], n: int) -> dict:
    """VIFs from the cross-product matrix of [1, X] (column 0 the constant).

    With every column varying and the centred correlation matrix R well conditioned,
    VIF_j = (R^-1)_jj (one Cholesky inversion); otherwise column by column from R².
    """
    means = gram[0, 1:] / n
    centred = gram[1:, 1:] - n * np.outer(means, means)
    variances = np.diag(centred)
    if np.all(variances > 1e-12 * np.maximum(np.diag(gram)[1:], 1e-300)):
        scale = 1.0 / np.sqrt(variances)
        corr = centred * np.outer(scale, scale)
        try:
            chol = np.linalg.cholesky(corr)
            if np.min(np.diag(chol)) ** 2 > 1e-10:
                inv_chol = np.linalg.inv(chol)
                vifs = np.sum(inv_chol**2, axis=0)  # diag(R^-1) = column norms of L^-1
                return {name: float(v) for name, v in zip(names, vifs, strict=True)}
        except np.linalg.LinAlgError:
            pass
    out = {}
    p = gram.shape[0]
    for j in range(1, p):
        total = variances[j - 1]
        if total <= 1e-12 * max(gram[j, j], 1e-300):
            out[names[j - 1]] = float("inf")
            continue
        r2 = _r2_from_gram(gram, j, [i for i in range(p) if i != j], n, total)
        out[names[j - 1]] = float("inf") if r2 >= 1.0 - 1e-13 else float(1.0 / (1.0 - r2))
    return out


def nuisance_r2(values: np.ndarray, kinds: tuple[str, ...]) -> np.ndarray:
    """R² of each task column regressed on the nuisance columns plus an intercept.

    Returns
    -------
    ndarray, shape (n_task,)
        In the order of the task columns; 0 when there are no nuisance columns.
    """
    n = values.shape[0]
    x = np.column_stack([np.ones(n), values])
    return _nuisance_r2_from_gram(_gram(x), kinds, n)


def _nuisance_r2_from_gram(gram: np.ndarray, kinds, n: int) -> np.ndarray:
    task = [i + 1 for i, k in enumerate(kinds) if k == "task"]
    nuis = [0] + [i + 1 for i, k in enumerate(kinds) if k not in ("task", "constant")]
    out = []
    for j in task:
        total = gram[j, j] - gram[0, j] ** 2 / n
        out.append(_r2_from_gram(gram, j, nuis, n, total) if len(nuis) > 1 else 0.0)
    return np.array(out)


def collinearity_report(values: np.ndarray, names: tuple[str, ...], kinds: tuple[str, ...]) -> dict:
    """Condition number, VIFs and warning texts for a design.

    Parameters
    ----------
    values : ndarray, shape (n_times, n_regressors)
    names, kinds : tuple of str
        Column names and kinds.

    Returns
    -------
    dict
        ``condition_number`` (float), ``vif`` (dict name -> float),
        ``nuisance_r2`` (dict task name -> R²), ``warnings`` (list of str).
        Thresholds: :data:`R2_WARN`, :data:`VIF_WARN`, :data:`CONDITION_WARN`.

    Notes
    -----
    Everything comes from one cross-product matrix of [1, X] (one pass over the
    data), so the diagnostics cost little beside building the design.
    """
    n = values.shape[0]
    x = np.column_stack([np.ones(n), values])
    gram = _gram(x)
    cond = _condition_from_gram(gram[1:, 1:])
    keep = [0] + [i + 1 for i, k in enumerate(kinds) if k != "constant"]
    vif = _vif_from_gram(gram[np.ix_(keep, keep)], [names[i - 1] for i in keep[1:]], n)
    task = [nm for nm, k in zip(names, kinds, strict=False) if k == "task"]
    r2 = dict(zip(task, _nuisance_r2_from_gram(gram, kinds, n).tolist(), strict=False))
    messages = []
    for name in task:
        if r2[name] > R2_WARN:
            messages.append(
                f"task regressor {name!r} is nearly collinear with drift/nuisance terms "
                f"(R² = {r2[name]:.2f} > {R2_WARN})"
            )
        if vif.get(name, 0.0) > VIF_WARN:
            messages.append(
                f"task regressor {name!r} has variance inflation factor "
                f"{vif[name]:.1f} > {VIF_WARN:g}"
            )
    if cond > CONDITION_WARN:
        messages.append(f"design condition number {cond:.3g} exceeds {CONDITION_WARN:g}")
    return {"condition_number": cond, "vif": vif, "nuisance_r2": r2, "warnings": messages}


def design_table(design: DesignMatrix) -> pd.DataFrame:
    """The design as a tidy table: ``time_s`` then one column per regressor.

    Parameters
    ----------
    design : DesignMatrix

    Returns
    -------
    pandas.DataFrame, shape (n_times, 1 + n_regressors)
    """
    table = pd.DataFrame(design.values, columns=list(design.names))
    table.insert(0, "time_s", design.times_s)
    return table


@dataclass(frozen=True, eq=False)
class DesignImage:
    """A design matrix ready to draw as a heat map.

    Parameters
    ----------
    values : ndarray, shape (n_times, n_regressors)
        Each column scaled by its largest absolute value (range [-1, 1]; an
        all-zero column stays 0).
    names : tuple of str
        Column names.
    kinds : tuple of str
        Column kinds (for colour bands along the top).
    times_s : ndarray, shape (n_times,)
        Row times (s).
    """

    values: np.ndarray
    names: tuple[str, ...]
    kinds: tuple[str, ...]
    times_s: np.ndarray


def design_image(design: DesignMatrix) -> DesignImage:
    """Column-normalised view of a design matrix for heat maps (see :class:`DesignImage`)."""
    scale = np.max(np.abs(design.values), axis=0)
    scale = np.where(scale > 0, scale, 1.0)
    return DesignImage(
        values=design.values / scale,
        names=design.names,
        kinds=design.kinds,
        times_s=design.times_s,
    )
