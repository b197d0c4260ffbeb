"""Benchmark: wall time of `fewshot demo --quick` and the full `fewshot demo`, each in a fresh folder.

Run: python tests/benchmarks/bench_demo.py [--workers N] [--skip-full]
Targets (issue 7): the full demo within 3 minutes on a 2-core machine, --quick within 30 s.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path


def timed(args: list[str]) -> float:
    t0 = time.perf_counter()
    done = subprocess.run(
        [sys.executable, "-m", "fewshot.cli", *args], capture_output=True, text=True
    )
    if done.returncode != 0:
        raise SystemExit(done.stderr[-3000:])
    return time.perf_counter() - t0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--workers", type=int, default=0)
    parser.add_argument("--skip-full", action="store_true")
    args = parser.parse_args()
    extra = ["--workers", str(args.workers)] if args.workers else []
    with tempfile.TemporaryDirectory() as tmp:
        quick = timed(["demo", "--quick", "--out", str(Path(tmp) / "quick"), *extra])
        print(f"fewshot demo --quick   {quick:7.1f} s   (target <= 30 s)")
        if not args.skip_full:
            full = timed(["demo", "--out", str(Path(tmp) / "full"), *extra])
            print(f"fewshot demo           {full:7.1f} s   (target <= 180 s)")


if __name__ == "__main__":
    main()
