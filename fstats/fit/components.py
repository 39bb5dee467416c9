"""Extra variance components added to a channel's coefficient covariance.

The estimation's covariance (the spectral sandwich, :mod:`fstats.fit.covariance`)
describes noise that the residuals show.  Two sources of error do not show there and
are estimated separately, each as a rank-one component ``τ² s s'`` with its own
degrees of freedom:

* the frequency dependence of the short-channel coupling
  (:mod:`fstats.fit.coupling`);
* the variation of the response amplitude from block to block
  (:mod:`fstats.fit.block_spread`).

:func:`combined_dof` merges a contrast's main variance and its component variances
by Satterthwaite's approximation (Satterthwaite 1946).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["VarianceComponent", "components_covariance", "combined_dof"]


@dataclass(frozen=True, eq=False)
class VarianceComponent:
    """One rank-one variance component ``tau2 · s s'``.

    Parameters
    ----------
    name : str
        What it stands for, e.g. ``"short coupling: short:scalp"`` or
        ``"block amplitude: subtract"``.
    loading : ndarray, shape (k,)
        ``s``: how each coefficient moves per unit of the component.
    tau2 : float
        Variance of the component (units of the loading's inverse, squared).
    dof : float
        Degrees of freedom of ``tau2``.
    """

    name: str
    loading: np.ndarray
    tau2: float
    dof: float

    @property
    def covariance(self) -> np.ndarray:
        """``tau2 · s s'``, shape (k, k)."""
        return self.tau2 * np.outer(self.loading, self.loading)

    def variance(self, weights: np.ndarray) -> float:
        """Variance the component adds to the contrast ``c'β``: ``tau2 (c's)²``."""
        return float(self.tau2 * float(np.asarray(weights, dtype=float) @ self.loading) ** 2)


def components_covariance(components: tuple[VarianceComponent, ...], k: int) -> np.ndarray:
    """Sum of the components' covariances, shape (k, k) (zeros without components)."""
    total = np.zeros((k, k))
    for component in components:
        total += component.covariance
    return total


def combined_dof(
    weights: np.ndarray,
    main_variance: float,
    main_dof: float,
    components: tuple[VarianceComponent, ...],
) -> float:
    """Satterthwaite degrees of freedom of a contrast's main plus component variances.

    ``df = (v0 + Σ v_j)² / (v0²/df0 + Σ v_j²/df_j)`` with ``v_j = τ_j² (c's_j)²``
    (Satterthwaite 1946).

    Parameters
    ----------
    weights : ndarray, shape (k,)
        Contrast row c.
    main_variance, main_dof : float
        ``c' C c`` of the main covariance and its degrees of freedom.
    components : tuple of VarianceComponent
    """
    parts = [(comp.variance(weights), comp.dof) for comp in components]
    parts = [(v, d) for v, d in parts if v > 0 and d > 0]
    if not parts:
        return float(main_dof)
    total = main_variance + sum(v for v, _ in parts)
    denom = sum(v**2 / d for v, d in parts)
    if np.isfinite(main_dof) and main_dof > 0:
        denom += main_variance**2 / main_dof
    return float(total**2 / denom) if denom > 0 else float(main_dof)
