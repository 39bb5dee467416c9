"""The batched least-squares solver behind :func:`fstats.flow.fit_g2`.

For many g2 curves at once, as arrays: the semi-infinite model g1² with the first and
second derivatives of log g1² in log BFi, the β-profiled χ² (variable projection, Golub
& Pereyra 1973, SIAM J Numer Anal 10:413, with Kaufman's Jacobian), a shared grid over
log BFi for starting values, and a damped Newton iteration (curvature from the grid, then
from the secant of the exact gradient; Levenberg–Marquardt style step rejection,
Marquardt 1963, J SIAM 11:431).

Speed: the model of a geometry is tabulated once on a fine log-BFi grid
(:class:`_ModelTable`) and read with a second-order expansion; small trial steps are
judged on the expansion about the current point (:func:`_taylor_trial`); per-lag arrays
live in reused scratch space (:class:`_Workspace`).  Pure functions of arrays (the
scratch space and tables are the caller's); the caller screens curves and builds the
weights.
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
_TAYLOR_MAX = 1e-3  # largest log-BFi step judged on a Taylor expansion of the model
_BLAS_BLOCK = 1 << 18  # multiply-adds per matrix product block (see _products)
_TABLE_STEP = 2e-3  # node spacing of the model tables in log BFi (see _ModelTable)
_TABLE_MAX_NODES = 4001  # at most 8 in log BFi (a factor 3000 in BFi) per table

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


class _Workspace:
    """Named scratch arrays of floats, reused from chunk to chunk.

    Fresh arrays of a few hundred kB come from the operating system page by page (and
    go back when freed), which on this workload costs as much as the arithmetic; the
    fitter therefore writes its per-lag arrays into these.  ``take(name, n, m)`` gives a
    C-contiguous (n, m) view of the buffer called ``name``; two arrays alive at the same
    time must have different names.  ``None`` in place of a workspace allocates afresh.
    """

    def __init__(self):
        self._flat: dict[str, np.ndarray] = {}

    def take(self, name: str, n: int, m: int) -> np.ndarray:
        flat = self._flat.get(name)
        if flat is None or flat.size < n * m:  # grows to the largest request
            flat = self._flat[name] = np.empty(n * m)
        return flat[: n * m].reshape(n, m)


def _exp_series(a: np.ndarray, out: np.ndarray) -> np.ndarray:
    """``exp(a)`` to fourth order, ``1 + a + a²/2 + a³/6 + a⁴/24``, written into ``out``."""
    np.multiply(a, 1.0 / 24.0, out=out)
    out += 1.0 / 6.0
    out *= a
    out += 0.5
    out *= a
    out += 1.0
    out *= a
    out += 1.0
    return out


def _buf(ws, name, n, m):
    return np.empty((n, m)) if ws is None else ws.take(name, n, m)


def _take_rows(a, rows, ws, name):
    """``a[rows]`` (integer rows) into the workspace array ``name``."""
    return np.take(a, rows, 0, _buf(ws, name, rows.size, a.shape[1]), "clip")


def _geom_rows(geom, rows):
    """The geometry of some curves: per-curve (n, 1) arrays are indexed, a geometry shared
    by every curve (arrays of one row, broadcast) is kept as it is."""
    if all(np.shape(v)[0] == 1 for v in geom.values()):
        return geom
    return {k: v[rows] for k, v in geom.items()}


def _log_model(u, lags, geom, observable, curvature=False, ws=None, out=("g", "dlog", "lpp")):
    """g1², L' = d log g1²/du and, with ``curvature``, L'' = d² log g1²/du² per lag.

    ``u`` is log-BFi, shape (n, 1) (or (n_grid, 1) for a table).  With q = flow_coef·BFi·τ,
    K = √(K0² + q), dK/du = q / (2K), s = d log G/dK and s2 = G''/G (G the unnormalised
    signal of :func:`fstats.flow.forward._surface_signal`)::

        L'  = s · q / K
        L'' = (q / K) · [(s2 - s²) · q / (2K) + s · (1 - q / (2K²))]

    The results go into the workspace arrays named by ``out`` (fresh arrays without a
    workspace).  Written with in-place operations: this is the hot loop of the fitter.
    """
    n, m = u.shape[0], lags.size
    r1, r2 = geom["r1"], geom["r2"]
    k0 = np.sqrt(geom["k_static_sq"])
    q = _buf(ws, "_q", n, m)
    np.multiply(geom["flow_coef"] * np.exp(u), lags, out=q)
    k = _buf(ws, "_k", n, m)
    np.add(q, geom["k_static_sq"], out=k)
    np.sqrt(k, out=k)
    tail = _buf(ws, "_tail", n, m)
    np.multiply(k, r1 - r2, out=tail)
    np.exp(tail, out=tail)  # e^{-K (r2 - r1)}: r2 - r1 is small, this never underflows
    value = _buf(ws, "_value", n, m)
    slope = _buf(ws, "_slope", n, m)
    s2 = _buf(ws, out[2], n, m) if curvature else None
    if observable == "fluence":
        inv_r1 = 1.0 / r1
        np.multiply(tail, -1.0 / r2, out=value)
        value += inv_r1
        value0 = inv_r1 - np.exp(-k0 * (r2 - r1)) / r2
        np.subtract(tail, 1.0, out=slope)  # d log G/dK = -(1 - tail)/value
        if curvature:  # G''/G = (r1 - r2·tail)/value
            np.multiply(tail, -r2, out=s2)
            s2 += r1
    else:
        a1 = geom["z0"] / r1**2
        a2 = (geom["z_image"] / r2**2) * tail
        np.multiply(a1, k + 1.0 / r1, out=value)
        value += a2 * (k + 1.0 / r2)
        value0 = a1 * (k0 + 1.0 / r1) + geom["z_image"] * np.exp(-k0 * (r2 - r1)) / r2**2 * (
            k0 + 1.0 / r2
        )
        np.multiply(-k, a1 * r1 + a2 * r2, out=slope)
        if curvature:  # G''/G = -[a1 r1 (1 - K r1) + a2 r2 (1 - K r2)] / value
            np.multiply(k * r1 - 1.0, a1 * r1, out=s2)
            s2 += (k * r2 - 1.0) * (a2 * r2)
    inv_value = np.divide(1.0, value, out=tail)  # the tail is not needed any more
    slope *= inv_value
    g1sq = _buf(ws, out[0], n, m)
    np.multiply(k, -2.0 * r1, out=g1sq)
    g1sq += 2.0 * k0 * r1
    np.maximum(g1sq, _EXP_FLOOR, out=g1sq)  # below e^-300 the value is 0 for all purposes,
    np.exp(g1sq, out=g1sq)  # e^{-2 (K - K0) r1}   and exp() is much slower in underflow
    value *= 1.0 / value0
    value *= value
    g1sq *= value
    q /= k  # q/K
    dlog = _buf(ws, out[1], n, m)
    np.multiply(q, slope, out=dlog)  # L'
    if not curvature:
        return g1sq, dlog, None
    s2 *= inv_value
    np.multiply(slope, slope, out=value)
    s2 -= value  # d s/dK = G''/G - s²
    s2 *= q
    s2 *= 0.5
    np.divide(q, k, out=value)  # q / K²
    value *= -0.5
    value += 1.0
    value *= slope
    s2 += value
    s2 *= q  # L''
    return g1sq, dlog, s2


def _g1_squared(u, lags, geom, observable):
    """g1² and its derivative with respect to log-BFi ``u`` (shape (n, 1)), per lag.

    With q = flow_coef · BFi · τ, K = √(K0² + q), dK/du = q / (2K), so
    d(g1²)/du = 2 g1² · (d log G/dK) · q / (2K) = g1² · (d log G/dK) · q / K.
    """
    g1sq, dlog, _ = _log_model(u, lags, geom, observable)
    dlog *= g1sq
    return g1sq, dlog


def _profile(jb, beta_fixed, wy, resid=None):
    """β (profiled or fixed), weighted residual, χ² and Σ jb² for the weighted β column
    ``jb`` = w·g1² of each curve; the residual goes into ``resid`` when given."""
    power = np.einsum("ij,ij->i", jb, jb)
    if beta_fixed is None:
        # β enters linearly: its least-squares value for this u (variable projection),
        # kept within (0, BETA_MAX]; a clamped β acts as fixed for this step
        beta = np.clip(np.einsum("ij,ij->i", jb, wy) / power, _BETA_MIN, BETA_MAX)
    else:
        beta = beta_fixed
    resid = np.multiply(jb, -beta[:, None], out=resid)
    resid += wy
    chi = np.einsum("ij,ij->i", resid, resid)
    return beta, resid, chi, power


def _evaluate(u, beta_fixed, wy, w, lags, geom, observable):
    """β (profiled or fixed), weighted residual, χ² and Kaufman's reduced Jacobian column
    (d model/du with its part along the β column removed) at ``u``, shape (n,)."""
    with np.errstate(all="ignore"):
        g1sq, dlog, _ = _log_model(u[:, None], lags, geom, observable)
        jb = g1sq * w
        beta, resid, chi, power = _profile(jb, beta_fixed, wy)
        ju = jb * dlog * beta[:, None]
        if beta_fixed is None:
            free = (beta > _BETA_MIN) & (beta < BETA_MAX)
            proj = np.where(free, np.einsum("ij,ij->i", ju, jb) / power, 0.0)
            ju -= proj[:, None] * jb
    return beta, resid, chi, ju


def _exact_trial(u, beta_fixed, wy, w, lags, geom, observable, ws, tag, rtag):
    """Everything the iteration keeps about a point ``u``: β, weighted residual, χ², Σ jb²,
    jb = w·g1², jd = w·d(g1²)/du, L' and L'' (see :func:`_log_model`); the per-lag arrays
    in the workspace sets ``tag`` (model) and ``rtag`` (residual)."""
    n, m = wy.shape
    jb, dlog, lpp = _log_model(
        u[:, None], lags, geom, observable, True, ws, ("jb" + tag, "dlog" + tag, "lpp" + tag)
    )
    jb *= w
    beta, resid, chi, power = _profile(jb, beta_fixed, wy, _buf(ws, "r" + rtag, n, m))
    jd = np.multiply(jb, dlog, out=_buf(ws, "jd" + tag, n, m))
    return beta, resid, chi, power, jb, jd, dlog, lpp


class _ModelTable:
    """g1², L' and L'' of one geometry on a fine grid of log BFi, for every lag.

    g1 depends on BFi·τ only, so one table serves every curve of a channel.  A point u
    is then evaluated from its nearest node u_j (|u - u_j| <= :data:`_TABLE_STEP`/2)
    by the same expansion as :func:`_taylor_trial`: g1²(u) = g1²(u_j) e^a with
    a = L' δ + L'' δ²/2, and L'(u) = L' + L'' δ.  The relative error of g1² is below
    ~1e-9 where g1² carries signal (measured: 8e-10 at 1 and 3 cm, both observables;
    L' to ~5e-7, which only steers the iteration), against ~50 ns per lag for the two
    exponentials, square root and divisions of an exact evaluation.
    """

    def __init__(self, geom, lags, observable, lo, hi):
        self.n_lags = lags.size  # the first lags only: those the iteration uses
        n_nodes = min(int(np.ceil((hi - lo) / _TABLE_STEP)) + 1, _TABLE_MAX_NODES)
        self.lo = float(lo)
        self.n_nodes = n_nodes
        self.hi = self.lo + (n_nodes - 1) * _TABLE_STEP
        nodes = self.lo + _TABLE_STEP * np.arange(n_nodes)
        shape = (n_nodes, lags.size)
        self._full = (np.empty(shape), np.empty(shape), np.empty(shape))
        block = 256
        with np.errstate(all="ignore"):
            for start in range(0, n_nodes, block):
                part = _log_model(nodes[start : start + block, None], lags, geom, observable, True)
                for full, value in zip(self._full, part, strict=True):
                    full[start : start + block] = value
        self._cols: dict[int, tuple] = {}

    def covers(self, lo, hi, n_lags):
        return lo >= self.lo and hi <= self.hi and n_lags <= self.n_lags

    def columns(self, m):
        """The tables for the first ``m`` lags, C-contiguous (gathers from them are fast)."""
        if m == self.n_lags:
            return self._full
        if m not in self._cols:
            self._cols[m] = tuple(np.ascontiguousarray(full[:, :m]) for full in self._full)
        return self._cols[m]


def _table_trial(u, table, beta_fixed, wy, w, ws, tag, rtag):
    """As :func:`_exact_trial`, from the nearest nodes of ``table`` (all ``u`` inside it)."""
    n, m = wy.shape
    g_tab, d_tab, p_tab = table.columns(m)
    node = np.rint((u - table.lo) * (1.0 / _TABLE_STEP)).astype(np.intp)
    delta = (u - (table.lo + node * _TABLE_STEP))[:, None]
    jb = np.take(g_tab, node, 0, _buf(ws, "jb" + tag, n, m), "clip")
    dlog = np.take(d_tab, node, 0, _buf(ws, "dlog" + tag, n, m), "clip")
    lpp = np.take(p_tab, node, 0, _buf(ws, "lpp" + tag, n, m), "clip")
    a = np.multiply(lpp, 0.5 * delta, out=_buf(ws, "_q", n, m))
    a += dlog
    a *= delta
    factor = _exp_series(a, _buf(ws, "_k", n, m))
    jb *= factor
    jb *= w
    np.multiply(lpp, delta, out=a)
    dlog += a  # L' at u
    beta, resid, chi, power = _profile(jb, beta_fixed, wy, _buf(ws, "r" + rtag, n, m))
    jd = np.multiply(jb, dlog, out=_buf(ws, "jd" + tag, n, m))
    return beta, resid, chi, power, jb, jd, dlog, lpp


def _model_trial(u, beta_fixed, wy, w, lags, geom, observable, ws, tag, rtag, table):
    """:func:`_table_trial` where ``table`` covers ``u``, else :func:`_exact_trial`."""
    if table is None:
        return _exact_trial(u, beta_fixed, wy, w, lags, geom, observable, ws, tag, rtag)
    inside = (u >= table.lo) & (u <= table.hi)
    if inside.all():
        return _table_trial(u, table, beta_fixed, wy, w, ws, tag, rtag)
    if not inside.any():
        return _exact_trial(u, beta_fixed, wy, w, lags, geom, observable, ws, tag, rtag)
    # a few rows outside the table (wild steps): evaluate those exactly and put them in
    part = np.flatnonzero(~inside)
    ev = _exact_trial(
        u[part], None if beta_fixed is None else beta_fixed[part], wy[part], w[part], lags,
        _geom_rows(geom, part), observable, None, "", "",
    )  # fmt: skip
    res = list(_table_trial(np.where(inside, u, table.lo), table, beta_fixed, wy, w, ws, tag, rtag))
    res[0] = np.array(res[0])  # a copy: with β fixed this is the caller's array
    for out, value in zip(res, ev, strict=True):
        out[part] = value
    return tuple(res)


def _taylor_trial(du, jb, dlog, lpp, beta_fixed, wy, ws, tag):
    """β, weighted residual, χ² and Σ jb² at u + du from the model at u, without evaluating it.

    log g1² is expanded to second order in du, a = L' du + L'' du²/2, and e^a by its
    Taylor series to the fourth power.  For |du| <= :data:`_TAYLOR_MAX` the relative
    model error is below ~1e-9 on every lag that carries signal (L''' du³/6, with
    |L'''| of order |log g1²|/8, and a⁵/120 for the series), far inside the rounding of
    the χ² comparison that follows; on lags where g1² is vanishingly small the relative
    error grows, its absolute size does not.
    """
    n, m = wy.shape
    step = du[:, None]
    a = np.multiply(lpp, 0.5 * step, out=_buf(ws, "_q", n, m))
    a += dlog
    a *= step
    factor = _exp_series(a, _buf(ws, "_k", n, m))
    factor *= jb
    return _profile(factor, beta_fixed, wy, _buf(ws, "r" + tag, n, m))


def _grid_start(wy, w, lags, geom, observable, u_guess, fixed, group, ws=None):
    """Starting log-BFi per curve: minimum of the (β-profiled) χ² over a grid, refined by
    a parabola through the grid minimum and its neighbours.

    Also returns the model (g1², d log g1²/du) at each curve's grid point, how many
    leading lags matter (the rest hold a weighted model below 1e-6 even at the grid's
    slowest flow) and that slowest log BFi per curve.

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
    n, m = w.shape
    g1sq = _buf(ws, "g_grid", n, m)
    dlog = _buf(ws, "dlog_grid", n, m)
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
            table_g, slope_g, _ = _log_model(grid[:, None], lags, geom_g, observable)
        # lags where even the slowest grid flow leaves a weighted model below 1e-6 (of a
        # standard deviation) carry no information on BFi for these curves
        significant = table_g[0] * (BETA_MAX * w_max) > 1e-6
        n_sig = int(np.flatnonzero(significant).max(initial=0)) + 1
        n_needed = max(n_needed, n_sig)
        # products on those lags only: the others add below 1e-6 to any grid χ² difference
        sig = slice(0, max(n_sig, 3))
        table_s = table_g[:, sig]
        w_s = w[rows, sig]
        shape = w_s.shape
        ww = np.multiply(w_s, w_s, out=_buf(ws, "_q", *shape))
        wwy = np.multiply(w_s, wy[rows, sig], out=_buf(ws, "_k", *shape))
        cross = _products(wwy, table_s)  # Σ w² (y - 1) g1²  (n_rows, n_grid)
        power = _products(ww, table_s * table_s)  # Σ w² g1⁴
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
        slowest[rows] = grid[0]
        # the iteration starts on the best grid point, where the model is already known,
        # with the parabola's curvature (½ d²χ²/du²) for its first Newton step
        half_curv[rows] = np.where(inner, 0.5 * (c_m - 2.0 * c_0 + c_p) / step**2, np.nan)
        start[rows] = grid[best]
        if groups.size == 1:
            np.take(table_g, best, 0, g1sq, "clip")
            np.take(slope_g, best, 0, dlog, "clip")
        else:
            g1sq[rows] = table_g[best]
            dlog[rows] = slope_g[best]
    n_needed = min(-(-n_needed // 8) * 8, m)  # whole multiples of 8: few distinct widths
    return start, half_curv, (g1sq, dlog), n_needed, slowest


def _products(a, table):
    """``a @ table.T`` for (n, m) curves against an (n_grid, m) table.

    BLAS in row blocks of at most :data:`_BLAS_BLOCK` multiply-adds: OpenBLAS runs a
    product that small on one thread (its threshold is 65536 × 4 multiply-adds, recalled
    from memory), and a threaded BLAS on a busy machine costs far more than it saves here.
    """
    n, m = a.shape
    rows = max(1, _BLAS_BLOCK // max(m * table.shape[0], 1))
    if n <= rows:
        return a @ table.T
    out = np.empty((n, table.shape[0]))
    for start in range(0, n, rows):
        np.matmul(a[start : start + rows], table.T, out=out[start : start + rows])
    return out


def _lm(*args, **kwargs):
    """:func:`_lm_core` with floating-point warnings off (non-finite values are handled)."""
    with np.errstate(all="ignore"):
        return _lm_core(*args, **kwargs)


def _other(tag):
    """The other workspace set of a pair: "0" <-> "1", "c0" <-> "c1"."""
    return tag[:-1] + ("1" if tag[-1] == "0" else "0")


def _lm_core(
    y, w, lags, geom, observable, u, beta, fit_beta, max_iter, xtol, ftol, model=None,
    curv0=None, wy=None, ws=None, table=None,
):  # fmt: skip
    """Damped secant-Newton iteration in log-BFi with β profiled out; one chunk of curves.

    The profiled χ²(u) is one-dimensional.  Its exact gradient is -2 β Σ jd·r (jd the
    weighted model derivative; the part of it along the β column drops out because r is
    orthogonal to that column at the profiled β, Kaufman's simplification).  The
    curvature starts at the Gauss–Newton value Σ J² (J the reduced Jacobian column) and
    is replaced by the secant of the gradient between the last two points evaluated
    (accepted or not) once that is positive, which keeps convergence fast on noisy curves
    where Gauss–Newton alone overshoots.  Steps are damped Levenberg–Marquardt style: a
    step that raises χ² is rejected and the damping raised.

    Points are evaluated from the model ``table`` where it covers them (see
    :class:`_ModelTable`, relative error < 1e-9), else exactly.  A trial step of at most
    :data:`_TAYLOR_MAX` from such a point is first judged on the second-order expansion of
    log g1² about it (:func:`_taylor_trial`); if that ends the iteration, its β and
    residuals are the result.  Any other trial (and any Taylor trial that does not end
    the iteration) is evaluated in full, so the path of the iteration is the full one.

    Curves that finish are written out; they leave the working arrays once a quarter of
    the rows has finished (until then they stand still: copying the others costs more).
    Per-lag arrays live in the workspace ``ws`` (:class:`_Workspace`), two sets that
    take turns as current and trial values.

    Returns u, beta, n_iter, converged and the weighted residuals at the solution.
    """
    n, m = y.shape
    if wy is None:
        wy = w * (y - 1.0)
    fixed = None if fit_beta else beta.copy()
    out_u = u.copy()
    out_beta = beta.copy()
    out_resid = None  # becomes the residual array of the first compaction (or the last)
    n_iter = np.zeros(n, dtype=int)
    converged = np.zeros(n, dtype=bool)
    ids = np.arange(n)  # working rows: curves still iterating, and finished ones standing still
    alive = np.ones(n, dtype=bool)
    u = u.copy()
    rtag, mtag, ctag = "0", "0", "0"  # workspace sets of the residual, model and data rows
    if model is None:
        b, resid, chi, power, jb, jd, dlog, lpp = _model_trial(
            u, fixed, wy, w, lags, geom, observable, ws, mtag, rtag, table
        )
        exact = np.ones(n, dtype=bool)  # L'' known at u: Taylor trials allowed
    else:
        jb = np.multiply(model[0], w, out=_buf(ws, "jb0", n, m))
        dlog = model[1]  # the caller's array (no copy): rows accepted later are written in
        b, resid, chi, power = _profile(jb, fixed, wy, _buf(ws, "r0", n, m))
        jd = np.multiply(jb, dlog, out=_buf(ws, "jd0", n, m))
        lpp = _buf(ws, "lpp0", n, m)
        lpp.fill(0.0)
        exact = np.zeros(n, dtype=bool)
    grad = -b * np.einsum("ij,ij->i", jd, resid)
    first = np.full(n, np.nan) if curv0 is None else curv0.copy()
    prev_u = np.full(n, np.nan)
    prev_grad = np.full(n, np.nan)
    lam = np.full(n, 1e-3)
    for _ in range(max_iter):
        if not alive.any():
            break
        n_act = ids.size
        n_iter[ids[alive]] += 1
        secant = (grad - prev_grad) / (u - prev_u)
        curv = np.where(np.isfinite(first) & (first > 0), first, np.nan)
        curv = np.where(np.isfinite(secant) & (secant > 0), secant, curv)
        gauss = np.flatnonzero(~np.isfinite(curv))  # Gauss–Newton where nothing better
        if gauss.size:
            # Σ J² = β² (Σ jd² - (Σ jd·jb)² / Σ jb²) with β free, β² Σ jd² with β held
            jd_g, jb_g, b_g = jd[gauss], jb[gauss], b[gauss]
            along = np.einsum("ij,ij->i", jd_g, jb_g) ** 2 / power[gauss]
            if fixed is not None:
                along[:] = 0.0
            else:
                along[~((b_g > _BETA_MIN) & (b_g < BETA_MAX))] = 0.0
            curv[gauss] = b_g**2 * (np.einsum("ij,ij->i", jd_g, jd_g) - along)
        du = -grad / (curv * (1.0 + lam))
        first[:] = np.nan
        du = np.where(np.isfinite(du) & alive, np.clip(du, -3.0, 3.0), 0.0)
        u_t = u + du
        small = np.abs(du) <= xtol
        taylor = exact & (np.abs(du) <= _TAYLOR_MAX)
        need = alive.copy()  # rows evaluated exactly at u_t
        r_tag = _other(rtag)
        if taylor.any() or not alive.all():
            # rows that take no Taylor step get their current values (du = 0)
            b_t, r_t, chi_t, pow_t = _taylor_trial(
                np.where(taylor, du, 0.0), jb, dlog, lpp, fixed, wy, ws, r_tag
            )
            better = chi_t < chi
            need &= ~(taylor & (small | (better & ((chi - chi_t) <= ftol * chi_t))))
        n_need = int(np.count_nonzero(need))
        if n_need == n_act:
            m_tag = _other(mtag)
            b_t, r_t, chi_t, pow_t, jb_t, jd_t, dlog_t, lpp_t = _model_trial(
                u_t, fixed, wy, w, lags, geom, observable, ws, m_tag, r_tag, table
            )
            g_t = -b_t * np.einsum("ij,ij->i", jd_t, r_t)
            better = alive & (chi_t < chi)
            if not better.all():  # rejected steps keep their old rows
                worse = np.flatnonzero(~better)
                r_t[worse], jb_t[worse], jd_t[worse] = resid[worse], jb[worse], jd[worse]
                dlog_t[worse], lpp_t[worse] = dlog[worse], lpp[worse]
            jb, jd, dlog, lpp, mtag = jb_t, jd_t, dlog_t, lpp_t, m_tag
        else:
            # Taylor values stand for every row not evaluated exactly: rows that end now,
            # and finished rows standing still (du = 0)
            g_t = np.zeros_like(chi)
            if n_need:
                sel = np.flatnonzero(need)
                n_sel = sel.size
                ev = _model_trial(
                    u_t[sel], None if fixed is None else fixed[sel],
                    np.take(wy, sel, 0, _buf(ws, "wy_p", n_sel, m), "clip"),
                    np.take(w, sel, 0, _buf(ws, "w_p", n_sel, m), "clip"), lags,
                    _geom_rows(geom, sel), observable, ws, "_p", "_p", table,
                )  # fmt: skip
                b_t = np.array(b_t)  # a copy: with β fixed this is the caller's array
                b_t[sel], r_t[sel], chi_t[sel], pow_t[sel] = ev[0], ev[1], ev[2], ev[3]
                g_t[sel] = -ev[0] * np.einsum("ij,ij->i", ev[5], ev[1])
                # accepted rows take the new model (in place: the old one is not needed)
                moved = ev[2] < chi[sel]
                rows = sel[moved]
                jb[rows], jd[rows] = ev[4][moved], ev[5][moved]
                dlog[rows], lpp[rows] = ev[6][moved], ev[7][moved]
            better = alive & (chi_t < chi)
            if not better.all():
                worse = np.flatnonzero(~better)
                r_t[worse] = resid[worse]
        resid, rtag = r_t, r_tag
        settled = (chi - chi_t) <= ftol * chi_t
        # secant pair: the other end is the old point (accepted) or the trial (rejected)
        prev_u = np.where(better, u, u_t)
        prev_grad = np.where(better, grad, g_t)
        u = np.where(better, u_t, u)
        b = np.where(better, b_t, b)
        chi = np.where(better, chi_t, chi)
        power = np.where(better, pow_t, power)
        grad = np.where(better, g_t, grad)
        exact |= better
        lam = np.where(better, lam * 0.3, np.maximum(lam * 4.0, 1e-2))
        done = alive & (small | (better & settled))
        converged[ids[done]] = True
        stop = done | (alive & (lam > 1e12))
        if stop.any():
            fin = ids[stop]
            out_u[fin], out_beta[fin] = u[stop], b[stop]
            alive &= ~stop
            n_live = int(np.count_nonzero(alive))
            if 0 < n_live and 4 * n_live <= 3 * n_act:
                keep = np.flatnonzero(alive)
                # finished rows (their residuals stand still) leave the working arrays
                if out_resid is None:  # rows still in place: this array is the result's
                    out_resid, rtag = resid, "c" + rtag  # later residuals go elsewhere
                else:
                    gone = np.flatnonzero(~alive)
                    out_resid[ids[gone]] = resid[gone]
                ids, u, b, chi, grad = ids[keep], u[keep], b[keep], chi[keep], grad[keep]
                prev_u, prev_grad, lam = prev_u[keep], prev_grad[keep], lam[keep]
                first, exact, power = first[keep], exact[keep], power[keep]
                geom = _geom_rows(geom, keep)
                fixed = None if fixed is None else fixed[keep]
                rtag, mtag, ctag = _other(rtag), _other(mtag), _other(ctag)
                resid = _take_rows(resid, keep, ws, "r" + rtag)
                jb = _take_rows(jb, keep, ws, "jb" + mtag)
                jd = _take_rows(jd, keep, ws, "jd" + mtag)
                dlog = _take_rows(dlog, keep, ws, "dlog" + mtag)
                lpp = _take_rows(lpp, keep, ws, "lpp" + mtag)
                wy = _take_rows(wy, keep, ws, "wy_c" + ctag)
                w = _take_rows(w, keep, ws, "w_c" + ctag)
                alive = np.ones(n_live, dtype=bool)
    last = ids[alive]
    out_u[last], out_beta[last] = u[alive], b[alive]
    if out_resid is None:
        out_resid = resid
    else:
        out_resid[ids] = resid
    return out_u, out_beta, n_iter, converged, out_resid
