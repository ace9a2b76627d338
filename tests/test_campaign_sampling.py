"""Campaign spreads and statistics against scipy (a general-purpose reference library).

- Latin hypercube: the defining property (one point per stratum per dimension, McKay,
  Beckman and Conover 1979) and the centred L2 discrepancy against scipy.stats.qmc.LatinHypercube.
- Inverse CDFs against scipy.stats ppf: uniform, loguniform, truncated normal, triangular.
- Ranks and Spearman correlation against scipy.stats.rankdata / spearmanr.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from scipy.stats import qmc

from host.campaign.report import pass_rate_split, rankdata, spearman
from host.campaign.sampling import Distribution, grid, latin_hypercube


@pytest.mark.parametrize("n,d", [(1, 1), (7, 3), (200, 4)])
def test_one_point_per_stratum_in_every_dimension(n, d):
    u = latin_hypercube(n, d, seed=11)
    assert u.shape == (n, d)
    assert np.all((u >= 0) & (u < 1))
    for j in range(d):
        assert sorted(np.floor(u[:, j] * n).astype(int)) == list(range(n))
    # scipy's LHS has the same property: the reference for what "Latin hypercube" means
    ref = qmc.LatinHypercube(d=d, seed=11).random(n)
    for j in range(d):
        assert sorted(np.floor(ref[:, j] * n).astype(int)) == list(range(n))


def test_same_seed_same_points_other_seed_other_points():
    a = latin_hypercube(50, 3, seed=5)
    assert np.array_equal(a, latin_hypercube(50, 3, seed=5))
    assert not np.allclose(a, latin_hypercube(50, 3, seed=6))


def test_discrepancy_matches_scipy_latin_hypercube():
    # centred L2 discrepancy (Hickernell 1998, scipy.stats.qmc.discrepancy): space filling of
    # ours and scipy's over 30 seeds agree within 10 %; plain random points are clearly worse
    n, d = 60, 4
    ours = np.mean([qmc.discrepancy(latin_hypercube(n, d, seed=s)) for s in range(30)])
    ref = np.mean([qmc.discrepancy(qmc.LatinHypercube(d=d, seed=s).random(n)) for s in range(30)])
    rnd = np.mean([qmc.discrepancy(np.random.default_rng(s).random((n, d))) for s in range(30)])
    assert abs(ours - ref) / ref < 0.10
    assert ours < 0.8 * rnd


U = np.linspace(0.001, 0.999, 37)


def test_uniform_and_loguniform_quantiles_match_scipy():
    d = Distribution("uniform", low=0.8, high=1.2)
    assert np.allclose(d.quantile(U), stats.uniform(loc=0.8, scale=0.4).ppf(U), rtol=1e-12)
    d = Distribution("loguniform", low=1e-5, high=1e-3)
    assert np.allclose(d.quantile(U), stats.loguniform(1e-5, 1e-3).ppf(U), rtol=1e-10)


@pytest.mark.parametrize("low,high", [(-math.inf, math.inf), (0.015, math.inf), (0.015, 0.019)])
def test_truncated_normal_quantiles_match_scipy(low, high):
    mean, sd = 0.0175, 0.001
    d = Distribution("normal", low=low, high=high, mean=mean, sd=sd)
    ref = stats.truncnorm((low - mean) / sd, (high - mean) / sd, loc=mean, scale=sd).ppf(U)
    assert np.allclose(d.quantile(U), ref, rtol=1e-9, atol=1e-12)


def test_triangular_quantiles_match_scipy():
    d = Distribution("triangular", low=2.0, mode=3.0, high=6.0)
    ref = stats.triang(c=(3.0 - 2.0) / 4.0, loc=2.0, scale=4.0).ppf(U)
    assert np.allclose(d.quantile(U), ref, rtol=1e-12)


def test_levels_are_balanced_under_latin_hypercube():
    d = Distribution("levels", levels=(1.0, 2.0, 5.0))
    u = latin_hypercube(30, 1, seed=2)[:, 0]
    vals, counts = np.unique(d.quantile(u), return_counts=True)
    assert list(vals) == [1.0, 2.0, 5.0] and list(counts) == [10, 10, 10]


def test_grid_is_the_full_factorial():
    g = grid([[1.0, 2.0], [10.0, 20.0, 30.0]])
    a, b = np.meshgrid([1.0, 2.0], [10.0, 20.0, 30.0], indexing="ij")
    assert np.array_equal(g, np.column_stack([a.ravel(), b.ravel()]))


def test_ranks_and_spearman_match_scipy():
    rng = np.random.default_rng(4)
    x = rng.integers(0, 8, 40).astype(float)  # many ties
    y = x**2 + rng.normal(0, 5, 40)
    assert np.array_equal(rankdata(x), stats.rankdata(x))
    assert spearman(x, y) == pytest.approx(stats.spearmanr(x, y).statistic, abs=1e-12)
    assert math.isnan(spearman([1, 1, 1, 1], [1, 2, 3, 4]))


def test_pass_rate_split_by_hand():
    x = [1, 2, 3, 4, 5, 6]
    passed = [True, True, True, False, False, True]
    # median 3.5: above {4,5,6} pass 1/3, at or below {1,2,3} pass 3/3
    assert pass_rate_split(x, passed) == pytest.approx(1 / 3 - 1)
