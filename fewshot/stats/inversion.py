"""Intervals on the size axis by test inversion, and t intervals of per-seed summaries.

Effective data and episodes to a threshold are sizes D at which a curve (the baseline's, or
the arm's) reaches a level (the arm's score at n, or the threshold). Their interval is the
set of D at which a paired t test, over seeds, does not reject "curve(D) = level": per seed s,
``g_s(D) = curve_s(D) - level_s`` with the curve interpolated linearly in log size between
ladder points, and D is kept when ``n * mean(g(D))^2 <= t^2 * var(g(D))`` (the confidence set
of a root, as Fieller's 1954 interval for a ratio; Casella & Berger, Statistical Inference,
sec. 9.2, inverting a test). Within a segment of the ladder both sides are quadratic in the
interpolation weight, so the set is found in closed form (checked against a brute-force grid).
Because each seed's runs are paired across arms and sizes, the noise of both curves and their
correlation enter through ``var(g)``. With normal seed noise the set covers the true size
exactly at the nominal level whenever the true curve is monotone.

Beyond the ladder the curve is unknown but, being monotone, no lower than at the largest size:
a size D above the ladder is rejected only when the curve is significantly above the level at
the largest size. Under "curve(D) = level" the curve at the largest size is at most the level,
so this test can reject in one direction only and takes the whole error rate on that side: a
one-sided t test at level 1 - confidence (each D is tested at the nominal level, so the set
still covers at the nominal rate; Casella & Berger sec. 9.2). Sizes below the ladder likewise.
When the test at the largest size does not reject, the high end is infinite; at the smallest,
the low end is 0.
The interval reported is the hull of the set: [low, high] in episodes (0 for "at or below
the smallest", inf for "beyond the ladder").
"""

from __future__ import annotations

import numpy as np

from fewshot.stats.intervals import huge_scale, t_quantile

__all__ = ["level_crossing_set", "seed_t_interval"]


def _column_moments(g: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per ladder point (column of ``g``, seeds × sizes): mean, variance (ddof 1) and the seeds'
    deviations from the mean, each column as one contiguous row, so that every row is reduced
    exactly as ``g[:, j].mean()``, ``np.var(g[:, j], ddof=1)`` and ``np.cov`` reduce it."""
    rows = np.array(g.T, dtype=float, order="C")
    means = rows.mean(axis=1)
    variances = np.var(rows, axis=1, ddof=1)
    rows -= means[:, None]
    return means, variances, rows


def _covariance(centred: np.ndarray, j: int) -> float:
    """``np.cov(g[:, j], g[:, j + 1], ddof=1)[0, 1]``, from the centred rows of
    :func:`_column_moments`: the same product and scaling as numpy's, without its checks."""
    pair = centred[j : j + 2]
    return float(np.dot(pair, pair.T.conj())[0, 1] * np.true_divide(1, pair.shape[1] - 1))


def _segment_hull(
    n: int, m0: float, m1: float, s00: float, s11: float, s01: float, q: float
) -> tuple[float, float]:
    """Smallest and largest w in [0, 1] with n ḡ(w)^2 <= q^2 S(w), g(w) = (1-w) g0 + w g1 per seed,
    from the seeds' means, variances and covariance at both ends (NaN, NaN when none)."""
    d = m1 - m0
    a = n * d * d - q * q * (s00 - 2 * s01 + s11)
    b = 2 * n * m0 * d - 2 * q * q * (s01 - s00)
    c = n * m0 * m0 - q * q * s00
    scale = max(abs(a), abs(b), abs(c))
    tol = 1e-9 * scale  # rounding: with no spread the set is one root of a perfect square
    candidates = [0.0, 1.0]
    if abs(a) > tol:
        disc = b * b - 4 * a * c
        if disc > -1e-9 * max(b * b, abs(4 * a * c)):
            disc = max(disc, 0.0)
            r = np.sqrt(disc)
            candidates += [(-b - r) / (2 * a), (-b + r) / (2 * a)]
    elif abs(b) > tol:
        candidates.append(-c / b)
    ws = np.array([w for w in candidates if 0.0 <= w <= 1.0])
    # the accepted set's ends are among the roots and the segment's ends
    val = a * ws * ws + b * ws + c
    ok = ws[val <= tol]
    if ok.size == 0:
        return float("nan"), float("nan")
    return float(ok.min()), float(ok.max())


def level_crossing_set(
    curve: np.ndarray, level: np.ndarray, sizes: np.ndarray, confidence: float
) -> tuple[float, float]:
    """Hull of the sizes D where a paired t test does not reject ``curve(D) = level``.

    Parameters
    ----------
    curve : array, seeds × sizes
        Each seed's curve at ``sizes`` (positive, increasing); the true curve is taken to be
        non-decreasing.
    level : array, seeds
        Each seed's level (a constant for a threshold).
    sizes : array
    confidence : float

    Returns
    -------
    (low, high) : floats
        ``low`` is 0 when sizes below the ladder are kept, ``high`` inf when sizes above it are;
        NaN, NaN below 2 seeds.
    """
    curve, level = np.asarray(curve, float), np.asarray(level, float)
    c = huge_scale(curve, level)  # the test is scale-invariant; huge scores would overflow g**2
    g = curve * c - level[:, None] * c
    n, k = g.shape
    if n < 2:
        return float("nan"), float("nan")
    q = t_quantile(0.5 + confidence / 2, n - 1)
    # beyond the ladder's ends only one direction can reject: one-sided at the nominal level
    q_end = t_quantile(confidence, n - 1)
    mean = g.mean(axis=0)
    se = g.std(axis=0, ddof=1) / np.sqrt(n)
    above = mean > q_end * se  # significantly above the level at a ladder point (one-sided)
    below = mean < -q_end * se
    sizes = np.asarray(sizes, float)
    lows, highs = [], []
    means, variances, centred = _column_moments(g)
    for j in range(k - 1):
        w_lo, w_hi = _segment_hull(
            n,
            means[j],
            means[j + 1],
            variances[j],
            variances[j + 1],
            _covariance(centred, j),
            q,
        )
        if np.isfinite(w_lo):
            lows.append(_at(sizes, j, w_lo))
            highs.append(_at(sizes, j, w_hi))
    if k == 1 and not (above[0] or below[0]):
        lows.append(float(sizes[0]))
        highs.append(float(sizes[0]))
    low = 0.0 if not below[0] else (min(lows) if lows else float(sizes[-1]))
    high = float("inf") if not above[-1] else (max(highs) if highs else float(sizes[0]))
    return low, high


def _at(sizes: np.ndarray, j: int, w: float) -> float:
    """The size a fraction ``w`` of the way from ladder point j to j + 1 on log size (the ladder
    point itself, exactly, at w = 0 or 1)."""
    if w <= 0.0:
        return float(sizes[j])
    if w >= 1.0:
        return float(sizes[j + 1])
    x0, x1 = np.log(sizes[j]), np.log(sizes[j + 1])
    return float(np.exp(x0 + w * (x1 - x0)))


def seed_t_interval(values: np.ndarray, confidence: float) -> tuple[float, float]:
    """Student's t interval of the mean of per-seed values (NaN below 2 seeds)."""
    v = np.asarray(values, float)
    v = v[np.isfinite(v)]
    n = len(v)
    if n < 2:
        return float("nan"), float("nan")
    c = huge_scale(v)  # values near 1e200: exactly scaled, so the spread does not overflow
    v = v * c
    q = t_quantile(0.5 + confidence / 2, n - 1)
    half = q * v.std(ddof=1) / np.sqrt(n)
    return float(v.mean() - half) / c, float(v.mean() + half) / c
