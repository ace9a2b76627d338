"""Parameter spreads: Latin hypercube samples, full grids, and the inverse CDFs that map them.

Owns: `latin_hypercube(n, d, seed)` (points in the unit cube, one per stratum in every
dimension), the distributions a campaign key may follow (uniform, loguniform, normal with
optional truncation, triangular, discrete levels) as inverse cumulative distribution
functions, and `grid(levels)` (the full factorial). Pure numpy and the standard library
(statistics.NormalDist for the normal quantile); imports nothing of the project.

Why hand-written and not scipy.stats.qmc.LatinHypercube: scipy is only a test dependency,
and the method is five lines; tests/test_campaign_sampling.py checks these samples and
quantiles against scipy's LatinHypercube, discrepancy and distribution ppf functions.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass
from statistics import NormalDist

import numpy as np

DISTRIBUTIONS = ("uniform", "loguniform", "normal", "triangular", "levels")


def latin_hypercube(n: int, d: int, seed: int) -> np.ndarray:
    """n points in [0, 1)^d, exactly one in each of the n equal strata of every dimension.

    McKay, Beckman and Conover (1979): in each dimension the strata [k/n, (k+1)/n) are
    visited in an independent random order and each point is placed uniformly within its
    stratum. The same seed gives the same points on any machine (numpy's PCG64 generator).
    """
    if n < 1 or d < 1:
        raise ValueError(f"latin_hypercube: need n >= 1 and d >= 1, got n={n}, d={d}")
    rng = np.random.Generator(np.random.PCG64(seed))
    jitter = rng.random((n, d))
    strata = np.stack([rng.permutation(n) for _ in range(d)], axis=1)
    return (strata + jitter) / n


def grid(level_lists: list[list[float]]) -> np.ndarray:
    """Full factorial of the level lists, the last key varying fastest: shape (prod(len), d)."""
    return np.array(list(itertools.product(*level_lists)), dtype=float).reshape(-1, len(level_lists))


@dataclass(frozen=True)
class Distribution:
    """One key's spread. `quantile(u)` maps u in [0, 1) to a value (the inverse CDF)."""

    kind: str
    low: float = math.nan
    high: float = math.nan
    mean: float = math.nan
    sd: float = math.nan
    mode: float = math.nan
    levels: tuple[float, ...] = ()

    def quantile(self, u: np.ndarray) -> np.ndarray:
        u = np.asarray(u, dtype=float)
        if self.kind == "uniform":
            return self.low + u * (self.high - self.low)
        if self.kind == "loguniform":
            a, b = math.log(self.low), math.log(self.high)
            return np.exp(a + u * (b - a))
        if self.kind == "normal":
            nd = NormalDist(self.mean, self.sd)
            # truncation by mapping u into [F(low), F(high)]: exact truncated-normal quantiles
            f_lo = nd.cdf(self.low) if math.isfinite(self.low) else 0.0
            f_hi = nd.cdf(self.high) if math.isfinite(self.high) else 1.0
            p = f_lo + u * (f_hi - f_lo)
            # inv_cdf needs 0 < p < 1; the open interval loses nothing at float resolution
            p = np.clip(p, 1e-15, 1.0 - 1e-15)
            return np.array([nd.inv_cdf(float(q)) for q in p.ravel()]).reshape(p.shape)
        if self.kind == "triangular":
            a, c, b = self.low, self.mode, self.high
            fc = (c - a) / (b - a)
            left = a + np.sqrt(u * (b - a) * (c - a))
            right = b - np.sqrt((1.0 - u) * (b - a) * (b - c))
            return np.where(u < fc, left, right)
        if self.kind == "levels":
            k = len(self.levels)
            idx = np.minimum((u * k).astype(int), k - 1)
            return np.asarray(self.levels, dtype=float)[idx]
        raise AssertionError(self.kind)

    def grid_levels(self, points: int | None) -> list[float]:
        """Levels of this key in a grid: its own levels, or `points` evenly spaced over [low, high]."""
        if self.kind == "levels":
            return list(self.levels)
        if self.kind == "uniform" and points:
            return [float(v) for v in np.linspace(self.low, self.high, points)]
        if self.kind == "loguniform" and points:
            return [float(v) for v in np.geomspace(self.low, self.high, points)]
        raise ValueError("grid needs levels, or uniform/loguniform with points")
