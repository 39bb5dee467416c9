"""IRLS with regressors held as rows or as an operator: few Gram matrices, cheap steps.

:func:`irls_rows` computes the Tukey-bisquare M-estimate of
:func:`fstats.fit.robust.irls` (the same fixed point and stopping rule) with one
factored ``X'WX`` kept across steps, line-searched and Anderson-mixed steps, and the
regressors behind a :class:`RowsOperator`, so that an operator can give ``X δ`` and
``X' v`` without holding ``X`` (the filtered design of :mod:`fstats.fit.filtering`).
"""

from __future__ import annotations

import numpy as np

from fstats.fit.robust import MAD_NORMAL, TUKEY_C, IRLSResult, NormalEquations, mad_scale

__all__ = ["RowsOperator", "irls_rows"]


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
            normal = op.factor(weights)
            target = resid + op.matvec(betas)  # the response
            betas = normal.solve(op.rmatvec(target)) if normal.cholesky else normal.lstsq(target)
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
            # the first factor may be the operator's approximate one; a later refresh
            # (the steps stopped shrinking) is exact
            normal = op.preconditioner(weights) if step == 1 else None
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
