"""The harness's truth for the performance profile's band, against scipy computed another way.

``Scenario.truth_runs_above`` reads each noise's exceedance from scipy.stats' closed forms; here
the same probabilities come from scipy.integrate.quad over the noise densities written out, and
from the simulation itself (many seeds through ``simulate_scores``).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from fewshot.stats.harness import PROFILE_TAUS
from fewshot.stats.simulate import default_scenario, exceedance, simulate_scores

LOG_MEAN = np.exp(0.125)  # mean of exp(0.5 Z), Z standard normal
LOG_SD = np.sqrt((np.exp(0.25) - 1) * np.exp(0.25))
MIX_SD = np.sqrt(1 + 0.21 * 16)  # 0.7 N(0, 1) + 0.3 N(4, 1): variance 1 + 0.7 * 0.3 * 4^2


def _density(noise: str, e: float) -> float:
    """Density of the standardised noise at e, written out (change of variables)."""
    if noise == "lognormal":
        y = LOG_MEAN + LOG_SD * e
        if y <= 0:
            return 0.0
        return LOG_SD * np.exp(-(np.log(y) ** 2) / (2 * 0.25)) / (y * 0.5 * np.sqrt(2 * np.pi))
    y = 1.2 + MIX_SD * e
    return MIX_SD * (0.7 * stats.norm.pdf(y) + 0.3 * stats.norm.pdf(y - 4))


@pytest.mark.parametrize("noise", ["lognormal", "two-mode"])
@pytest.mark.parametrize("x", [-3.0, -1.5, -0.4, 0.0, 0.7, 2.0, 4.5])
def test_exceedance_equals_the_integrated_density(noise, x):
    # split at the lognormal's lower edge and at the two modes, where the density bends
    edges = sorted({x, -LOG_MEAN / LOG_SD, -1.2 / MIX_SD, (4 - 1.2) / MIX_SD, 40.0})
    pieces = [e for e in edges if e >= x]
    tail = sum(
        integrate.quad(lambda e: _density(noise, e), a, b, epsabs=1e-13)[0]
        for a, b in zip(pieces, pieces[1:], strict=False)
    )
    assert float(exceedance(noise, x)) == pytest.approx(tail, abs=1e-9)


def test_normal_exceedance_and_the_standardised_moments():
    assert float(exceedance("normal", 1.0)) == pytest.approx(stats.norm.sf(1.0), abs=1e-15)
    for noise in ("lognormal", "two-mode"):  # mean 0, variance 1 by quad over the density
        mean = integrate.quad(lambda e, d=noise: e * _density(d, e), -40, 40, points=[0.0])[0]
        var = integrate.quad(lambda e, d=noise: e * e * _density(d, e), -40, 40, points=[0.0])[0]
        assert mean == pytest.approx(0.0, abs=1e-8) and var == pytest.approx(1.0, abs=1e-7)


def test_truth_is_the_mean_over_tasks_of_each_tasks_exceedance():
    sc = default_scenario()
    for noise in ("normal", "lognormal", "two-mode"):
        for arm in sc.arms:
            mus = [sc.mean(arm, t, [100])[0] for t in sc.tasks]
            want = np.mean([float(exceedance(noise, (0.8 - m) / sc.sigma)) for m in mus])
            assert sc.truth_runs_above(arm, 100, 0.8, noise) == pytest.approx(want, abs=1e-15)
    # lognormal noise has a floor (exp(0.5 Z) > 0): far enough above τ every run exceeds it
    assert sc.truth_runs_above("quick", 100, 0.6, "lognormal") == 1.0


@pytest.mark.parametrize("noise", ["normal", "lognormal", "two-mode"])
def test_truth_matches_the_simulated_runs(noise):
    sc = default_scenario()
    scores = simulate_scores(sc, 4000, noise, np.random.default_rng(21))
    largest = scores[scores["size"] == 100]
    for arm in ("scratch", "stale"):
        runs = largest[largest["arm"] == arm]["normalised"].to_numpy()
        for tau in PROFILE_TAUS:
            truth = sc.truth_runs_above(arm, 100, tau, noise)
            # 12,000 runs (3 tasks x 4000 seeds, independent at one size): 4.5 binomial SEs
            se = np.sqrt(max(truth * (1 - truth), 1e-4) / len(runs))
            assert np.mean(runs > tau) == pytest.approx(truth, abs=4.5 * se), (arm, tau)
