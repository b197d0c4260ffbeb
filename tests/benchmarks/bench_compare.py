"""Benchmark: the full ``compare`` (every table of it) on the demo ledger, against another version.

Run: python tests/benchmarks/bench_compare.py [--demo FOLDER] [--against SRC] [--repeat 3]

Without --demo a full demo is built in a temporary folder first (about a minute). --against SRC
times the same call with the fewshot package found under SRC (e.g. an export of the main branch:
``git archive main | tar -x -C /tmp/base``) and prints the ratio this / that. Target (issue 11):
the ratio stays at or below 2. Each timing is the best of --repeat calls of
``fewshot.analysis.compare_report`` with the CLI's default settings (10,000 resamples).
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
from pathlib import Path

SNIPPET = """
import sys, time
from fewshot.analysis import compare_report
from fewshot.ledger import Ledger
from fewshot.stats import CurveSettings
led = Ledger.open(sys.argv[1], create=False)
best = float("inf")
for _ in range(int(sys.argv[2])):
    t0 = time.perf_counter()
    compare_report(led, CurveSettings())
    best = min(best, time.perf_counter() - t0)
led.close()
print(best)
"""


def timed(ledger: Path, repeat: int, src: str | None) -> float:
    env = dict(os.environ)
    if src:
        env["PYTHONPATH"] = src
    done = subprocess.run(
        [sys.executable, "-c", SNIPPET, str(ledger), str(repeat)],
        capture_output=True,
        text=True,
        env=env,
        cwd=src or None,
    )
    if done.returncode != 0:
        raise SystemExit(done.stderr[-3000:])
    return float(done.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--demo", default=None, help="a folder written by `fewshot demo`")
    parser.add_argument("--against", default=None, help="source folder of another fewshot")
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(args.demo) if args.demo else Path(tmp) / "demo"
        if not args.demo:
            done = subprocess.run(
                [sys.executable, "-m", "fewshot.cli", "demo", "--out", str(folder)],
                capture_output=True,
                text=True,
            )
            if done.returncode != 0:
                raise SystemExit(done.stderr[-3000:])
        ledger = folder / "ledger.sqlite"
        this = timed(ledger, args.repeat, None)
        print(f"compare, this version     {this:7.3f} s")
        if args.against:
            other = timed(ledger, args.repeat, args.against)
            print(f"compare, {args.against}  {other:7.3f} s")
            print(f"ratio this / that         {this / other:7.2f}   (target <= 2)")


if __name__ == "__main__":
    main()
