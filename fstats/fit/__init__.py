"""Fit stage: subject-level GLMs of flow with serially correlated noise.

Methods: ordinary least squares (reference), AR(p) prewhitening with the order
chosen by BIC, and AR-IRLS (prewhitening plus Tukey-bisquare robust regression,
Barker, Aarabi & Huppert 2013; the default).  Standard errors come from a
frequency-domain sandwich on the prewhitened data with Satterthwaite degrees of
freedom (:mod:`fstats.fit.covariance`).
"""

from fstats.fit.autoregressive import ARModel, default_max_ar_order, fit_ar
from fstats.fit.block_average import BLOCK_AVERAGE_COLUMNS
from fstats.fit.estimation import METHODS, ChannelEstimate, estimate_channel
from fstats.fit.glm import COVARIANCES, ChannelFailure, ChannelFit, SubjectFit, SubjectGLM
from fstats.fit.results import RESULT_COLUMNS, read_subject_results, write_subject_results

__all__ = [
    "METHODS",
    "COVARIANCES",
    "RESULT_COLUMNS",
    "BLOCK_AVERAGE_COLUMNS",
    "SubjectGLM",
    "SubjectFit",
    "ChannelFit",
    "ChannelFailure",
    "ChannelEstimate",
    "ARModel",
    "estimate_channel",
    "fit_ar",
    "default_max_ar_order",
    "write_subject_results",
    "read_subject_results",
]
