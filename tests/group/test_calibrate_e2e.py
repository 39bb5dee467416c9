"""Smoke tests of the end-to-end mode of benchmarks/calibrate_group.py (not a calibration).

The calibration itself (300 + 300 cohorts) is a benchmark run, recorded in the group
notes; these tests only check that the path simulate -> files -> inputs -> fit -> group
runs, gives usable p-values, and that its numbers do not depend on the worker count or
on the file format the cohort went through.
"""

import math
from pathlib import Path

import numpy as np
import pytest
from statsmodels.stats.proportion import proportion_confint

BENCHMARKS = Path(__file__).resolve().parents[2] / "benchmarks"


@pytest.fixture
def calibrate_group(monkeypatch):
    # on sys.path (not loaded from a file spec) so that spawned workers can import it too
    monkeypatch.syspath_prepend(str(BENCHMARKS))
    import calibrate_group

    return calibrate_group


def _tiny(module, **kwargs):
    """One null and one alternative cohort of 2 x 3 subjects, 170 s at 10 Hz (2 task cycles)."""
    return module.end_to_end(1, 3, 11, duration_s=170.0, sfreq_hz=10.0, progress=False, **kwargs)


def test_end_to_end_smoke_p_values_in_unit_interval(calibrate_group):
    """Source: common practice - smoke test, not a calibration: two tiny cohorts (one null,
    one with the simulator's -5 point difference) go through the whole pipeline and every
    two-sample test returns a p-value in [0, 1], with finite positive subject SEs."""
    found = _tiny(calibrate_group, fmt="snirf")
    cohorts = found["cohorts"]
    assert [c["group_effect_pct"] for c in cohorts] == [0.0, -5.0]
    for c in cohorts:
        for label in calibrate_group.E2E_MODELS:
            assert 0.0 <= c[f"p_{label}"] <= 1.0
        assert len(c["se_pct"]) == 6
        assert all(math.isfinite(v) and v > 0 for v in c["se_pct"])
    assert found["summary"]["null"]["welch"]["rejections"].endswith("/1")
    assert found["settings"]["fit_options"]["block_averages"] is False


def test_end_to_end_independent_of_workers_and_file_format(calibrate_group):
    """Source: common practice - seeds derive from (seed, condition, index) only, and the
    flow-table and SNIRF writers both keep full float64 precision, so one worker with flow
    tables and two spawned workers with SNIRF files give the same p-values."""
    serial_tsv = _tiny(calibrate_group, fmt="tsv", workers=1)["cohorts"]
    parallel_snirf = _tiny(calibrate_group, fmt="snirf", workers=2)["cohorts"]
    for a, b in zip(serial_tsv, parallel_snirf, strict=True):
        assert a["seed"] == b["seed"]
        for label in calibrate_group.E2E_MODELS:
            assert a[f"p_{label}"] == pytest.approx(b[f"p_{label}"], rel=1e-9, abs=1e-12)


@pytest.mark.parametrize("k, n", [(0, 10), (15, 300), (150, 300), (300, 300)])
def test_wilson_interval_matches_statsmodels(calibrate_group, k, n):
    """Source: statsmodels.stats.proportion.proportion_confint(method="wilson"), the Wilson
    (1927) score interval used for the reported rejection rates."""
    lo, hi = proportion_confint(k, n, alpha=0.05, method="wilson")
    np.testing.assert_allclose(calibrate_group.wilson(k, n), (lo, hi), atol=1e-6)
