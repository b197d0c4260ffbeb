"""Synthetic studies with known truth, for measuring the coverage of every printed interval.

A scenario fixes true mean curves (normalised scores: floor 0, expert 1) per arm and task,
a ladder, a seed-noise distribution and its dependence; :func:`simulate_scores` draws one
study in the shape :func:`fewshot.stats.run_scores` + :func:`fewshot.stats.normalise`
return, so it runs through the same functions as ``fewshot curves`` and ``fewshot compare``.
:func:`Scenario.truth_*` give the true value of each printed quantity (defined in the
README, "What the intervals cover"). Noise keeps its marginal distribution exactly
(a Gaussian copula): a run's score is ``mu + sigma * e`` with ``e`` standardised normal,
lognormal(0, 0.5) or a 0.7 N(0, 1) + 0.3 N(4, 1) two-mode mixture; the underlying normals
of one seed are correlated across sizes (nested subsets) and across arms (shared subsets).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import special, stats

__all__ = ["NOISES", "Noise", "Scenario", "default_scenario", "exceedance", "simulate_scores"]


@dataclass(frozen=True)
class Noise:
    """A standardised seed-noise distribution (mean 0, variance 1) on a grid, with its quantiles."""

    name: str
    grid: np.ndarray
    cdf: np.ndarray
    pdf: np.ndarray

    def from_normal(self, z: np.ndarray) -> np.ndarray:
        """Map standard normal draws to this distribution (same rank): F^-1(Phi(z))."""
        if self.name == "normal":
            return z
        return np.interp(special.ndtr(z), self.cdf, self.grid)


# lognormal(0, 0.5) standardised: mean exp(1/8), variance (e^(1/4) - 1) e^(1/4)
_LOG_MEAN, _LOG_SD = float(np.exp(0.125)), float(np.sqrt((np.exp(0.25) - 1) * np.exp(0.25)))
_MIX_MEAN, _MIX_SD = 1.2, float(np.sqrt(4.36))  # 0.7 N(0, 1) + 0.3 N(4, 1)


def _make_noise(name: str) -> Noise:
    x = np.linspace(-12, 12, 48_001)
    if name == "normal":
        pdf = np.exp(-(x**2) / 2) / np.sqrt(2 * np.pi)
    elif name == "lognormal":  # exp(0.5 Z), standardised
        m, v = _LOG_MEAN, _LOG_SD**2
        y = m + np.sqrt(v) * x
        with np.errstate(divide="ignore", invalid="ignore"):
            dens = np.where(
                y > 0,
                np.exp(-(np.log(np.where(y > 0, y, 1)) ** 2) / 0.5)
                / (y * 0.5 * np.sqrt(2 * np.pi)),
                0,
            )
        pdf = dens * np.sqrt(v)
    elif name == "two-mode":  # 0.7 N(0,1) + 0.3 N(4,1): mean 1.2, variance 1 + 0.21 * 16
        m, v = _MIX_MEAN, _MIX_SD**2
        y = m + np.sqrt(v) * x
        phi = lambda u: np.exp(-(u**2) / 2) / np.sqrt(2 * np.pi)  # noqa: E731
        pdf = (0.7 * phi(y) + 0.3 * phi(y - 4)) * np.sqrt(v)
    else:
        raise ValueError(f"unknown noise {name!r}")
    cdf = np.concatenate([[0.0], np.cumsum((pdf[1:] + pdf[:-1]) / 2 * np.diff(x))])
    cdf /= cdf[-1]
    return Noise(name, x, cdf, pdf / np.trapezoid(pdf, x))


NOISES = ("normal", "lognormal", "two-mode")


def exceedance(name: str, x: np.ndarray | float) -> np.ndarray:
    """P(e > x) for the standardised noise ``name``, exactly from scipy.stats (no grid)."""
    x = np.asarray(x, dtype=float)
    if name == "normal":
        return np.asarray(stats.norm.sf(x))
    if name == "lognormal":  # e > x  <=>  exp(0.5 Z) > mean + sd x  (always, when that is <= 0)
        return np.asarray(stats.lognorm.sf(_LOG_MEAN + _LOG_SD * x, s=0.5))
    if name == "two-mode":
        y = _MIX_MEAN + _MIX_SD * x
        return np.asarray(0.7 * stats.norm.sf(y) + 0.3 * stats.norm.sf(y, loc=4.0))
    raise ValueError(f"unknown noise {name!r}")


def _curve(shape: tuple[float, float, float], n: np.ndarray, f: float) -> np.ndarray:
    base, gain, scale = shape
    return base + gain * (1 - np.exp(-np.asarray(n, dtype=float) / (scale * f)))


@dataclass(frozen=True)
class Scenario:
    """True curves, ladder and noise of a synthetic study.

    Attributes
    ----------
    arms : dict
        arm -> (base, gain, scale): mean normalised score ``base + gain (1 - exp(-n / (scale f)))``
        at size n, with f the task's factor.
    zero_shot : tuple of str
        Arms that also have size 0.
    tasks : dict
        task -> (group, factor f).
    sizes : tuple of int
        Ladder sizes >= 1 (size 0 is added for zero-shot arms).
    sigma : float
        Standard deviation of a run's normalised score around its mean.
    rho_sizes, rho_arms : float
        Correlation of a seed's underlying normals across sizes and across arms.
    baseline : str
    threshold : float
    """

    arms: dict[str, tuple[float, float, float]]
    zero_shot: tuple[str, ...]
    tasks: dict[str, tuple[str, float]]
    sizes: tuple[int, ...] = (1, 3, 10, 30, 100)
    sigma: float = 0.1
    rho_sizes: float = 0.6
    rho_arms: float = 0.3
    baseline: str = "scratch"
    threshold: float = 0.8
    _noise: dict[str, Noise] = field(default_factory=dict, compare=False, repr=False)
    _cache: dict[tuple[object, ...], object] = field(
        default_factory=dict, compare=False, repr=False
    )

    def noise(self, name: str) -> Noise:
        if name not in self._noise:
            self._noise[name] = _make_noise(name)
        return self._noise[name]

    def arm_sizes(self, arm: str) -> np.ndarray:
        return np.array(([0] if arm in self.zero_shot else []) + list(self.sizes))

    def mean(self, arm: str, task: str, sizes: np.ndarray | list[int] | None = None) -> np.ndarray:
        """True mean normalised score of ``arm`` on ``task`` at ``sizes`` (default: its ladder)."""
        n = self.arm_sizes(arm) if sizes is None else np.asarray(sizes)
        return _curve(self.arms[arm], n, self.tasks[task][1])

    # -- true values of printed quantities -------------------------------------------------
    def truth_poi(self, arm: str, task: str, size: int, noise: str) -> float:
        """P(X > Y), X a run of ``arm`` and Y an independent run of the baseline at (task, size)."""
        key = ("poi", arm, task, size, noise)
        if key not in self._cache:
            self._cache[key] = self._poi(arm, task, size, noise)
        return float(self._cache[key])  # type: ignore[arg-type]

    def _poi(self, arm: str, task: str, size: int, noise: str) -> float:
        nz = self.noise(noise)
        delta = float(self.mean(arm, task, [size])[0] - self.mean(self.baseline, task, [size])[0])
        # P(e1 - e2 > -delta / sigma) = integral of f(y) * (1 - F(y - delta / sigma)) dy
        shifted = np.interp(nz.grid - delta / self.sigma, nz.grid, nz.cdf, left=0.0, right=1.0)
        return float(np.trapezoid(nz.pdf * (1 - shifted), nz.grid))

    def truth_pooled(self, arm: str, size: int, noise: str, tasks: list[str]) -> dict[str, float]:
        """Mean, median, IQM and optimality gap of the equal mixture of ``tasks``' run distributions."""
        key = ("pooled", arm, size, noise, tuple(tasks))
        if key not in self._cache:
            self._cache[key] = self._pooled(arm, size, noise, tasks)
        return dict(self._cache[key])  # type: ignore[call-overload]

    def _pooled(self, arm: str, size: int, noise: str, tasks: list[str]) -> dict[str, float]:
        nz = self.noise(noise)
        mus = np.array([self.mean(arm, t, [size])[0] for t in tasks])
        x = np.linspace(mus.min() - 12 * self.sigma, mus.max() + 12 * self.sigma, 60_001)
        cdf = np.mean(
            [np.interp((x - m) / self.sigma, nz.grid, nz.cdf, 0.0, 1.0) for m in mus], axis=0
        )
        pdf = np.gradient(cdf, x)
        q25, q50, q75 = np.interp([0.25, 0.5, 0.75], cdf, x)
        mid = (x >= q25) & (x <= q75)
        return {
            "mean": float(mus.mean()),
            "median": float(q50),
            "iqm": float(np.trapezoid((x * pdf)[mid], x[mid]) / 0.5),
            "optimality_gap": float(np.trapezoid(np.maximum(0.0, 1.0 - x) * pdf, x)),
        }

    def truth_effective(self, arm: str, task: str, size: int) -> float:
        """Size at which the baseline's true curve, interpolated on log size between ladder points,
        equals the arm's true mean at ``size``; inf above the ladder, 0 below it."""
        b = self.mean(self.baseline, task, np.array(self.sizes))
        level = float(self.mean(arm, task, [size])[0])
        return _read_level(b, np.array(self.sizes, dtype=float), level)

    def truth_threshold(self, arm: str, task: str) -> float:
        """First size at which the arm's true curve (interpolated on log size) reaches the threshold;
        0 when zero-shot reaches it, inf when the ladder never does."""
        sizes = self.arm_sizes(arm)
        mu = self.mean(arm, task, sizes)
        if sizes[0] == 0:
            if mu[0] >= self.threshold:
                return 0.0
            sizes, mu = sizes[1:], mu[1:]
        return _read_level(mu, sizes.astype(float), self.threshold, below=float(sizes[0]))

    def truth_auc(self, arm: str, task: str) -> float:
        """Mean height of the true curve over log size, trapezoids between ladder points >= 1."""
        x = np.log(np.array(self.sizes, dtype=float))
        return float(np.trapezoid(self.mean(arm, task, np.array(self.sizes)), x) / (x[-1] - x[0]))

    def truth_runs_above(self, arm: str, size: int, tau: float, noise: str) -> float:
        """Fraction of runs above ``tau``: each task's P(mu + sigma e > tau), averaged over tasks
        with equal weights (the profile pools every run, and every task has the same seeds)."""
        mus = np.array([self.mean(arm, t, [size])[0] for t in self.tasks])
        return float(np.mean(exceedance(noise, (tau - mus) / self.sigma)))

    def truth_fraction(self, arm: str, size: int) -> float:
        """Fraction of tasks whose true mean exceeds the threshold."""
        return float(np.mean([self.mean(arm, t, [size])[0] > self.threshold for t in self.tasks]))


def _read_level(curve: np.ndarray, sizes: np.ndarray, level: float, below: float = 0.0) -> float:
    if level > curve[-1]:
        return float("inf")
    if level <= curve[0]:
        return below
    k = int(np.argmax(curve >= level))
    frac = (level - curve[k - 1]) / (curve[k] - curve[k - 1])
    return float(np.exp(np.log(sizes[k - 1]) + frac * (np.log(sizes[k]) - np.log(sizes[k - 1]))))


def default_scenario() -> Scenario:
    """Four arms on three tasks in two groups: a slow baseline, a fast-saturating pretrained arm, one
    that starts ahead but ends below the baseline, and one equal to the baseline."""
    return Scenario(
        arms={
            "scratch": (0.0, 0.95, 40.0),  # slow saturation
            "quick": (0.35, 0.6, 4.0),  # fast saturation, ahead everywhere
            "stale": (0.30, 0.4, 10.0),  # ahead at small sizes, worse at large ones
            "same": (0.0, 0.95, 40.0),  # equal to the baseline
        },
        zero_shot=("quick", "stale"),
        tasks={"t1": ("g1", 1.0), "t2": ("g1", 2.0), "t3": ("g2", 0.5)},
    )


def simulate_scores(sc: Scenario, seeds: int, noise: str, rng: np.random.Generator) -> pd.DataFrame:
    """One synthetic study's run scores (columns of run_scores + normalise; normalised = score)."""
    nz = sc.noise(noise)
    arms = list(sc.arms)
    rows = []
    for task, (group, _) in sc.tasks.items():
        w = rng.standard_normal(seeds)  # the task's subset of each seed, shared by arms
        for arm in arms:
            u = np.sqrt(sc.rho_arms) * w + np.sqrt(1 - sc.rho_arms) * rng.standard_normal(seeds)
            sizes = sc.arm_sizes(arm)
            v = rng.standard_normal((len(sizes), seeds))
            z = np.sqrt(sc.rho_sizes) * u[None, :] + np.sqrt(1 - sc.rho_sizes) * v
            score = sc.mean(arm, task, sizes)[:, None] + sc.sigma * nz.from_normal(z)
            for i, n in enumerate(sizes):
                for s in range(seeds):
                    rows.append(
                        (
                            arm,
                            "baseline" if arm == sc.baseline else "pretrained",
                            task,
                            group,
                            int(n),
                            s,
                            score[i, s],
                        )
                    )
    frame = pd.DataFrame(rows, columns=["arm", "role", "task", "group", "size", "seed", "score"])
    return frame.assign(
        replicate=0, step=np.nan, rule="final", normalised=frame["score"], reference="floor/expert"
    )
