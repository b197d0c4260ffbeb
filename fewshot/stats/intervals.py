"""Interval methods chosen by measured coverage at 3-10 seeds (see ``tests/benchmarks/coverage.py``).

Stratified t (aggregates over tasks)
    Seeds are resampled within each task (stratum) and each stratum's resample is rescaled
    about its mean by ``sqrt(n_h / (n_h - 1))``, so that the bootstrap variance of a stratified
    mean equals the unbiased analytic variance ``sum_h W_h^2 s_h^2 / n_h`` (Cochran, Sampling
    Techniques, 3rd ed., eq. 5.6; the rescaling is the small-sample correction of the naive
    stratified bootstrap, Efron 1982 / Rao & Wu 1988). The interval is
    ``estimate +- t(df) * SE`` with that bootstrap SE and Satterthwaite's degrees of freedom
    ``df = (sum a_h)^2 / sum a_h^2 / (n_h - 1)``, ``a_h = W_h^2 s_h^2 / n_h`` (Satterthwaite 1946;
    Cochran eq. 5.16). For the mean it is the stratified t interval in closed form.
Newcombe score interval (probability of improvement)
    Newcombe (2006), "Confidence intervals for an effect size measure based on the Mann-Whitney
    statistic. Part 2", Statistics in Medicine 25:559-573, method 5: the Hanley-McNeil variance of
    the Mann-Whitney estimate with both sample sizes replaced by ``N* = (m + n)/2 - 1``,
    ``V(theta) = theta (1 - theta) / (m n) * [1 + N* ((1 - theta)/(2 - theta) + theta/(1 + theta))]``,
    inverted as a score interval: all theta with ``(A - theta)^2 <= z^2 V(theta)``. Never a single
    point, also when every run of one arm beats every run of the other. At theta = 1/2 the variance is
    the null variance of U, ``(m + n + 1) / (12 m n)`` (checked against ``scipy.stats.mannwhitneyu``).
MOVER (means over tasks of per-task intervals, e.g. P(improvement) over tasks)
    Zou & Donner (2008): the limits of a sum of independent estimates from each one's own
    limits, square-and-add (Newcombe 1998, method 10, for a difference of two proportions).
    Chosen over a common-theta Newcombe variance summed over tasks, which covered 97-98% at 5
    seeds (too wide); the same width placed by each task's own skew covers near 95%.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from scipy import special, stats

__all__ = [
    "satterthwaite_df",
    "strata_df",
    "pooled_indices",
    "rescaled_strata",
    "stratified_t",
    "stratified_mean_t",
    "newcombe_variance",
    "newcombe_interval",
    "mover_mean_interval",
    "huge_scale",
    "t_quantile",
    "cell_scale",
    "row_scale",
]

# beyond this, squares (variances), the skewness's cubes and sums of squares may overflow to inf
HUGE = 2.0**300


@lru_cache(maxsize=256)
def t_quantile(p: float, df: int) -> float:
    """Student's t quantile ``stats.t.ppf(p, df)``, computed once per (p, df): thousands of
    cells share a few seed counts."""
    return float(stats.t.ppf(p, df))


def huge_scale(*arrays: np.ndarray) -> float:
    """A power of two that brings the largest finite |value| of ``arrays`` near 1 when it is huge
    (>= 2**300, e.g. scores near 1e200), else 1.

    Multiplying by a power of two is exact, and every t interval here is scale-equivariant (its
    degrees of freedom scale-invariant), so computing on scaled values and scaling the ends back
    gives the same interval without ``s**2`` overflowing (as :func:`fewshot.stats.bootstrap_cells`
    does for cells).
    """
    peak = 0.0
    for a in arrays:
        v = np.abs(np.asarray(a, float))
        v = v[np.isfinite(v)]
        if v.size:
            peak = max(peak, float(v.max()))
    if peak < HUGE:
        return 1.0
    return float(np.ldexp(1.0, -int(np.frexp(peak)[1])))


def cell_scale(data: np.ndarray) -> np.ndarray | None:
    """Per cell, a power of two that brings the largest |value| near 1, when some cell is huge.

    Multiplying by a power of two is exact in floating point, and every estimator and interval
    here is scale-equivariant (mean, median, IQM; t, Hall, BCa, percentile), so the intervals of
    the scaled cells, scaled back, are those of the originals, without overflow. None when no
    cell needs it (then nothing is touched).
    """
    peak = np.abs(data).max(axis=(1, 2)) if data.size else np.zeros(len(data))
    if not (peak >= HUGE).any():
        return None
    _, exponent = np.frexp(peak)
    return np.where(peak >= HUGE, np.ldexp(1.0, -exponent), 1.0)


def row_scale(x: np.ndarray) -> np.ndarray:
    """Per row, a power of two that brings the largest finite |value| near 1 (exact scaling)."""
    with np.errstate(invalid="ignore"):
        peak = np.nanmax(np.where(np.isfinite(x), np.abs(x), np.nan), axis=1, initial=0.0)
    _, exponent = np.frexp(peak)
    return np.ldexp(1.0, -exponent)[:, None]


def satterthwaite_df(variances: np.ndarray, counts: np.ndarray, weights: np.ndarray) -> float:
    """Satterthwaite's degrees of freedom of ``sum W_h^2 s_h^2 / n_h`` (strata with n_h >= 2)."""
    a = weights**2 * variances / counts
    den = np.sum(a**2 / np.maximum(counts - 1, 1))
    if den <= 0:
        return float(np.sum(counts - 1))  # every stratum constant: df of the pooled variance
    return float(np.sum(a) ** 2 / den)


def rescaled_strata(
    strata: list[np.ndarray], indices: list[np.ndarray], pooled: np.ndarray | None = None
) -> np.ndarray:
    """Resamples (rows) of the pooled runs: each stratum's draw rescaled by sqrt(n/(n-1)) about
    its mean. ``strata`` hold each task's seed-level values (NaN = missing run, kept out of the
    mean and left NaN); ``indices`` the task's resample × seeds index matrix. ``pooled``: the
    strata's index matrices joined by :func:`pooled_indices`, when the caller reuses it for many
    cells over the same strata (``indices`` is then not read)."""
    # each stratum's seeds are rescaled once, then gathered: the same numbers as rescaling every
    # drawn value, with one gather of the whole resamples × runs matrix
    rescaled = []
    for x in strata:
        n = int(np.isfinite(x).sum())
        centre = np.nanmean(x) if n else 0.0
        c = np.sqrt(n / (n - 1)) if n >= 2 else 1.0
        rescaled.append(centre + c * (x - centre))
    if not rescaled:
        return np.empty((0, 0))
    if pooled is None:
        pooled = pooled_indices(indices, [len(x) for x in strata])
    return np.concatenate(rescaled)[pooled]


def pooled_indices(indices: list[np.ndarray], lengths: list[int]) -> np.ndarray:
    """The strata's resample × seeds index matrices side by side, each shifted to index its own
    stratum's runs (``lengths`` of them) in the strata joined end to end (one gather for all)."""
    shifted, offset = [], 0
    for idx, n in zip(indices, lengths, strict=True):
        shifted.append(idx + offset)
        offset += n
    return np.concatenate(shifted, axis=1)


def strata_df(strata: list[np.ndarray]) -> float:
    """Satterthwaite's df of the pooled mean of ``strata`` (weights n_h / N); NaN when a stratum
    has fewer than 2 seeds."""
    counts = np.array([np.isfinite(x).sum() for x in strata], dtype=float)
    if len(counts) == 0 or counts.min() < 2:
        return float("nan")
    c = huge_scale(*strata)  # df is scale-invariant; huge values would overflow the variances
    strata = [np.asarray(x, float) * c for x in strata]
    variances = np.array([np.nanvar(x, ddof=1) for x in strata])
    return satterthwaite_df(variances, counts, counts / counts.sum())


def stratified_t(
    estimate: float,
    draws: np.ndarray,
    strata: list[np.ndarray],
    confidence: float,
    df: float | None = None,
) -> tuple[float, float, float]:
    """``estimate +- t(df) * SE`` with SE the standard deviation of rescaled stratified resamples
    (``draws``) and Satterthwaite's df from the strata (pooled-run weights ``n_h / N``; pass ``df``
    from :func:`strata_df` to reuse it).

    Returns (low, high, df); NaNs when a stratum has fewer than 2 seeds.
    """
    df = strata_df(strata) if df is None else df
    if not np.isfinite(df):
        return float("nan"), float("nan"), float("nan")
    kept = draws[np.isfinite(draws)]
    c = huge_scale(kept)  # the SE of huge draws, computed on exactly scaled values
    se = float(np.std(kept * c, ddof=1)) / c if kept.size > 1 else float("nan")
    q = float(stats.t.ppf(0.5 + confidence / 2, df))
    return estimate - q * se, estimate + q * se, df


def stratified_mean_t(
    strata: list[np.ndarray], weights: np.ndarray, confidence: float
) -> tuple[float, float, float]:
    """Closed-form stratified t interval of ``sum_h W_h mean(x_h)``: variance ``sum W_h^2 s_h^2 / n_h``
    (Cochran eq. 5.6), Satterthwaite's df. Returns (estimate, low, high); NaN interval when a
    stratum has fewer than 2 values."""
    xs = [np.asarray(x, float)[np.isfinite(x)] for x in strata]
    c = huge_scale(*xs)  # values near 1e200: computed on exactly scaled values, scaled back
    if c != 1.0:
        est, lo, hi = stratified_mean_t([x * c for x in xs], weights, confidence)
        return est / c, lo / c, hi / c
    w = np.asarray(weights, float)
    est = (
        float(sum(wi * x.mean() for wi, x in zip(w, xs, strict=True)))
        if all(len(x) for x in xs)
        else float("nan")
    )
    counts = np.array([len(x) for x in xs], float)
    if len(counts) == 0 or counts.min() < 2:
        return est, float("nan"), float("nan")
    s2 = np.array([np.var(x, ddof=1) for x in xs])
    se = float(np.sqrt(np.sum(w**2 * s2 / counts)))
    q = float(stats.t.ppf(0.5 + confidence / 2, satterthwaite_df(s2, counts, w)))
    return est, est - q * se, est + q * se


def newcombe_variance(theta: np.ndarray, m: np.ndarray, n: np.ndarray) -> np.ndarray:
    """Newcombe's (2006) method-5 variance of a Mann-Whitney estimate at ``theta``."""
    theta = np.asarray(theta, dtype=float)
    nstar = (np.asarray(m, float) + np.asarray(n, float)) / 2 - 1
    return (
        theta
        * (1 - theta)
        / (m * n)
        * (1 + nstar * ((1 - theta) / (2 - theta) + theta / (1 + theta)))
    )


def _score_roots(
    estimate: np.ndarray, variance, confidence: float, iterations: int = 60
) -> tuple[np.ndarray, np.ndarray]:  # type: ignore[no-untyped-def]
    """The theta in [0, 1] that a score test of "P = theta" does not reject, by bisection on each
    side of the estimate.

    The test rejects when ``(estimate - theta)^2 > z^2 variance(theta)``, z the two-sided normal
    quantile, except where one of its sides can reject no attainable estimate (near theta = 1 even
    an estimate of 1 lies within ``theta + z sqrt(variance)``; near 0 likewise for 0): the test is
    then one-sided, with the whole error rate 1 - confidence on the side that can reject. An
    equal-tailed test there spends half its error rate where no outcome lies, and near 0 and 1
    covers 97.5% instead of 95% (measured by the harness); a test whose tails follow the
    outcomes that can occur is the principle of Sterne (1954) and Blaker (2000) for discrete
    statistics. Each test keeps its level, so the set keeps its confidence."""
    est = np.clip(np.asarray(estimate, dtype=float), 0.0, 1.0)
    z2 = float(special.ndtri(0.5 + confidence / 2))
    z1 = float(special.ndtri(confidence))

    def inside(t: np.ndarray, upper: bool) -> np.ndarray:
        """Is theta = t (above the estimate when ``upper``) not rejected?"""
        v = variance(t)
        # theta above the estimate is rejected by the test's lower tail (estimates too low); it
        # takes the whole error rate when the upper tail is empty (an estimate of 1 is accepted)
        far = (1 - t if upper else t) ** 2 <= z2 * z2 * v  # the other tail holds no outcome
        near = (t if upper else 1 - t) ** 2 > z2 * z2 * v  # this tail holds some
        z = np.where(far & near, z1, z2)
        return (est - t) ** 2 <= z * z * v

    lo_a, lo_b = np.zeros_like(est), est.copy()  # lo_a outside (or 0), lo_b inside
    hi_a, hi_b = est.copy(), np.ones_like(est)  # hi_a inside, hi_b outside (or 1)
    for _ in range(iterations):
        mid = (lo_a + lo_b) / 2
        ok = inside(mid, upper=False)
        lo_b, lo_a = np.where(ok, mid, lo_b), np.where(ok, lo_a, mid)
        mid = (hi_a + hi_b) / 2
        ok = inside(mid, upper=True)
        hi_a, hi_b = np.where(ok, mid, hi_a), np.where(ok, hi_b, mid)
    low = np.where(est <= 0, 0.0, lo_b)
    high = np.where(est >= 1, 1.0, hi_a)
    return low, high


def newcombe_interval(
    estimate: np.ndarray, m: np.ndarray, n: np.ndarray, confidence: float
) -> tuple[np.ndarray, np.ndarray]:
    """Newcombe's (2006) method-5 score interval for P(X > Y) from ``m`` and ``n`` runs, one-sided
    where only one side of the test can reject (see :func:`_score_roots`)."""
    m_, n_ = np.asarray(m, float), np.asarray(n, float)
    return _score_roots(
        np.asarray(estimate, float), lambda t: newcombe_variance(t, m_, n_), confidence
    )


def mover_mean_interval(
    estimates: np.ndarray, lows: np.ndarray, highs: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """MOVER limits for means of independent estimates that each carry their own interval.

    Each row of ``estimates`` (rows × parts, NaN where a part is absent; ``lows``, ``highs``
    alike) is one mean of k parts: ``L = mean - sqrt(sum (est - l)^2) / k``,
    ``U = mean + sqrt(sum (u - est)^2) / k`` (Zou & Donner 2008, "Construction of confidence
    limits about effect measures: a general approach", Statistics in Medicine 27:1693-1702; the
    "square-and-add" of Newcombe 1998 for a difference). Each side uses the parts' own
    distances to their limits, so skewed parts (e.g. P(improvement) near 1) keep their skew. NaN
    when a present part has no interval.
    """
    est = np.atleast_2d(np.asarray(estimates, float))
    lo, hi = np.atleast_2d(np.asarray(lows, float)), np.atleast_2d(np.asarray(highs, float))
    present = np.isfinite(est)
    k = present.sum(axis=1)
    missing = (present & ~(np.isfinite(lo) & np.isfinite(hi))).any(axis=1) | (k == 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.nansum(est, axis=1) / k
        down = np.sqrt(np.where(present, (est - lo) ** 2, 0.0).sum(axis=1)) / k
        up = np.sqrt(np.where(present, (hi - est) ** 2, 0.0).sum(axis=1)) / k
    return np.where(missing, np.nan, mean - down), np.where(missing, np.nan, mean + up)
