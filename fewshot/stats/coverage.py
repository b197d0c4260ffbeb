"""Measured coverage of each interval method and of every printed interval, for reports.

``MEASURED`` is the output of ``python tests/benchmarks/coverage.py --methods`` (4,000 simulated
studies per cell, 2,000 resamples each, nominal 95%): the share of studies whose interval of the
mean held the true mean. ``tests/test_coverage_table.py`` re-measures a few cells so the table
cannot drift from the engine. ``PRINTED`` is the output of ``coverage.py --printed`` (the harness,
:mod:`fewshot.stats.harness`): every interval ``curves`` and ``compare`` print, by quantity.
"""

from __future__ import annotations

__all__ = [
    "MEASURED",
    "PRINTED",
    "PRINTED_STUDIES",
    "KINDS",
    "coverage_sentence",
    "printed_sentence",
]

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


# quantity -> noise -> seeds -> coverage of a nominal 95% interval (tests/benchmarks/coverage.py --printed 150)
PRINTED: dict[str, dict[str, dict[int, float]]] = {
    "cell mean": {
        "normal": {3: 0.953, 5: 0.948, 10: 0.947},
        "lognormal": {3: 0.918, 5: 0.910, 10: 0.925},
        "two-mode": {3: 0.904, 5: 0.905, 10: 0.933},
    },
    "aggregate iqm": {
        "normal": {3: 0.967, 5: 0.954, 10: 0.936},
        "lognormal": {3: 0.949, 5: 0.955, 10: 0.953},
        "two-mode": {3: 0.952, 5: 0.948, 10: 0.945},
    },
    "aggregate mean": {
        "normal": {3: 0.965, 5: 0.955, 10: 0.933},
        "lognormal": {3: 0.926, 5: 0.941, 10: 0.950},
        "two-mode": {3: 0.950, 5: 0.954, 10: 0.955},
    },
    "aggregate median": {
        "normal": {3: 0.973, 5: 0.961, 10: 0.937},
        "lognormal": {3: 0.964, 5: 0.962, 10: 0.944},
        "two-mode": {3: 0.968, 5: 0.959, 10: 0.951},
    },
    "aggregate optimality gap": {
        "normal": {3: 0.962, 5: 0.951, 10: 0.933},
        "lognormal": {3: 0.930, 5: 0.943, 10: 0.950},
        "two-mode": {3: 0.950, 5: 0.954, 10: 0.954},
    },
    "group iqm": {
        "normal": {3: 0.966, 5: 0.966, 10: 0.954},
        "lognormal": {3: 0.956, 5: 0.962, 10: 0.958},
        "two-mode": {3: 0.947, 5: 0.954, 10: 0.944},
    },
    "group mean": {
        "normal": {3: 0.960, 5: 0.948, 10: 0.942},
        "lognormal": {3: 0.927, 5: 0.919, 10: 0.935},
        "two-mode": {3: 0.916, 5: 0.925, 10: 0.940},
    },
    "group median": {
        "normal": {3: 0.977, 5: 0.964, 10: 0.947},
        "lognormal": {3: 0.966, 5: 0.959, 10: 0.947},
        "two-mode": {3: 0.959, 5: 0.960, 10: 0.952},
    },
    "group optimality gap": {
        "normal": {3: 0.953, 5: 0.943, 10: 0.940},
        "lognormal": {3: 0.929, 5: 0.923, 10: 0.937},
        "two-mode": {3: 0.918, 5: 0.929, 10: 0.942},
    },
    "difference per task": {
        "normal": {3: 0.949, 5: 0.953, 10: 0.953},
        "lognormal": {3: 0.958, 5: 0.962, 10: 0.952},
        "two-mode": {3: 0.957, 5: 0.960, 10: 0.941},
    },
    "difference over tasks": {
        "normal": {3: 0.968, 5: 0.962, 10: 0.944},
        "lognormal": {3: 0.963, 5: 0.968, 10: 0.955},
        "two-mode": {3: 0.962, 5: 0.968, 10: 0.952},
    },
    "P(improvement) per task": {
        "normal": {3: 0.958, 5: 0.971, 10: 0.973},
        "lognormal": {3: 0.951, 5: 0.957, 10: 0.952},
        "two-mode": {3: 0.963, 5: 0.976, 10: 0.973},
    },
    "P(improvement) over tasks": {
        "normal": {3: 0.978, 5: 0.976, 10: 0.981},
        "lognormal": {3: 0.963, 5: 0.963, 10: 0.951},
        "two-mode": {3: 0.980, 5: 0.979, 10: 0.980},
    },
    "effective data": {
        "normal": {3: 0.967, 5: 0.967, 10: 0.966},
        "lognormal": {3: 0.971, 5: 0.972, 10: 0.966},
        "two-mode": {3: 0.972, 5: 0.970, 10: 0.958},
    },
    "data transferred": {
        "normal": {3: 0.967, 5: 0.967, 10: 0.966},
        "lognormal": {3: 0.971, 5: 0.972, 10: 0.966},
        "two-mode": {3: 0.972, 5: 0.970, 10: 0.958},
    },
    "data multiplier": {
        "normal": {3: 0.967, 5: 0.967, 10: 0.966},
        "lognormal": {3: 0.971, 5: 0.972, 10: 0.966},
        "two-mode": {3: 0.972, 5: 0.970, 10: 0.958},
    },
    "episodes to threshold": {
        "normal": {3: 0.978, 5: 0.973, 10: 0.961},
        "lognormal": {3: 0.967, 5: 0.948, 10: 0.963},
        "two-mode": {3: 0.956, 5: 0.949, 10: 0.963},
    },
    "area under curve": {
        "normal": {3: 0.959, 5: 0.952, 10: 0.946},
        "lognormal": {3: 0.928, 5: 0.928, 10: 0.931},
        "two-mode": {3: 0.926, 5: 0.941, 10: 0.944},
    },
    "fraction of tasks above": {
        "normal": {3: 0.992, 5: 0.999, 10: 0.999},
        "lognormal": {3: 0.995, 5: 0.998, 10: 0.999},
        "two-mode": {3: 0.986, 5: 0.998, 10: 0.998},
    },
}
PRINTED_STUDIES = 150


# The interval kinds a report names, and the harness quantities behind each (the lowest of them
# is quoted, so a sentence never claims more than the worst of its quantities).
KINDS: dict[str, tuple[str, ...]] = {
    "aggregates across tasks (stratified t)": (
        "aggregate iqm",
        "aggregate mean",
        "aggregate median",
        "aggregate optimality gap",
    ),
    "aggregates by group": ("group iqm", "group mean", "group median", "group optimality gap"),
    "differences per task": ("difference per task",),
    "mean differences over tasks (stratified t)": ("difference over tasks",),
    "P(improvement) per task (Newcombe)": ("P(improvement) per task",),
    "P(improvement) over tasks": ("P(improvement) over tasks",),
    "effective data, D_T and multiplier (test inversion)": ("effective data",),
    "episodes to the threshold (test inversion)": ("episodes to threshold",),
    "areas under the curve (t over seeds)": ("area under curve",),
    "fractions of tasks above the threshold": ("fraction of tasks above",),
}


def printed_sentence(seeds: int) -> str:
    """The measured coverage of every interval kind a comparison prints, at the nearest seed count."""
    n = min((3, 5, 10), key=lambda k: abs(k - seeds))
    parts = []
    for kind, quantities in KINDS.items():
        worst = {
            d: min(PRINTED[q][d][n] for q in quantities)
            for d in ("normal", "lognormal", "two-mode")
        }
        parts.append(
            f"{kind} {worst['normal']:.0%} / {worst['lognormal']:.0%} / {worst['two-mode']:.0%}"
        )
    return (
        f"Measured coverage of the nominal 95% intervals at {n} seeds (tests/benchmarks/coverage.py --printed, "
        f"{PRINTED_STUDIES} synthetic studies per cell with known truth; normal / lognormal sigma 0.5 / 30-70 "
        f"two-mode seed noise; the lowest over each kind's quantities): " + "; ".join(parts) + "."
    )
