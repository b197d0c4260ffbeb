"""Benchmark: the vectorised engine against a loop of scipy.stats.bootstrap over the cells.

Run: python tests/benchmarks/bench_bootstrap.py [--resamples 10000]
A study of 4 arms x 10 tasks x 7 sizes x 5 seeds (280 cells), percentile and BCa intervals of the
mean, measured side by side in one run, with a check that the two agree within Monte Carlo error.
Target (issue 4): at least 30x faster than the scipy loop.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from scipy import stats

from fewshot.stats.bootstrap import bootstrap_cells
from fewshot.stats.estimators import ESTIMATORS


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--resamples", type=int, default=10_000)
    args = parser.parse_args()
    cells, seeds = 4 * 10 * 7, 5
    data = np.random.default_rng(0).lognormal(0, 0.5, size=(cells, seeds))
    for method in ("percentile", "bca"):
        t0 = time.perf_counter()
        ours = bootstrap_cells(
            data,
            ESTIMATORS["mean"],
            method=method,
            resamples=args.resamples,
            rng=np.random.default_rng(1),
            is_mean=True,
        )
        t_ours = time.perf_counter() - t0
        t0 = time.perf_counter()
        ref = [
            stats.bootstrap(
                (row,),
                np.mean,
                method=method,
                n_resamples=args.resamples,
                rng=np.random.default_rng(2 + i),
            ).confidence_interval
            for i, row in enumerate(data)
        ]
        t_scipy = time.perf_counter() - t0
        again = [
            stats.bootstrap(
                (row,),
                np.mean,
                method=method,
                n_resamples=args.resamples,
                rng=np.random.default_rng(9000 + i),
            ).confidence_interval
            for i, row in enumerate(data)
        ]
        lo, hi = np.array([c.low for c in ref]), np.array([c.high for c in ref])
        lo2, hi2 = np.array([c.low for c in again]), np.array([c.high for c in again])
        gap_ours = np.mean(np.abs(np.r_[ours.low - lo, ours.high - hi]))
        gap_scipy = np.mean(np.abs(np.r_[lo2 - lo, hi2 - hi]))
        print(
            f"{method:10} ours {t_ours:7.3f} s   scipy loop {t_scipy:7.3f} s   speed-up {t_scipy / t_ours:6.1f}x"
            f" (target >= 30x);  mean gap to scipy {gap_ours:.4f}, scipy to itself (other seeds) {gap_scipy:.4f}"
        )


if __name__ == "__main__":
    main()
