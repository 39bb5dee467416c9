"""Inverse-variance pooling of subject estimates with a between-subject variance.

The summary-statistics random-effects model: subject i's estimate ``y_i`` (one
number per subject, in % or cm²/s) has a known within-subject sampling variance
``v_i = se_i**2`` from the subject GLM and a between-subject variance ``tau2``::

    y = X beta + u + e,   u ~ N(0, tau2 I),   e ~ N(0, diag(v))

``X`` is a column of ones for a one-sample test or ones plus a group indicator for
a two-sample test with a common ``tau2``.  ``tau2`` is estimated by the
DerSimonian–Laird moment estimator or by restricted maximum likelihood (REML);
inference on ``beta`` is by a normal approximation or, by default, with the
Knapp–Hartung variance rescaling and a t distribution on ``k - p`` degrees of freedom.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

__all__ = [
    "TAU2_METHODS",
    "PooledFit",
    "tau2_dersimonian_laird",
    "tau2_reml",
    "pool_random_effects",
]

#: Between-subject variance estimators: "fixed" forces tau2 = 0.
TAU2_METHODS: tuple[str, ...] = ("dersimonian-laird", "reml", "fixed")


@dataclass(frozen=True, eq=False)
class PooledFit:
    """A random-effects (meta-regression) fit.

    Attributes
    ----------
    coef : ndarray, shape (p,)
        Pooled coefficients (units of the subject estimates).
    cov : ndarray, shape (p, p)
        Their covariance (Knapp–Hartung rescaled when requested).
    df : float
        Degrees of freedom of the t reference (``inf`` for the normal reference).
    tau2 : float
        Between-subject variance (squared units).
    q : float
        Cochran's Q of the fixed-effect fit (residual heterogeneity).
    i2 : float
        Higgins' I² = max(0, (Q - (k - p)) / Q), the share of variance between subjects.
    weights : ndarray, shape (k,)
        Random-effects weights ``1 / (v_i + tau2)``.
    method : str
        Which ``tau2`` estimator was used.
    knapp_hartung : bool
        Whether the covariance was rescaled.
    """

    coef: np.ndarray
    cov: np.ndarray
    df: float
    tau2: float
    q: float
    i2: float
    weights: np.ndarray
    method: str
    knapp_hartung: bool

    def test(self, index: int = -1, *, alpha: float = 0.05) -> dict[str, float]:
        """Estimate, SE, statistic, two-sided p and CI for one coefficient."""
        estimate = float(self.coef[index])
        se = float(np.sqrt(self.cov[index, index]))
        stat = estimate / se if se > 0 else np.nan
        dist = stats.t(self.df) if np.isfinite(self.df) else stats.norm()
        p = float(2 * dist.sf(abs(stat))) if np.isfinite(stat) else np.nan
        crit = float(dist.ppf(1 - alpha / 2))
        return {
            "estimate": estimate,
            "se": se,
            "stat": float(stat),
            "df": float(self.df),
            "p": p,
            "ci_low": estimate - crit * se,
            "ci_high": estimate + crit * se,
        }


def _check(y, v, design):
    y = np.asarray(y, dtype=float)
    v = np.asarray(v, dtype=float)
    if y.ndim != 1 or v.shape != y.shape:
        raise ValueError(
            f"estimates and variances must be 1-D of equal length, got {y.shape}, {v.shape}"
        )
    if not (np.all(np.isfinite(y)) and np.all(np.isfinite(v)) and np.all(v > 0)):
        raise ValueError("estimates must be finite and variances finite and > 0")
    x = np.ones((y.size, 1)) if design is None else np.asarray(design, dtype=float)
    if x.ndim == 1:
        x = x[:, None]
    if x.shape[0] != y.size:
        raise ValueError(f"design has {x.shape[0]} rows for {y.size} estimates")
    if y.size <= x.shape[1]:
        raise ValueError(f"need more than {x.shape[1]} estimates, got {y.size}")
    return y, v, x


def _wls(y, x, w):
    xtw = x.T * w
    cov = np.linalg.inv(xtw @ x)
    coef = cov @ (xtw @ y)
    return coef, cov


def tau2_dersimonian_laird(y: np.ndarray, v: np.ndarray, design: np.ndarray | None = None) -> float:
    """DerSimonian–Laird moment estimate of the between-subject variance.

    Parameters
    ----------
    y : ndarray, shape (k,)
        Subject estimates.
    v : ndarray, shape (k,)
        Their sampling variances (se², squared units), > 0.
    design : ndarray, shape (k, p), optional
        Between-subject design; a column of ones when omitted.

    Returns
    -------
    float
        ``max(0, (Q - (k - p)) / (tr W - tr((X'WX)^-1 X'W²X)))`` with ``W = diag(1/v)``
        and ``Q`` the weighted residual sum of squares of the fixed-effect fit.  For
        ``p = 1`` the denominator is ``Σw - Σw²/Σw``.

    References
    ----------
    DerSimonian R, Laird N (1986). Meta-analysis in clinical trials. Control Clin
    Trials 7:177-188.  Meta-regression form: Raudenbush SW (2009), in The Handbook of
    Research Synthesis and Meta-Analysis, 2nd ed., ch. 16.
    """
    y, v, x = _check(y, v, design)
    w = 1.0 / v
    coef, cov = _wls(y, x, w)
    q = float(np.sum(w * (y - x @ coef) ** 2))
    xtw = x.T * w
    denom = float(np.sum(w) - np.trace(cov @ (xtw * w) @ x))
    k, p = x.shape
    return max(0.0, (q - (k - p)) / denom)


def _reml_loglik(tau2, y, v, x):
    w = 1.0 / (v + tau2)
    coef, cov = _wls(y, x, w)
    resid = y - x @ coef
    _, logdet = np.linalg.slogdet(np.linalg.inv(cov))
    return -0.5 * (np.sum(np.log(v + tau2)) + logdet + np.sum(w * resid**2))


def tau2_reml(
    y: np.ndarray,
    v: np.ndarray,
    design: np.ndarray | None = None,
    *,
    tol: float = 1e-12,
    max_iter: int = 200,
) -> float:
    """Restricted maximum-likelihood estimate of the between-subject variance.

    Parameters
    ----------
    y, v, design
        As in :func:`tau2_dersimonian_laird`.
    tol : float, default=1e-12
        Convergence tolerance on tau2 (relative to the mean variance).
    max_iter : int, default=200
        Fisher-scoring iterations before falling back to a bounded 1-D search.

    Returns
    -------
    float
        tau2 >= 0 maximising the restricted log-likelihood
        ``-1/2 [Σ log(v_i + tau2) + log|X'W X| + Σ w_i (y_i - x_i b)²]``,
        ``w_i = 1 / (v_i + tau2)``.

    Notes
    -----
    Fisher scoring from the DerSimonian–Laird value:
    ``tau2 <- tau2 + (y'PPy - tr P) / tr(PP)`` with
    ``P = W - W X (X'WX)^-1 X'W``, truncated at 0.  If it has not settled after
    ``max_iter`` steps a bounded scalar search on the log-likelihood is used.

    References
    ----------
    Viechtbauer W (2005). Bias and efficiency of meta-analytic variance estimators in
    the random-effects model. J Educ Behav Stat 30(3):261-293.
    Harville DA (1977). Maximum likelihood approaches to variance component
    estimation. J Am Stat Assoc 72:320-338.
    """
    y, v, x = _check(y, v, design)
    scale = float(np.mean(v))
    tau2 = tau2_dersimonian_laird(y, v, x)
    for _ in range(max_iter):
        w = 1.0 / (v + tau2)
        cov = np.linalg.inv((x.T * w) @ x)
        wx = x * w[:, None]
        pmat = np.diag(w) - wx @ cov @ wx.T
        py = pmat @ y
        step = (py @ py - np.trace(pmat)) / np.sum(pmat * pmat)
        new = max(0.0, tau2 + step)
        if abs(new - tau2) <= tol * scale:
            return new
        tau2 = new
    from scipy.optimize import minimize_scalar

    upper = 10.0 * (float(np.var(y)) + scale)
    found = minimize_scalar(
        lambda t: -_reml_loglik(t, y, v, x),
        bounds=(0.0, upper),
        method="bounded",
        options={"xatol": tol * scale},
    )
    best = float(found.x)
    return 0.0 if -_reml_loglik(0.0, y, v, x) <= found.fun else best


def pool_random_effects(
    y: np.ndarray,
    v: np.ndarray,
    design: np.ndarray | None = None,
    *,
    method: str = "dersimonian-laird",
    knapp_hartung: bool = True,
) -> PooledFit:
    """Inverse-variance weighted pooling with a between-subject variance.

    Parameters
    ----------
    y : ndarray, shape (k,)
        Subject estimates (e.g. % flow change).
    v : ndarray, shape (k,)
        Within-subject sampling variances (se², squared units), > 0.
    design : ndarray, shape (k, p), optional
        Between-subject design (column of ones when omitted).
    method : {"dersimonian-laird", "reml", "fixed"}, default="dersimonian-laird"
        Estimator of tau2; "fixed" sets tau2 = 0 (fixed-effect pooling).
    knapp_hartung : bool, default=True
        Rescale the covariance by ``q = Σ w*(y - X b)² / (k - p)`` and use a t reference
        on ``k - p`` df (Hartung–Knapp–Sidik–Jonkman, no truncation of q at 1).  When
        False the covariance is ``(X'W*X)^-1`` with a normal reference.

    Returns
    -------
    PooledFit

    References
    ----------
    DerSimonian & Laird (1986), Control Clin Trials 7:177-188.
    Knapp G, Hartung J (2003). Improved tests for a random effects meta-regression with
    a single covariate. Stat Med 22:2693-2710.
    """
    y, v, x = _check(y, v, design)
    if method == "dersimonian-laird":
        tau2 = tau2_dersimonian_laird(y, v, x)
    elif method == "reml":
        tau2 = tau2_reml(y, v, x)
    elif method == "fixed":
        tau2 = 0.0
    else:
        raise ValueError(f"unknown tau2 method {method!r}; choose one of {TAU2_METHODS}")
    k, p = x.shape
    w_fixed = 1.0 / v
    coef_fixed, _ = _wls(y, x, w_fixed)
    q = float(np.sum(w_fixed * (y - x @ coef_fixed) ** 2))
    i2 = max(0.0, (q - (k - p)) / q) if q > 0 else 0.0
    w = 1.0 / (v + tau2)
    coef, cov = _wls(y, x, w)
    df = np.inf
    if knapp_hartung:
        scale = float(np.sum(w * (y - x @ coef) ** 2) / (k - p))
        cov = cov * scale
        df = float(k - p)
    return PooledFit(
        coef=coef,
        cov=cov,
        df=df,
        tau2=float(tau2),
        q=q,
        i2=float(i2),
        weights=w,
        method=method,
        knapp_hartung=knapp_hartung,
    )
