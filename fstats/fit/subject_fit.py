"""What a subject-level fit returns: `SubjectFit`, `ChannelFit` and `ChannelFailure` records.

Plain frozen records made by :meth:`fstats.fit.glm.SubjectGLM.fit`: a channel's
estimation output with its names, baseline, diagnostics and extra variance
components, and the tests and intervals derived from them.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from fstats.design.matrix import DesignMatrix
from fstats.fit.components import VarianceComponent, combined_dof, components_covariance
from fstats.fit.estimation import ChannelEstimate
from fstats.fit.inference import TermTest, f_test, t_test

if TYPE_CHECKING:
    from fstats.fit.glm import SubjectGLM

__all__ = ["ChannelFailure", "ChannelFit", "SubjectFit"]


@dataclass(frozen=True, eq=False)
class ChannelFit:
    """One channel's fitted GLM.

    Parameters
    ----------
    channel : str
        Channel name.
    separation_cm : float
        Source-detector separation in cm.
    is_short : bool
        Short-separation channel (fitted without its own short-channel columns).
    names, kinds : tuple of str
        Regressor names and kinds of the columns actually fitted.
    conditions : dict of str to tuple of str
        Task condition → its columns (restricted to the fitted columns).
    estimate : ChannelEstimate
        Arrays from the estimation: betas, cov, dof, ar_coefs, fitted (n_times,),
        residuals, whitened_residuals, weights (n_times,).
    baseline_flow : float
        Baseline flow for percent change (flow unit): the mean over the fitted samples
        of the model prediction with every task column set to zero.
    diagnostics : dict
        ``r2``, ``durbin_watson`` (before/after whitening), ``ljung_box_p``,
        ``acf_before``, ``acf_after`` (lags 0..n), ``acf_lags_s``, ``short_share``,
        ``converged``, ``n_iter``, ``n_used``, ``downweighted_fraction``;
        ``short_coupling`` (band couplings, τ, Q per short column) and
        ``block_spread`` (block amplitudes, τ per condition) when computed.
    components : tuple of VarianceComponent
        Variance the residuals cannot show, added to :attr:`cov`: the frequency
        dependence of the short-channel coupling (:mod:`fstats.fit.coupling`) and
        the block-to-block variation of the response amplitude
        (:mod:`fstats.fit.block_spread`).  Empty: nothing added.
    """

    channel: str
    separation_cm: float
    is_short: bool
    names: tuple[str, ...]
    kinds: tuple[str, ...]
    conditions: dict[str, tuple[str, ...]]
    estimate: ChannelEstimate
    baseline_flow: float
    diagnostics: dict = field(default_factory=dict)
    components: tuple[VarianceComponent, ...] = ()

    betas = property(lambda self: self.estimate.betas, doc="Coefficients, shape (k,).")
    dof = property(lambda self: self.estimate.dof, doc="Model residual degrees of freedom.")
    ar_coefs = property(lambda self: self.estimate.ar_coefs, doc="AR coefficients, shape (p,).")
    fitted = property(lambda self: self.estimate.fitted, doc="Fitted flow, shape (n_times,).")
    residuals = property(lambda self: self.estimate.residuals, doc="Residuals, (n_times,).")
    whitened_residuals = property(
        lambda self: self.estimate.whitened_residuals, doc="Whitened residuals, (n_times,)."
    )
    weights = property(lambda self: self.estimate.weights, doc="Robust weights, (n_times,).")

    @property
    def ar_order(self) -> int:
        """Order of the final AR noise model (0 for OLS)."""
        return int(self.estimate.ar_coefs.size)

    @property
    def cov(self) -> np.ndarray:
        """Coefficient covariance, shape (k, k): the estimation's plus the components."""
        if not self.components:
            return self.estimate.cov
        return self.estimate.cov + components_covariance(self.components, len(self.names))

    @property
    def se(self) -> np.ndarray:
        """Standard errors, shape (k,)."""
        return np.sqrt(np.diag(self.cov))

    def contrast_dof(self, weights: np.ndarray) -> float:
        """Degrees of freedom of a contrast row (Satterthwaite with the components)."""
        w = np.asarray(weights, dtype=float)
        main = self.estimate.contrast_dof(w)
        if not self.components:
            return main
        return combined_dof(w, float(w @ self.estimate.cov @ w), main, self.components)

    @property
    def t(self) -> np.ndarray:
        """t values of the regressors, shape (k,)."""
        return self.betas / self.se

    @property
    def p(self) -> np.ndarray:
        """Two-sided p-values of the regressors, shape (k,)."""
        return np.array([self.test(np.eye(len(self.names))[j]).p for j in range(len(self.names))])

    def test(self, weights: np.ndarray, kind: str = "t", *, alpha: float = 0.05) -> TermTest:
        """t test of a contrast row (shape (k,)) or F test of rows (shape (q, k))."""
        w = np.asarray(weights, dtype=float)
        if kind == "F":
            w = np.atleast_2d(w)
            dof = min(self.contrast_dof(row) for row in w)
            return f_test(self.betas, self.cov, w, dof)
        return t_test(self.betas, self.cov, w, self.contrast_dof(w), alpha=alpha)


@dataclass(frozen=True, eq=False)
class ChannelFailure:
    """A channel that could not be fitted, with a one-line reason."""

    channel: str
    separation_cm: float
    is_short: bool
    reason: str


@dataclass(frozen=True, eq=False)
class SubjectFit:
    """All channels of one recording, fitted with one :class:`SubjectGLM`.

    Parameters
    ----------
    model : SubjectGLM
        The settings used.
    recording_source, subject, session : str, str or None, str or None
        Where the recording came from.
    design : DesignMatrix
        The design that was fitted.
    flow_unit : str
        Unit of the flow (``"cm2/s"`` or ``"relative"``).
    channel_fits : dict of str to ChannelFit or ChannelFailure
        In recording channel order.
    block_averages : pandas.DataFrame
        Columns ``condition, channel, source ("model"|"epochs"), time_s, mean_pct,
        ci_low_pct, ci_high_pct`` (see :mod:`fstats.fit.block_average`).
    """

    model: SubjectGLM
    recording_source: str
    subject: str | None
    session: str | None
    design: DesignMatrix
    flow_unit: str
    channel_fits: dict[str, ChannelFit | ChannelFailure]
    block_averages: pd.DataFrame

    def table(self) -> pd.DataFrame:
        """Tidy results, one row per channel × regressor or contrast (CONTRACTS §5 columns)."""
        from fstats.fit.results import results_table

        return results_table(self)
