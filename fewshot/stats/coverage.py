"""Measured coverage of each interval method, for the methods paragraph of reports.

The numbers are the output of ``python tests/benchmarks/coverage.py`` (4,000 simulated studies
per cell, 2,000 resamples each, nominal 95%): the share of studies whose interval of the mean held
the true mean. ``tests/test_coverage_table.py`` re-measures a few cells so the table cannot drift
from the engine.
"""

from __future__ import annotations

__all__ = ["MEASURED", "coverage_sentence"]

# method -> distribution -> seeds -> coverage of a nominal 95% interval of the mean
MEASURED: dict[str, dict[str, dict[int, float]]] = {
    "percentile": {
        "normal": {3: 0.754, 5: 0.836, 10: 0.89},
        "lognormal": {3: 0.713, 5: 0.804, 10: 0.881},
        "two-mode": {3: 0.698, 5: 0.812, 10: 0.902},
    },
    "basic": {
        "normal": {3: 0.752, 5: 0.838, 10: 0.889},
        "lognormal": {3: 0.708, 5: 0.802, 10: 0.874},
        "two-mode": {3: 0.665, 5: 0.794, 10: 0.877},
    },
    "bca": {
        "normal": {3: 0.73, 5: 0.834, 10: 0.891},
        "lognormal": {3: 0.69, 5: 0.814, 10: 0.882},
        "two-mode": {3: 0.682, 5: 0.831, 10: 0.929},
    },
    "t": {
        "normal": {3: 0.95, 5: 0.948, 10: 0.94},
        "lognormal": {3: 0.921, 5: 0.917, 10: 0.921},
        "two-mode": {3: 0.901, 5: 0.897, 10: 0.941},
    },
    "expanded": {
        "normal": {3: 0.754, 5: 0.917, 10: 0.937},
        "lognormal": {3: 0.713, 5: 0.893, 10: 0.922},
        "two-mode": {3: 0.698, 5: 0.882, 10: 0.949},
    },
    "bootstrap-t": {
        "normal": {3: 0.813, 5: 0.945, 10: 0.942},
        "lognormal": {3: 0.787, 5: 0.936, 10: 0.943},
        "two-mode": {3: 0.773, 5: 0.921, 10: 0.967},
    },
    "hall": {
        "normal": {3: 0.952, 5: 0.947, 10: 0.941},
        "lognormal": {3: 0.931, 5: 0.931, 10: 0.939},
        "two-mode": {3: 0.906, 5: 0.916, 10: 0.966},
    },
}


def coverage_sentence(method: str, seeds: int) -> str:
    """One sentence on how often ``method`` covered at the nearest simulated seed count."""
    table = MEASURED.get(method)
    if table is None:
        return f"The coverage of the {method} interval was not measured."
    n = min((3, 5, 10), key=lambda k: abs(k - seeds))
    parts = ", ".join(f"{d} {v[n]:.0%}" for d, v in table.items())
    return (
        f"In simulation (tests/benchmarks/coverage.py), nominal 95% {method} intervals of a mean from {n} seeds "
        f"covered the true mean in {parts} of studies (normal, lognormal with sigma 0.5, and a 30/70 two-mode "
        "mixture of seed results)."
    )
