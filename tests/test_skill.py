"""Log10 skill statistics against numpy/scipy and hand-worked examples."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from euphotic import skill


def test_hand_worked_example():
    # measured 10, 100, 1000; model 20, 100, 500 -> x = 1, 2, 3; y = 1.30103, 2, 2.69897
    # (worked by hand): d = +0.30103, 0, -0.30103 -> bias 0; rmsd = sqrt(2/3) * 0.30103
    s = skill.log_skill([10, 100, 1000], [20, 100, 500])
    assert s.n == 3 and s.n_excluded == 0
    assert s.bias == pytest.approx(0.0, abs=1e-12)
    assert s.rmsd == pytest.approx(np.sqrt(2 / 3) * np.log10(2), rel=1e-12)
    assert s.urmsd == pytest.approx(s.rmsd, rel=1e-12)  # no bias: unbiased = total
    assert s.within_2 == 1.0 and s.within_3 == 1.0
    # RMA slope = sd(y)/sd(x) = (1 - log10 2) / 1 = 0.69897 (hand-worked); intercept:
    # mean(y) - slope * mean(x) = 2 - 0.69897 * 2 = 0.60206
    assert s.slope == pytest.approx(1 - np.log10(2), rel=1e-12)
    assert s.intercept == pytest.approx(2 - 2 * (1 - np.log10(2)), rel=1e-12)


def test_against_numpy_and_scipy():
    rng = np.random.default_rng(3)
    meas = 10 ** rng.normal(2.5, 0.3, 40)
    model = meas * 10 ** rng.normal(0.1, 0.2, 40)
    s = skill.log_skill(meas, model)
    x, y = np.log10(meas), np.log10(model)
    assert s.bias == pytest.approx(np.mean(y - x), rel=1e-12)
    assert s.r == pytest.approx(stats.pearsonr(x, y).statistic, rel=1e-10)  # scipy 1.17
    assert s.sd_model == pytest.approx(np.std(y), rel=1e-12)
    assert s.urmsd == pytest.approx(np.std((y - y.mean()) - (x - x.mean())), rel=1e-12)
    assert s.rmsd ** 2 == pytest.approx(s.bias ** 2 + s.urmsd ** 2, rel=1e-12)
    # RMA slope = sign(r) sd_y/sd_x = OLS slope / r (Sokal & Rohlf 1995, 14.13)
    ols = stats.linregress(x, y)
    assert s.slope == pytest.approx(ols.slope / ols.rvalue, rel=1e-10)
    assert s.within_2 == np.mean(np.abs(y - x) <= np.log10(2))


def test_rma_worked_example_negative_correlation():
    # x = 1..4, y = 8, 6, 4, 2: perfectly negative, slope -2, intercept 10 (hand-worked)
    assert skill.rma([1, 2, 3, 4], [8, 6, 4, 2]) == pytest.approx((-2.0, 10.0))
    # symmetric: the RMA of x on y is the inverse line
    assert skill.rma([8, 6, 4, 2], [1, 2, 3, 4])[0] == pytest.approx(-0.5)


def test_zero_and_negative_values_are_excluded_and_counted():
    s = skill.log_skill([10, 0, 100, 50, np.nan], [10, 5, 100, -1, 3])
    assert s.n == 2 and s.n_excluded == 3
    assert skill.log_skill([], []).n == 0


def test_bootstrap_reproducible():
    rng = np.random.default_rng(1)
    meas = 10 ** rng.normal(2.5, 0.3, 30)
    model = meas * 10 ** rng.normal(0.1, 0.2, 30)
    a = skill.bootstrap(meas, model, seed=7)
    assert a == skill.bootstrap(meas, model, seed=7)
    assert a != skill.bootstrap(meas, model, seed=8)
    s = skill.log_skill(meas, model)
    assert a["bias"][0] < s.bias < a["bias"][1]
    assert all(np.isnan(v).all() for v in skill.bootstrap([1, 2], [1, 2]).values())


def test_target_point_signs():
    # Jolliff et al. (2009): x = sign(sd_model - sd_measured) * urmsd / sd_measured
    s = skill.log_skill([10, 100, 1000], [20, 100, 500])
    x, y = skill.target_point(s)
    assert x < 0 and y == pytest.approx(0.0, abs=1e-12)
    assert x == pytest.approx(-s.urmsd / s.sd_measured)
