"""Design: response functions, block/event and nuisance regressors, design matrices."""

from fstats.design.matrix import REGRESSOR_KINDS, Contrast, DesignMatrix

__all__ = ["REGRESSOR_KINDS", "Contrast", "DesignMatrix"]
