"""Multiple-comparison control: fstats.group.multiple."""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from statsmodels.stats.multitest import multipletests

from fstats.group.multiple import adjust_pvalues, bonferroni, fdr_bh, holm

BH_1995 = np.array(
    [
        0.0001,
        0.0004,
        0.0019,
        0.0095,
        0.0201,
        0.0278,
        0.0298,
        0.0344,
        0.0459,
        0.3240,
        0.4262,
        0.5719,
        0.6528,
        0.7590,
        1.000,
    ]
)


def test_bh_worked_example_rejects_four():
    """Source: Benjamini & Hochberg (1995) JRSS-B 57:289-300, worked example (Neuhaus et al.
    data), via REFERENCE-CHECKS 3.1: at q = 0.05 exactly the 4 smallest are rejected."""
    adjusted = fdr_bh(BH_1995)
    assert np.sum(adjusted <= 0.05) == 4
    assert np.all(adjusted[:4] <= 0.05)
    assert_allclose(
        adjusted,
        [
            0.0015,
            0.003,
            0.0095,
            0.035625,
            0.0603,
            0.063857,
            0.063857,
            0.0645,
            0.0765,
            0.486,
            0.581182,
            0.714875,
            0.753231,
            0.813214,
            1.0,
        ],
        atol=1e-6,
    )


def test_holm_worked_example_rejects_three():
    """Source: Holm (1979) Scand J Statist 6:65-70 step-down rule; REFERENCE-CHECKS 3.2 values."""
    adjusted = holm(BH_1995)
    assert np.sum(adjusted <= 0.05) == 3
    assert_allclose(
        adjusted[:9],
        [0.0015, 0.0056, 0.0247, 0.114, 0.2211, 0.278, 0.278, 0.278, 0.3213],
        atol=1e-9,
    )
    assert_allclose(adjusted[9:], 1.0)


def test_bonferroni_worked_example_rejects_three():
    """Source: REFERENCE-CHECKS 3.1 (Bonferroni rejects 3 of the BH 1995 p-values)."""
    assert np.sum(bonferroni(BH_1995) <= 0.05) == 3


@pytest.mark.parametrize(
    ("ours", "theirs"), [("fdr", "fdr_bh"), ("holm", "holm"), ("bonferroni", "bonferroni")]
)
def test_matches_statsmodels_multipletests_on_random_p(ours, theirs):
    """Source: statsmodels.stats.multitest.multipletests (independent implementation)."""
    rng = np.random.default_rng(3)
    p = np.concatenate([rng.uniform(size=40), rng.uniform(0, 0.01, size=10)])
    rng.shuffle(p)
    assert_allclose(adjust_pvalues(p, ours), multipletests(p, 0.05, theirs)[1], rtol=1e-12)


@pytest.mark.parametrize("method", ["fdr", "holm", "bonferroni"])
def test_shuffled_input_gives_permuted_output(method):
    """Source: REFERENCE-CHECKS 3.2 invariance - results follow the input order."""
    rng = np.random.default_rng(5)
    order = rng.permutation(BH_1995.size)
    assert_allclose(adjust_pvalues(BH_1995[order], method), adjust_pvalues(BH_1995, method)[order])


def test_nan_is_left_out_of_the_family():
    """Source: common practice - an untestable row must not count towards m."""
    p = np.array([0.01, np.nan, 0.04])
    out = bonferroni(p)
    assert np.isnan(out[1])
    assert_allclose(out[[0, 2]], [0.02, 0.08])
