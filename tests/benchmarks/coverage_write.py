"""Write a coverage-harness table where the project quotes it (``coverage.py --write``).

Two places, both generated, never typed by hand:

- ``fewshot/stats/coverage_printed.py``: coverage, mean width, zero-width share and no-interval
  share per quantity x noise x seeds, which reports quote (fewshot.stats.coverage);
- the README's table between ``<!-- printed-coverage:start -->`` and ``<!-- printed-coverage:end -->``.
"""

from __future__ import annotations

import datetime
import math
from pathlib import Path

import pandas as pd

ROOT = Path(__file__).resolve().parents[2]
MODULE = ROOT / "fewshot" / "stats" / "coverage_printed.py"
README = ROOT / "README.md"
START, END = "<!-- printed-coverage:start -->", "<!-- printed-coverage:end -->"
NOISES = ("normal", "lognormal", "two-mode")
COLUMNS = ("coverage", "finite_coverage", "infinite_truth", "width", "degenerate", "no_interval")
SEEDS = (3, 5, 10)


def _cell(table: pd.DataFrame, quantity: str, noise: str, seeds: int) -> pd.Series:
    rows = table[
        (table["quantity"] == quantity) & (table["noise"] == noise) & (table["seeds"] == seeds)
    ]
    return rows.iloc[0]


def _number(value: float, digits: int) -> str:
    return (
        "None" if value is None or not math.isfinite(value) else repr(round(float(value), digits))
    )


def _quantity(table: pd.DataFrame, quantity: str) -> list[str]:
    """One quantity's entry, laid out as ruff formats it (one cell a line)."""
    lines = [f'    "{quantity}": {{']
    for noise in NOISES:
        lines.append(f'        "{noise}": {{')
        for n in SEEDS:
            r = _cell(table, quantity, noise, n)
            nums = (_number(r[c], 3) for c in COLUMNS)
            lines.append(f"            {n}: ({', '.join(nums)}),")
        lines.append("        },")
    lines.append("    },")
    return lines


def write_module(table: pd.DataFrame) -> Path:
    studies = int(table["studies"].iloc[0])
    lines = [
        '"""Measured coverage of every printed interval: the output of',
        f"``python tests/benchmarks/coverage.py --printed {studies} --write`` "
        f"({datetime.date.today().isoformat()}).",
        "",
        "Generated; do not edit by hand. ``TABLE``: quantity -> noise -> seeds -> (coverage,",
        "coverage where the truth is finite, share of infinite truths, mean width, zero-width share,",
        "share printed without an interval); None where a quantity has no such value. ``COVERAGE``",
        "etc. are its columns.",
        '"""',
        "",
        "from __future__ import annotations",
        "",
        "__all__ = [",
        '    "STUDIES",',
        '    "TABLE",',
        '    "COVERAGE",',
        '    "FINITE_COVERAGE",',
        '    "INFINITE_TRUTH",',
        '    "WIDTH",',
        '    "DEGENERATE",',
        '    "NO_INTERVAL",',
        "]",
        "",
        "Cell = tuple[float | None, ...]",
        "",
        f"STUDIES = {studies}",
        "",
        "TABLE: dict[str, dict[str, dict[int, Cell]]] = {",
        *[line for q in dict.fromkeys(table["quantity"]) for line in _quantity(table, q)],
        "}",
        "",
        "",
        "def _column(k: int) -> dict[str, dict[str, dict[int, float | None]]]:",
        "    return {",
        "        q: {d: {n: cell[k] for n, cell in by_n.items()} for d, by_n in by_noise.items()}",
        "        for q, by_noise in TABLE.items()",
        "    }",
        "",
        "",
        "COVERAGE, FINITE_COVERAGE, INFINITE_TRUTH, WIDTH, DEGENERATE, NO_INTERVAL = (",
        "    _column(k) for k in range(6)",
        ")",
        "",
    ]
    MODULE.write_text("\n".join(lines))
    return MODULE


def readme_table(table: pd.DataFrame) -> str:
    """The README's markdown table: coverage per seeds x noise; at 5 normal seeds the coverage
    where the truth is finite (when some truths are infinite) and the mean width; the largest
    zero-width share over all columns."""
    cols = [(n, d) for n in SEEDS for d in NOISES]
    head = (
        "| printed interval | "
        + " | ".join(f"{n} {d}" for n, d in cols)
        + " | finite truths, 5 normal | width, 5 normal | zero-width |"
    )
    rule = "| --- | " + " | ".join("---:" for _ in cols) + " | ---: | ---: | ---: |"
    lines = [head, rule]
    for q in dict.fromkeys(table["quantity"]):
        cells = [_cell(table, q, d, n) for n, d in cols]
        if all(c["intervals"] == 0 for c in cells):
            lines.append(f"| {q} | " + " | ".join("no interval" for _ in cols) + " | | | |")
            continue
        five = _cell(table, q, "normal", 5)
        # coverage where the truth is finite, for sizes whose truth may lie beyond the ladder
        finite = (
            f"{100 * round(float(five['finite_coverage']), 3):.1f}"
            if float(five["infinite_truth"]) > 0
            else ""
        )
        worst = max(float(c["degenerate"]) for c in cells if c["intervals"])
        lines.append(
            f"| {q} | "
            # rounded as the module rounds, so the README and the module agree to the digit
            + " | ".join(f"{100 * round(float(c['coverage']), 3):.1f}" for c in cells)
            + f" | {finite} | {five['width']:.3g} | {worst:.0%} |"
        )
    return "\n".join(lines)


def write_readme(table: pd.DataFrame) -> Path:
    text = README.read_text()
    if START not in text or END not in text:
        raise SystemExit(f"{README} has no {START} ... {END} markers: add them around the table")
    head, rest = text.split(START, 1)
    _, tail = rest.split(END, 1)
    studies = int(table["studies"].iloc[0])
    note = (
        f"<!-- generated by `python tests/benchmarks/coverage.py --printed {studies} --write`;"
        " do not edit by hand -->"
    )
    count = f"{studies} synthetic studies per column, nominal 95%:"
    README.write_text(f"{head}{START}\n{note}\n{count}\n\n{readme_table(table)}\n{END}{tail}")
    return README
