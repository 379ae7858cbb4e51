"""The heavy-tail test's error rates, by seeded simulation of known distributions (numpy's generators).

A finite variance (normal, uniform, chi-square with 3 degrees of freedom, lognormal of sigma up to 1)
must keep its sigma in all but ~0.5 % of runs at every number of draws; no finite variance (a Cauchy,
a ratio of normals whose denominator lies near 0, 1/sin^3 i with cos i uniform) must lose it with
high probability from 1000 draws on.  Bounds are set so that a test fails by chance with
probability well below 1e-3 (binomial tails, scipy.stats.binom), and the draws are seeded anyway.
"""

import numpy as np
import pytest
from scipy import stats

from calcservice.engine import MIN_DRAWS, heavy_tailed

FINITE = {
    "normal": lambda rng, shape: rng.standard_normal(shape),
    "uniform": lambda rng, shape: rng.uniform(size=shape),
    "chi-square 3": lambda rng, shape: rng.chisquare(3, shape),
    "lognormal 0.5": lambda rng, shape: rng.lognormal(0.0, 0.5, shape),
    "lognormal 1": lambda rng, shape: rng.lognormal(0.0, 1.0, shape),
}
INFINITE = {
    # scipy.stats: the Cauchy is Student's t with 1 degree of freedom, no mean and no variance
    "cauchy": lambda rng, shape: rng.standard_cauchy(shape),
    # N(1, 0.1) / N(0.2, 0.1): the denominator is 2 sigma from 0, so the ratio's tails are the Cauchy's
    # (Marsaglia 1965, J. Am. Stat. Assoc. 60, 193; from memory)
    "ratio of normals": lambda rng, shape: rng.normal(1.0, 0.1, shape) / rng.normal(0.2, 0.1, shape),
    "1/sin^3 i, isotropic": lambda rng, shape: (1.0 - rng.uniform(size=shape) ** 2) ** -1.5,
}


def flagged_fraction(make, draws, trials, seed):
    rng = np.random.default_rng(seed)
    d = make(rng, (trials, draws))
    return heavy_tailed(d, np.ones(d.shape, dtype=bool), np.median(d, axis=1)).mean()


def upper_bound(rate, trials):
    """The count a true rate would exceed with probability 1e-4: at a 0.5 % rate a run flagging more
    is evidence of a higher one."""
    return stats.binom.ppf(1 - 1e-4, trials, rate) / trials


# (draws, trials): about 2e6 draws per distribution
COUNTS = [(100, 2000), (200, 2000), (300, 2000), (500, 1000), (1000, 600), (3000, 100), (10_000, 30),
          (100_000, 3), (1_000_000, 1)]


@pytest.mark.parametrize("name", list(FINITE))
def test_a_finite_variance_keeps_its_sigma_at_every_count(name):
    for k, (draws, trials) in enumerate(COUNTS):
        rate = flagged_fraction(FINITE[name], draws, trials, seed=100 + k)
        # measured over 20,000 trials per count up to 1000 draws: lognormal of sigma 1 at most 0.24 %
        # (at 200 draws), the others never; bounded here by the rate of 0.5 % the test promises
        assert rate <= upper_bound(0.005, trials), (name, draws, rate)


def test_the_lognormal_of_sigma_1_is_the_hard_case_and_passes_at_its_worst():
    # the counts where it comes nearest the threshold (200 to 500 draws), with more trials
    for draws in (200, 300):
        rate = flagged_fraction(FINITE["lognormal 1"], draws, 5000, seed=draws)
        assert rate <= upper_bound(0.005, 5000), (draws, rate)


@pytest.mark.parametrize("name", list(INFINITE))
def test_no_finite_variance_is_caught_from_1000_draws(name):
    # measured: a Cauchy 96.5 % at 1000 draws, 99.4 % at 2000, all at 5000; a ratio of normals 98 % at
    # 1000; isotropic masses all from 700
    for draws, trials, least in [(1000, 500, 0.90), (3000, 100, 0.95), (10_000, 30, 0.96)]:
        rate = flagged_fraction(INFINITE[name], draws, trials, seed=draws)
        assert rate >= least, (name, draws, rate)


def test_isotropic_masses_are_mostly_caught_from_the_fewest_draws():
    # 83 % measured at MIN_DRAWS = 100 (20,000 trials), 95 % at 150
    assert flagged_fraction(INFINITE["1/sin^3 i, isotropic"], MIN_DRAWS, 2000, seed=3) >= 0.75


def test_the_threshold_falls_to_one_half_with_many_draws():
    # the test's limit: the top sqrt(s) of the squared deviations of a Pareto tail of index 2 (the edge
    # of a finite variance) hold ln sqrt(s) / ln s = 1/2 of their sum; so 10^6 Pareto draws of index
    # 1.5 (no variance) are flagged and of index 3 (a variance) are not (numpy's pareto is Lomax:
    # shifted, same tail)
    rng = np.random.default_rng(5)
    d = np.vstack([rng.pareto(1.5, (2, 1_000_000)), rng.pareto(3.0, (2, 1_000_000))])
    assert heavy_tailed(d, np.ones(d.shape, dtype=bool), np.median(d, axis=1)).tolist() == [True] * 2 + [False] * 2
