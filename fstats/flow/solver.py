"""The batched least-squares solver behind :func:`fstats.flow.fit_g2`.

For many g2 curves at once, as arrays: the semi-infinite model g1² and its derivative in
log BFi, the β-profiled χ² (variable projection, Golub & Pereyra 1973, SIAM J Numer
Anal 10:413, with Kaufman's Jacobian), a shared grid over log BFi for starting values,
and a damped Newton iteration (curvature from the grid, then from the secant of the
exact gradient; Levenberg–Marquardt style step rejection, Marquardt 1963, J SIAM
11:431).  Pure functions of arrays; the caller screens curves and builds the weights.
"""

from __future__ import annotations

import numpy as np

from fstats.flow.forward import _surface_signal

__all__ = ["BETA_MAX", "decay_product_cm2"]

#: Largest β a fit may take (a fully coherent, polarised detection gives 1; ours).
BETA_MAX: float = 1.5
_BETA_MIN = 1e-4

_EXP_FLOOR = -300.0  # exponents are clipped here: e^-300 ~ 5e-131, never subnormal
_GRID_STEP = 0.2  # spacing of the starting-value grid in log BFi (22 %)

_GEOM_KEYS = ("r1", "r2", "z0", "z_image", "k_static_sq", "flow_coef")


def decay_product_cm2(level: float, geom: dict, observable: str) -> np.ndarray:
    """The product BFi·τ (cm²) at which g1 falls to ``level``, per curve geometry.

    g1 depends on BFi and τ only through their product, so this one number per
    geometry turns an observed decay lag into a BFi estimate.  Found by bisection in
    log space (60 halvings, relative precision ~1e-16 of the bracket 1e-22..1e-2 cm²).
    """
    shape = np.broadcast_shapes(*(np.shape(geom[k]) for k in _GEOM_KEYS))
    table = np.stack([np.broadcast_to(geom[k], shape).ravel() for k in _GEOM_KEYS], axis=1)
    unique, inverse = np.unique(table, axis=0, return_inverse=True)
    if unique.shape[0] < table.shape[0]:  # usually one geometry per channel
        found = decay_product_cm2(level, dict(zip(_GEOM_KEYS, unique.T, strict=True)), observable)
        return found[inverse.ravel()].reshape(shape)
    geom = {k: np.broadcast_to(geom[k], shape) for k in _GEOM_KEYS}
    lo = np.full(shape, np.log(1e-22))
    hi = np.full(shape, np.log(1e-2))
    k0 = np.sqrt(geom["k_static_sq"])
    v0, e0 = _surface_signal(k0, geom, observable)
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        k = np.sqrt(geom["k_static_sq"] + geom["flow_coef"] * np.exp(mid))
        v, e = _surface_signal(k, geom, observable)
        g1 = np.exp(-(e - e0)) * v / v0
        above = g1 > level
        lo = np.where(above, mid, lo)
        hi = np.where(above, hi, mid)
    return np.exp(0.5 * (lo + hi))


def _g1_squared(u, lags, geom, observable):
    """g1² and its derivative with respect to log-BFi ``u`` (shape (n, 1)), per lag.

    With q = flow_coef · BFi · τ, K = √(K0² + q), dK/du = q / (2K), so
    d(g1²)/du = 2 g1² · (d log G/dK) · q / (2K) = g1² · (d log G/dK) · q / K.
    Written with in-place operations: this is the hot loop of the fitter.
    """
    q = (geom["flow_coef"] * np.exp(u)) * lags
    k = q + geom["k_static_sq"]
    np.sqrt(k, out=k)
    r1, r2 = geom["r1"], geom["r2"]
    k0 = np.sqrt(geom["k_static_sq"])
    tail = k * (r1 - r2)
    np.maximum(tail, _EXP_FLOOR, out=tail)  # below e^-300 the value is 0 for all purposes,
    np.exp(tail, out=tail)  # e^{-K (r2 - r1)}   and exp() is much slower in underflow
    if observable == "fluence":
        inv_r1 = 1.0 / r1
        value = tail * (-1.0 / r2)
        value += inv_r1
        value0 = inv_r1 - np.exp(-k0 * (r2 - r1)) / r2
        slope = tail - 1.0  # d log G/dK = -(1 - tail)/value
    else:
        a1 = geom["z0"] / r1**2
        a2 = (geom["z_image"] / r2**2) * tail
        value = a1 * (k + 1.0 / r1) + a2 * (k + 1.0 / r2)
        value0 = a1 * (k0 + 1.0 / r1) + geom["z_image"] * np.exp(-k0 * (r2 - r1)) / r2**2 * (
            k0 + 1.0 / r2
        )
        slope = -k * (a1 * r1 + a2 * r2)
    slope /= value
    g1sq = k * (-2.0 * r1)
    g1sq += 2.0 * k0 * r1
    np.maximum(g1sq, _EXP_FLOOR, out=g1sq)
    np.exp(g1sq, out=g1sq)  # e^{-2 (K - K0) r1}
    value *= 1.0 / value0
    value *= value
    g1sq *= value
    # derivative: g1² · slope · q / K
    q /= k
    q *= slope
    q *= g1sq
    return g1sq, q


def _evaluate(u, beta_fixed, wy, w, lags, geom, observable, model=None):
    """β (profiled or fixed), weighted residual, χ² and the reduced Jacobian column.

    ``model`` = (g1², d g1²/du) at ``u`` when already known (from the start grid).
    """
    if model is None:
        with np.errstate(over="ignore", invalid="ignore", under="ignore"):
            g1sq, dg_du = _g1_squared(u[:, None], lags, geom, observable)
    else:
        g1sq, dg_du = model
    jb = g1sq
    jb *= w  # g1² is not needed unweighted after this
    free = np.zeros(u.shape[0], dtype=bool)
    power = np.einsum("ij,ij->i", jb, jb)
    if beta_fixed is None:
        # β enters linearly: its least-squares value for this u (variable projection),
        # kept within (0, BETA_MAX]; a clamped β acts as fixed for this step
        with np.errstate(divide="ignore", invalid="ignore"):
            beta = np.einsum("ij,ij->i", jb, wy) / power
        free = (beta > _BETA_MIN) & (beta < BETA_MAX)
        beta = np.clip(beta, _BETA_MIN, BETA_MAX)
    else:
        beta = beta_fixed
    with np.errstate(invalid="ignore"):
        resid = jb * (-beta[:, None])
        resid += wy
        chi = np.einsum("ij,ij->i", resid, resid)
        dg_du *= w
        dg_du *= beta[:, None]
        ju = dg_du
    if free.any():
        # Kaufman's reduced Jacobian: remove the part of d(model)/du along the β column
        with np.errstate(divide="ignore", invalid="ignore"):
            proj = np.where(free, np.einsum("ij,ij->i", ju, jb) / power, 0.0)
        ju -= proj[:, None] * jb
    return beta, resid, chi, ju


def _grid_start(wy, w, lags, geom, observable, u_guess, fixed, group):
    """Starting log-BFi per curve: minimum of the (β-profiled) χ² over a grid, refined by
    a parabola through the grid minimum and its neighbours.

    Also returns how many leading lags matter (the rest hold a weighted model below
    1e-6 even at the grid's slowest flow) and that slowest log BFi per curve.

    The grid spans the 1st-99th percentiles of the crossing-based guesses ± 0.6 (a factor
    1.8 in BFi) in steps of about :data:`_GRID_STEP`, at most 41 points; each geometry's
    model table (n_grid, n_lags) is evaluated once and
    χ² on the grid comes from two matrix products, so this costs far less than one
    iteration while putting every curve next to its global minimum.
    """
    start = u_guess.copy()
    slowest = np.full(u_guess.size, np.inf)  # lowest log BFi on each curve's grid
    n_needed = 3  # lags that matter for any curve down to its grid's slowest flow
    w_max = float(np.max(w)) if w.size else 0.0
    half_curv = np.full(u_guess.size, np.nan)
    g1sq = np.empty_like(w)
    dg_du = np.empty_like(w)
    ww = w * w
    wwy = w * wy
    syy = np.einsum("ij,ij->i", wy, wy)
    groups = np.unique(group)
    for g in groups:
        # one geometry in the chunk (the usual case): plain slices, no fancy-index copies
        rows = slice(None) if groups.size == 1 else np.flatnonzero(group == g)
        lo, hi = np.percentile(u_guess[rows], [1.0, 99.0]) + np.array([-0.6, 0.6])
        n_grid = int(min(np.ceil((hi - lo) / _GRID_STEP), 40)) + 1
        grid = np.linspace(lo, hi, n_grid)
        step = (hi - lo) / (n_grid - 1)
        first = np.flatnonzero(group == g)[:1]
        geom_g = {k: v[first] for k, v in geom.items()}  # (1, 1): one geometry
        with np.errstate(over="ignore", invalid="ignore", under="ignore"):
            table_g, slope_g = _g1_squared(grid[:, None], lags, geom_g, observable)
        # einsum, not BLAS: small products, and threaded BLAS costs more than it saves here
        cross = np.einsum("ij,kj->ik", wwy[rows], table_g)  # Σ w² (y - 1) g1²  (n_rows, n_grid)
        power = np.einsum("ij,kj->ik", ww[rows], table_g * table_g)  # Σ w² g1⁴
        if fixed is None:
            with np.errstate(divide="ignore", invalid="ignore"):
                beta = np.clip(cross / power, _BETA_MIN, BETA_MAX)
        else:
            beta = fixed[rows][:, None]
        chi = syy[rows][:, None] - 2.0 * beta * cross + beta * beta * power
        chi = np.where(np.isfinite(chi), chi, np.inf)
        best = np.argmin(chi, axis=1)
        inner = (best > 0) & (best < n_grid - 1)
        j = np.clip(best, 1, n_grid - 2)
        r = np.arange(best.size)
        c_m, c_0, c_p = chi[r, j - 1], chi[r, j], chi[r, j + 1]
        # lags where even the slowest grid flow leaves a weighted model below 1e-6 (of a
        # standard deviation) carry no information on BFi for these curves
        significant = table_g[0] * (BETA_MAX * w_max) > 1e-6
        n_needed = max(n_needed, int(np.flatnonzero(significant).max(initial=0)) + 1)
        slowest[rows] = grid[0]
        # the iteration starts on the best grid point, where the model is already known,
        # with the parabola's curvature (½ d²χ²/du²) for its first Newton step
        half_curv[rows] = np.where(inner, 0.5 * (c_m - 2.0 * c_0 + c_p) / step**2, np.nan)
        start[rows] = grid[best]
        if groups.size == 1:
            np.take(table_g, best, axis=0, out=g1sq)
            np.take(slope_g, best, axis=0, out=dg_du)
        else:
            g1sq[rows] = table_g[best]
            dg_du[rows] = slope_g[best]
    return start, half_curv, (g1sq, dg_du), n_needed, slowest


def _lm(
    y, w, lags, geom, observable, u, beta, fit_beta, max_iter, xtol, ftol, model=None, curv0=None
):
    """Damped secant-Newton iteration in log-BFi with β profiled out; one chunk of curves.

    The profiled χ²(u) is one-dimensional.  Its exact gradient is -2 Σ J·r (J the
    reduced Jacobian column; r is orthogonal to the β column at the profiled β).  The
    curvature starts at the Gauss–Newton value Σ J² and is replaced by the secant of
    the gradient between the last two points evaluated (accepted or not) once that is
    positive, which keeps convergence fast on noisy curves where Gauss–Newton alone
    overshoots.  Steps are damped Levenberg–Marquardt style: a step that raises χ² is
    rejected and the damping raised.

    Returns u, beta, n_iter, converged and the weighted residuals at the solution.
    """
    n = y.shape[0]
    wy = w * (y - 1.0)
    fixed = None if fit_beta else beta.copy()
    out_u = u.copy()
    out_beta = beta.copy()
    out_resid = np.empty_like(y)
    n_iter = np.zeros(n, dtype=int)
    converged = np.zeros(n, dtype=bool)
    # working set: the curves still iterating; finished ones are written out and dropped
    ids = np.arange(n)
    u = u.copy()
    b, resid, chi, ju = _evaluate(u, fixed, wy, w, lags, geom, observable, model)
    grad = -np.einsum("ij,ij->i", ju, resid)
    first = np.full(n, np.nan) if curv0 is None else curv0.copy()
    prev_u = np.full(n, np.nan)
    prev_grad = np.full(n, np.nan)
    lam = np.full(n, 1e-3)
    for _ in range(max_iter):
        if ids.size == 0:
            break
        n_iter[ids] += 1
        with np.errstate(divide="ignore", invalid="ignore"):
            secant = (grad - prev_grad) / (u - prev_u)
            curv = np.where(np.isfinite(first) & (first > 0), first, np.nan)
            curv = np.where(np.isfinite(secant) & (secant > 0), secant, curv)
            gauss = np.flatnonzero(~np.isfinite(curv))  # Gauss–Newton where nothing better
            if gauss.size:
                curv[gauss] = np.einsum("ij,ij->i", ju[gauss], ju[gauss])
            du = -grad / (curv * (1.0 + lam))
        first[:] = np.nan
        du = np.where(np.isfinite(du), np.clip(du, -3.0, 3.0), 0.0)
        u_t = u + du
        b_t, r_t, chi_t, j_t = _evaluate(u_t, fixed, wy, w, lags, geom, observable)
        g_t = -np.einsum("ij,ij->i", j_t, r_t)
        better = chi_t < chi
        small = np.abs(du) <= xtol
        settled = (chi - chi_t) <= ftol * chi_t
        # secant pair: the other end is the old point (accepted) or the trial (rejected)
        prev_u = np.where(better, u, u_t)
        prev_grad = np.where(better, grad, g_t)
        u = np.where(better, u_t, u)
        b = np.where(better, b_t, b)
        chi = np.where(better, chi_t, chi)
        grad = np.where(better, g_t, grad)
        if not better.all():  # rejected steps keep their old rows (trial arrays are ours)
            worse = ~better
            r_t[worse] = resid[worse]
            j_t[worse] = ju[worse]
        resid, ju = r_t, j_t
        lam = np.where(better, lam * 0.3, np.maximum(lam * 4.0, 1e-2))
        done = small | (better & settled)
        converged[ids[done]] = True
        stop = done | (lam > 1e12)
        if stop.any():
            fin = ids[stop]
            out_u[fin], out_beta[fin], out_resid[fin] = u[stop], b[stop], resid[stop]
            keep = ~stop
            ids, u, b, chi, grad = ids[keep], u[keep], b[keep], chi[keep], grad[keep]
            prev_u, prev_grad, lam, first = prev_u[keep], prev_grad[keep], lam[keep], first[keep]
            resid, ju, wy, w = resid[keep], ju[keep], wy[keep], w[keep]
            geom = {k: v[keep] for k, v in geom.items()}
            fixed = None if fixed is None else fixed[keep]
    out_u[ids], out_beta[ids], out_resid[ids] = u, b, resid
    return out_u, out_beta, n_iter, converged, out_resid
