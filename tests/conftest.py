"""Shared fixtures: small pool files written into tmp paths."""

from __future__ import annotations

import csv
from pathlib import Path

import pytest

STUDIES = Path(__file__).resolve().parent.parent / "studies"


def write_csv(path: Path, header: list[str], rows: list[list[object]]) -> Path:
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(header)
        w.writerows(rows)
    return path


@pytest.fixture
def pool_csv(tmp_path: Path) -> Path:
    """120 episodes with a return and a site column (three sites of 60/40/20)."""
    rows = []
    for k in range(120):
        site = "north" if k % 6 < 3 else ("south" if k % 6 < 5 else "ramp")
        rows.append([f"ep{k:03d}", f"{(k * 37) % 101}.5", site])
    return write_csv(tmp_path / "pool.csv", ["episode", "return", "site"], rows)


@pytest.fixture
def demo_pool() -> Path:
    return STUDIES / "pools" / "dock-east.csv"


def tree_snapshot(root: Path) -> dict[str, bytes]:
    """Every file below ``root`` with its bytes, to compare before and after a command."""
    if not root.exists():
        return {}
    return {
        str(p.relative_to(root)): p.read_bytes() for p in sorted(root.rglob("*")) if p.is_file()
    }
