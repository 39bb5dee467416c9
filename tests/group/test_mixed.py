"""Mixed-model helpers: fstats.group.mixed."""

import numpy as np
import pandas as pd
from numpy.testing import assert_allclose

from fstats.group.mixed import fit_mixed, formula_variables, split_formula


def test_formula_variables_skip_functions_and_codings():
    """Source: common practice - only column names are looked up in participants.tsv."""
    assert formula_variables("effect ~ group + age") == ("group", "age")
    assert formula_variables("C(group, Treatment('younger')) * np.log(age) + sex") == (
        "group",
        "age",
        "sex",
    )
    assert formula_variables("effect ~ 1") == ()
    assert split_formula("group + age") == ("effect", "group + age")


def test_balanced_variance_components_equal_anova_moments():
    """Source: REFERENCE-CHECKS 4.3 - balanced random intercept (G=12 groups x m=8): REML
    gives sigma2 = MSW and tau2 = (MSB - MSW)/m (rtol 1e-3, optimiser-limited)."""
    rng = np.random.default_rng(21)
    groups, m = 12, 8
    u = rng.normal(0, 2.0, size=groups)
    y = np.repeat(u, m) + rng.normal(0, 1.5, size=groups * m) + 3.0
    data = pd.DataFrame({"effect": y, "participant_id": np.repeat(np.arange(groups), m)})
    means = data.groupby("participant_id")["effect"].mean().to_numpy()
    msb = m * np.var(means, ddof=1)
    msw = np.sum((y - np.repeat(means, m)) ** 2) / (groups * (m - 1))
    res = fit_mixed(data, "effect ~ 1")
    assert_allclose(res["residual_variance"], msw, rtol=1e-3)
    assert_allclose(res["tau2"], (msb - msw) / m, rtol=1e-3)
    intercept = res["coefficients"][0]
    assert_allclose(intercept["estimate"], y.mean(), rtol=1e-8)
    assert_allclose(intercept["se"], np.sqrt(msb / (groups * m)), rtol=1e-3)
