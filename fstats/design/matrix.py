"""The design matrix data object passed from the design stage to the fit stage."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["REGRESSOR_KINDS", "Contrast", "DesignMatrix"]

#: What a design-matrix column models.  ``task`` columns carry the effects of
#: interest; every other kind is nuisance.
REGRESSOR_KINDS: tuple[str, ...] = (
    "task",  # condition response (incl. derivatives, FIR bins, parametric modulators)
    "constant",  # intercept
    "drift",  # discrete cosine or polynomial drift terms
    "short",  # short-separation channel regressor (and lagged copies)
    "cardiac",  # RETROICOR cardiac-phase Fourier terms
    "aux",  # auxiliary signals (respiration belt, PPG, ...)
    "motion",  # motion regressors (accelerometer, spike indicators)
)


@dataclass(frozen=True, eq=False)
class Contrast:
    """A named linear contrast over design-matrix columns.

    Parameters
    ----------
    name : str
        Contrast name as declared in the design file.
    weights : ndarray, shape (n_rows, n_regressors)
        One row for a t contrast; several rows for an F test.
    kind : {"t", "F"}
        Test type.
    """

    name: str
    weights: np.ndarray
    kind: str = "t"


@dataclass(frozen=True, eq=False)
class DesignMatrix:
    """Regressors sampled on a recording's time base.

    Parameters
    ----------
    values : ndarray, shape (n_times, n_regressors)
        The design matrix.  Task columns are unitless (a long block plateaus at 1,
        times the event amplitude); nuisance columns are in their own units.
    names : tuple of str, length n_regressors
        Column names, unique (e.g. ``"subtract"``, ``"subtract_dt"``, ``"drift_03"``,
        ``"short:scalp"``, ``"cardiac_cos1"``).
    kinds : tuple of str, length n_regressors
        One of :data:`REGRESSOR_KINDS` per column.
    times_s : ndarray, shape (n_times,)
        Sample times in seconds (the recording's time base).
    conditions : dict of str to tuple of str
        For each task condition, the names of the columns that model it (one for a
        fixed response function, more with derivatives or an FIR basis).
    contrasts : tuple of Contrast
        Declared contrasts, with weights expanded to all columns.
    per_channel : dict of str to ndarray, shape (n_times, n_regressors)
        Channel-specific design matrices where the nuisance columns differ per
        channel; empty when every channel shares ``values``.
    fir_times_s : dict of str to ndarray
        For FIR-modelled conditions, the post-onset time (s) of each bin's start.
    info : dict
        Build details (response models, cardiac detection summary, diagnostics)
        for reports and provenance.
    """

    values: np.ndarray
    names: tuple[str, ...]
    kinds: tuple[str, ...]
    times_s: np.ndarray
    conditions: dict[str, tuple[str, ...]] = field(default_factory=dict)
    contrasts: tuple[Contrast, ...] = ()
    per_channel: dict[str, np.ndarray] = field(default_factory=dict)
    fir_times_s: dict[str, np.ndarray] = field(default_factory=dict)
    info: dict = field(default_factory=dict)

    @property
    def n_regressors(self) -> int:
        """Number of columns."""
        return len(self.names)

    def column(self, name: str) -> np.ndarray:
        """One column by name, shape (n_times,)."""
        return self.values[:, self.names.index(name)]

    def for_channel(self, channel: str) -> np.ndarray:
        """The design matrix used for one channel, shape (n_times, n_regressors)."""
        return self.per_channel.get(channel, self.values)

    def columns_of_kind(self, kind: str) -> list[int]:
        """Indices of the columns of one kind."""
        return [i for i, k in enumerate(self.kinds) if k == kind]
