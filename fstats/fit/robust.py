"""Robust regression: Tukey bisquare weights, MAD scale and iteratively reweighted least squares.

Pure numpy on arrays.  Used by the AR-IRLS fit on prewhitened data, where motion
spikes turn into isolated large whitened residuals that the bisquare weight sets to
zero.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import linalg

__all__ = [
    "TUKEY_C",
    "MAD_NORMAL",
    "tukey_bisquare_weights",
    "mad_scale",
    "MAX_GRAM_CONDITION",
    "NormalEquations",
    "weighted_least_squares",
    "IRLSResult",
    "irls",
    "irls_rows",
    "RowsOperator",
]

#: Tukey bisquare tuning constant: 95 % asymptotic efficiency at the normal
#: distribution (Holland & Welsch 1977, recalled from memory; statsmodels'
#: ``TukeyBiweight`` default).
TUKEY_C: float = 4.685

#: Normal quantile Φ⁻¹(3/4): MAD / 0.6745 estimates σ for normal data.
MAD_NORMAL: float = 0.6744897501960817


def tukey_bisquare_weights(scaled_residuals: np.ndarray, c: float = TUKEY_C) -> np.ndarray:
    """Tukey bisquare weights ``(1 - (u/c)²)²`` for ``|u| <= c``, else 0.

    Parameters
    ----------
    scaled_residuals : ndarray
        Residuals divided by their scale (unitless).
    c : float, default=4.685
        Tuning constant.

    Returns
    -------
    ndarray
        Weights in [0, 1], same shape as the input.
    """
    u = np.asarray(scaled_residuals, dtype=float) / c
    w = 1.0 - u * u
    w = np.where(w > 0.0, w, 0.0)  # |u| >= 1 (1 - u² <= 0) and NaN get weight 0
    return w * w


def mad_scale(residuals: np.ndarray) -> float:
    """Robust residual scale: median absolute residual (about 0) divided by 0.6745.

    Parameters
    ----------
    residuals : ndarray, shape (n,)
        Residuals (flow unit).

    Returns
    -------
    float
        Scale in the residuals' unit; equals σ for normal residuals in large samples.
    """
    a = np.abs(np.ravel(residuals))
    n = a.size
    if n == 0 or not np.isfinite(a.sum()):
        return float(np.median(a) / MAD_NORMAL)
    half = n // 2
    if n % 2:
        median = np.partition(a, half)[half]
    else:  # the mean of the two middle values, as numpy.median
        part = np.partition(a, (half - 1, half))
        median = 0.5 * (part[half - 1] + part[half])
    return float(median / MAD_NORMAL)


#: Largest 1-norm condition number of the column-scaled Gram matrix ``X'WX`` solved by
#: Cholesky (``cond(X)`` up to about 1e4); above it, or when Cholesky fails, the
#: least-squares problem is solved from the rows instead (SVD), which keeps full accuracy.
MAX_GRAM_CONDITION: float = 1e8


class NormalEquations:
    """``X'WX`` for repeated solves: Cholesky of the column-scaled Gram, else rows by SVD.

    Parameters
    ----------
    gram : ndarray, shape (k, k)
        ``X'WX``.
    rows : ndarray, shape (k, n), optional
        ``(√W X)'``, the weighted regressors as rows; needed for the fallback when the
        Gram matrix is not positive definite or too ill-conditioned for Cholesky
        (condition above :data:`MAX_GRAM_CONDITION`).  Without it such a Gram raises
        :class:`numpy.linalg.LinAlgError`.

    Notes
    -----
    Scaling the columns to unit length first (``D^-1 X'WX D^-1``) makes the condition
    number that of the correlation structure, not of the regressors' units.
    """

    def __init__(self, gram: np.ndarray, rows: np.ndarray | None = None) -> None:
        gram = np.asarray(gram, dtype=float)
        k = gram.shape[0]
        norms = np.sqrt(np.clip(np.diag(gram), 0.0, None))
        norms[~(norms > 0)] = 1.0
        self.norms = norms
        self.factor = None
        self.condition = np.inf  # 1-norm condition of the column-scaled Gram (Cholesky only)
        self._inv = None
        self._svd = None
        scaled = gram / np.outer(norms, norms)
        try:
            factor = linalg.cho_factor(scaled, check_finite=False)
            inv = linalg.cho_solve(factor, np.eye(k), check_finite=False)
            cond = np.abs(scaled).sum(axis=0).max() * np.abs(inv).sum(axis=0).max()
            if np.isfinite(cond) and cond <= MAX_GRAM_CONDITION:
                self.condition = float(cond)
                self.factor = factor
                self._inv = inv / np.outer(norms, norms)
        except (np.linalg.LinAlgError, ValueError):
            pass
        if self.factor is None:
            if rows is None:
                raise np.linalg.LinAlgError("Gram matrix is singular or too ill-conditioned")
            u, sv, vt = np.linalg.svd(np.asarray(rows, dtype=float).T / norms, full_matrices=False)
            keep = sv > sv[0] * k * np.finfo(float).eps
            self._svd = (u[:, keep], sv[keep], vt[keep])

    @property
    def cholesky(self) -> bool:
        """Whether the solves use the Cholesky factor (False: the SVD fallback)."""
        return self.factor is not None

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        """``(X'WX)^-1 rhs`` for ``rhs`` of shape (k,) or (k, m)."""
        norms = self.norms.reshape((-1,) + (1,) * (np.ndim(rhs) - 1))
        scaled = rhs / norms
        if self.factor is not None:
            out = linalg.cho_solve(self.factor, scaled, check_finite=False)
        else:
            _, sv, vt = self._svd
            power = (sv * sv).reshape((-1,) + (1,) * (np.ndim(rhs) - 1))
            out = vt.T @ ((vt @ scaled) / power)
        return out / norms

    def inverse(self) -> np.ndarray:
        """``(X'WX)^-1`` (pseudo-inverse on the fallback), shape (k, k)."""
        if self._inv is None:
            _, sv, vt = self._svd
            self._inv = (vt.T / (sv * sv)) @ vt / np.outer(self.norms, self.norms)
        return self._inv

    def lstsq(self, response: np.ndarray) -> np.ndarray:
        """Least-squares coefficients of ``√W y`` on the rows (fallback only), shape (k,)."""
        u, sv, vt = self._svd
        return vt.T @ ((u.T @ response) / sv) / self.norms


def _mad_near(residuals: np.ndarray, guess: float | None) -> float:
    """:func:`mad_scale`, exactly, found faster when a scale near the answer is known.

    Only the absolute residuals within ±5 % of ``guess`` (times 0.6745) are partitioned;
    when the middle order statistics fall outside that window, the full MAD is taken.
    """
    if guess is None or not guess > 0:
        return mad_scale(residuals)
    a = np.abs(residuals)
    n = a.size
    lo, hi = 0.95 * guess * MAD_NORMAL, 1.05 * guess * MAD_NORMAL
    below = int(np.count_nonzero(a < lo))
    window = a[(a >= lo) & (a <= hi)]
    first, second = (n - 1) // 2, n // 2  # the middle order statistics (equal for odd n)
    if not (below <= first and second < below + window.size):
        return mad_scale(residuals)
    part = np.partition(window, (first - below, second - below))
    median = 0.5 * (part[first - below] + part[second - below])
    return float(median / MAD_NORMAL)


def weighted_least_squares(
    response: np.ndarray,
    design: np.ndarray,
    weights: np.ndarray | None = None,
    *,
    unit_columns: bool = False,
) -> tuple[np.ndarray, np.ndarray]:
    """Weighted least squares by Cholesky on column-scaled normal equations.

    Parameters
    ----------
    response : ndarray, shape (n,)
        Response values.
    design : ndarray, shape (n, k)
        Regressors (full column rank; checked by the caller).
    weights : ndarray, shape (n,), optional
        Non-negative row weights (1 when omitted).
    unit_columns : bool, default=False
        Kept for compatibility; the columns are always scaled to unit length internally.

    Returns
    -------
    betas : ndarray, shape (k,)
        Coefficients.
    xtwx_inv : ndarray, shape (k, k)
        ``(X' W X)^-1``.

    Notes
    -----
    When Cholesky fails or the scaled Gram matrix is ill-conditioned (see
    :class:`NormalEquations`), the coefficients come from an SVD of ``√W X`` instead.
    """
    rows = np.asarray(design, dtype=float).T
    y = np.asarray(response, dtype=float)
    if weights is not None:
        root = np.sqrt(weights)
        rows = rows * root
        y = root * y
    normal = NormalEquations(rows @ rows.T, rows)
    if normal.cholesky:
        betas = normal.solve(rows @ y)
    else:
        betas = normal.lstsq(y)
    return betas, normal.inverse()


@dataclass(frozen=True, eq=False)
class IRLSResult:
    """Outcome of :func:`irls`.

    Parameters
    ----------
    betas : ndarray, shape (k,)
        Robust coefficients.
    weights : ndarray, shape (n,)
        Final bisquare weights in [0, 1].
    scale : float
        Final MAD scale of the residuals.
    xtwx_inv : ndarray, shape (k, k) or None
        ``(X' W X)^-1`` at the final weights (None from :func:`irls_rows`, whose
        caller forms it with the final weights).
    n_iter : int
        Iterations used.
    converged : bool
        Whether the relative change of the coefficients fell below the tolerance.
    normal : NormalEquations or None
        The factored ``X'WX`` the last steps used (:func:`irls_rows` only), to start a
        related fit from.
    """

    betas: np.ndarray
    weights: np.ndarray
    scale: float
    xtwx_inv: np.ndarray | None
    n_iter: int
    converged: bool
    normal: NormalEquations | None = None


def irls(
    response: np.ndarray,
    design: np.ndarray,
    *,
    c: float = TUKEY_C,
    betas: np.ndarray | None = None,
    max_iter: int = 50,
    tol: float = 1e-8,
) -> IRLSResult:
    """Tukey-bisquare M-estimate by iteratively reweighted least squares.

    Parameters
    ----------
    response : ndarray, shape (n,)
        Response values (e.g. prewhitened flow).
    design : ndarray, shape (n, k)
        Regressors (e.g. prewhitened design matrix), full column rank.
    c : float, default=4.685
        Bisquare tuning constant.
    betas : ndarray, shape (k,), optional
        Starting coefficients (ordinary least squares when omitted).
    max_iter : int, default=50
        Largest number of reweighting steps.
    tol : float, default=1e-8
        Stop when the change of the fitted values, ``||X Δβ||``, falls below ``tol``
        times the residual norm ``||e||``.

    Returns
    -------
    IRLSResult

    Notes
    -----
    Each step: residuals ``e = y - Xβ``, scale ``s = median|e| / 0.6745``, weights
    ``w = bisquare(e / s)``, then ``β = (X'WX)^-1 X'Wy`` (Holland & Welsch 1977,
    recalled from memory; the order of operations of statsmodels ``RLM``).
    """
    norms = np.sqrt(np.einsum("ij,ij->j", design, design))
    norms[norms == 0] = 1.0
    scaled = design / norms  # unit-length columns: the WLS steps skip their own scaling
    if betas is None:
        betas, _ = weighted_least_squares(response, design)
    betas = np.asarray(betas, dtype=float) * norms
    design = scaled
    converged = False
    weights = np.ones(response.shape[0])
    inv = None
    scale = np.nan
    n_iter = 0
    for step in range(1, max_iter + 1):
        n_iter = step
        resid = response - design @ betas
        scale = mad_scale(resid)
        if not scale > 0:
            weights = np.ones(response.shape[0])
            betas, inv = weighted_least_squares(response, design, None, unit_columns=True)
            converged = True
            break
        weights = tukey_bisquare_weights(resid / scale, c)
        new, inv = weighted_least_squares(response, design, weights, unit_columns=True)
        step = np.linalg.norm(design @ (new - betas)) / max(np.linalg.norm(resid), 1e-300)
        betas = new
        if step < tol:
            converged = True
            break
    resid = response - design @ betas
    scale = mad_scale(resid)
    return IRLSResult(
        betas=betas / norms,
        weights=weights,
        scale=scale,
        xtwx_inv=inv / np.outer(norms, norms),
        n_iter=n_iter,
        converged=converged,
    )


#: Largest Anderson mixing coefficient |γ| taken; a larger one (the last two steps
#: nearly alike, or the iteration not contracting) falls back to the plain step.
_MIX_LIMIT: float = 5.0


def _anderson_step(delta, change, last_delta, last_change, last_taken, last_taken_change):
    """The depth-one Anderson mix of the plain step ``delta`` (see :func:`irls_rows`).

    ``change``/``last_change`` are the fitted-value changes of this and the previous
    plain step, ``last_taken``/``last_taken_change`` the step taken last time and its
    change; returns the step to take and its fitted-value change (the plain step when
    the mixing coefficient is not finite or exceeds :data:`_MIX_LIMIT`).
    """
    moved = change - last_change
    denom = float(np.dot(moved, moved))
    if not denom > 0:
        return delta, change
    gamma = float(np.dot(change, moved)) / denom
    if not (np.isfinite(gamma) and abs(gamma) < _MIX_LIMIT):
        return delta, change
    taken = delta - gamma * (last_taken + delta - last_delta)
    return taken, change - gamma * (last_taken_change + moved)


class RowsOperator:
    """Regressors held as explicit rows, shape (k, n): the operator :func:`irls_rows` uses.

    An operator gives the products an IRLS step needs, ``X δ`` (:meth:`matvec`) and
    ``X' v`` (:meth:`rmatvec`), and the rows themselves when a Gram matrix must be formed
    (:meth:`materialize`).  Other implementations can compute the products without
    holding ``X`` (e.g. a filtered design, see :mod:`fstats.fit.filtering`).
    """

    def __init__(self, rows: np.ndarray) -> None:
        self.rows = rows

    def matvec(self, delta: np.ndarray) -> np.ndarray:
        """``X δ``, shape (n,)."""
        return self.rows.T @ delta

    def rmatvec(self, values: np.ndarray) -> np.ndarray:
        """``X' v``, shape (k,)."""
        return self.rows @ values

    def materialize(self) -> np.ndarray:
        """The rows, shape (k, n)."""
        return self.rows

    def factor(self, weights: np.ndarray) -> NormalEquations:
        """``X'WX`` at the weights ``w`` (shape (n,)), factored exactly (rows kept for fallback)."""
        root_rows = self.materialize() * np.sqrt(weights)
        return NormalEquations(root_rows @ root_rows.T, root_rows)

    def preconditioner(self, weights: np.ndarray) -> NormalEquations | None:
        """A cheaper approximate factor of ``X'WX`` for the first steps, or None (none cheaper).

        An approximate factor only changes how fast the steps shrink: :func:`irls_rows`
        scales its steps by the exact line search, so the fixed point is the same.
        """
        return None


def irls_rows(
    response: np.ndarray | None,
    rows: np.ndarray | RowsOperator,
    betas: np.ndarray,
    *,
    c: float = TUKEY_C,
    max_iter: int = 50,
    tol: float = 1e-8,
    normal: NormalEquations | None = None,
    residuals: np.ndarray | None = None,
    scale_guess: float | None = None,
    accelerate: bool = True,
) -> IRLSResult:
    """The Tukey-bisquare M-estimate of :func:`irls`, regressors as rows, few Gram matrices.

    Parameters
    ----------
    response : ndarray, shape (n,), or None
        Response values (e.g. prewhitened flow); may be None when ``residuals`` is given.
    rows : ndarray, shape (k, n), or RowsOperator
        Regressors as rows (the transposed design; a strided view is fine), or an
        operator giving ``X δ`` and ``X' v`` (see :class:`RowsOperator`).
    betas : ndarray, shape (k,)
        Starting coefficients.
    c, max_iter, tol
        As in :func:`irls`.
    normal : NormalEquations, optional
        A factored ``X'WX`` of a closely related problem (e.g. the previous AR round's)
        to take the steps with; by default it is formed at the first step's weights.
    residuals : ndarray, shape (n,), optional
        ``response - X betas`` if the caller has it (saves one product).
    scale_guess : float, optional
        A residual scale near the first step's MAD (e.g. a related fit's); only makes
        finding that MAD faster, the value is the same.
    accelerate : bool, default=True
        Mix each step with the previous one (Anderson acceleration of depth one, see
        Notes); the fixed point and the stopping rule are the same without it.

    Returns
    -------
    IRLSResult
        With ``xtwx_inv=None``.

    Notes
    -----
    An IRLS step ``β⁺ = (X'WX)^-1 X'Wy`` is ``β + (X'WX)^-1 X'W e`` with ``e = y - Xβ``.
    Here ``X'WX`` is factored at the first step's weights (or taken from ``normal``)
    and kept while the steps shrink by at least half each time (refactored at the
    current weights otherwise), so a step costs two matrix-vector products, the MAD
    and the weights.  The first factor may be the operator's cheaper approximation
    (:meth:`RowsOperator.preconditioner`, e.g. a single-precision Gram); a refactoring
    after it is exact.  With a kept factor ``N`` the direction ``δ = N^-1 X'W e`` is
    scaled by the exact line search of the weighted least-squares problem at the
    current weights, ``α = δ'X'We / ‖√W Xδ‖²`` (``α = 1`` when ``N = X'WX``), so a
    factor from related weights or a related filter only slows the steps a little.
    The iteration stops at the same fixed point ``X'W e = 0`` (weights and MAD scale
    recomputed every step) with the same stopping rule, ``||X Δβ|| < tol ||e||``.

    The reweighting itself converges only linearly (the weights and the scale move
    with every step), so steps with a kept factor are Anderson-accelerated with depth
    one (Anderson 1965; Walker & Ni 2011, SIAM J. Numer. Anal. 49:1715; citations
    recalled from memory): with ``f_k`` the fitted-value change ``X δ_k`` of the plain
    step at ``β_k``, the step taken is ``δ_k - γ (β_k - β_{k-1} + δ_k - δ_{k-1})`` with
    ``γ = f_k'(f_k - f_{k-1}) / ‖f_k - f_{k-1}‖²`` (the mix of the last two steps
    with the smallest change), its fitted-value change formed from the same vectors
    without another product; ``|γ| ≥ 5`` keeps the plain step.  The stopping rule
    tests the plain step, which is taken as the last one, so the fixed point does not
    depend on the mixing.
    """
    op = rows if isinstance(rows, RowsOperator) else RowsOperator(rows)
    betas = np.array(betas, dtype=float)
    if residuals is None:
        resid = response - op.matvec(betas)
    else:
        resid = np.array(residuals, dtype=float)
    n = resid.shape[0]
    refresh = normal is None
    cheap = refresh  # the first factor may be the operator's approximate one
    memory = None
    previous = np.inf
    converged = False
    weights = np.ones(n)
    n_iter = 0
    scale = scale_guess
    for step in range(1, max_iter + 1):
        n_iter = step
        scale = _mad_near(resid, scale)
        if not scale > 0:
            weights = np.ones(n)
            explicit = op.materialize()
            normal = NormalEquations(explicit @ explicit.T, explicit)
            target = resid + op.matvec(betas)  # the response
            betas = normal.solve(explicit @ target) if normal.cholesky else normal.lstsq(target)
            resid = target - op.matvec(betas)
            converged = True
            break
        weights = resid * (1.0 / (scale * c))  # bisquare weights, fewer passes
        weights *= weights
        np.subtract(1.0, weights, out=weights)
        np.maximum(weights, 0.0, out=weights)
        weights *= weights
        fresh = False
        if refresh:
            normal = op.preconditioner(weights) if cheap else None
            cheap = False  # a later refresh (steps stopped shrinking) is exact
            if normal is None:
                normal, fresh = op.factor(weights), True
        weighted = weights * resid
        gradient = op.rmatvec(weighted)
        delta = normal.solve(gradient)
        change = op.matvec(delta)
        if not fresh:  # exact line search at the current weights (1 for an exact factor)
            curvature = float(np.dot(weights * change, change))
            if curvature > 0:
                alpha = float(np.dot(gradient, delta)) / curvature
                if np.isfinite(alpha) and alpha > 0:
                    delta *= alpha
                    change *= alpha
        size = np.linalg.norm(change) / max(np.linalg.norm(resid), 1e-300)
        taken, taken_change = delta, change
        if accelerate and memory is not None and not fresh and size >= tol:
            taken, taken_change = _anderson_step(delta, change, *memory)
        memory = (delta, change, taken, taken_change)
        betas = betas + taken
        resid = resid - taken_change
        if size < tol:
            converged = True
            break
        refresh = size > 0.5 * previous
        previous = size
    return IRLSResult(
        betas=betas,
        weights=weights,
        scale=_mad_near(resid, scale),
        xtwx_inv=None,
        n_iter=n_iter,
        converged=converged,
        normal=normal,
    )
