"""Benchmark: 8 worker processes against one study, on SQLite and (with FEWSHOT_TEST_PG) PostgreSQL.

Run: python tests/benchmarks/bench_load.py [--seeds 100] [--workers 8]
Each worker claims runs and records 5 results per run (2 metrics x 2 steps + a final one with
per-episode values) through the public API, then marks the run done. Prints runs and results
per second, and checks every run was claimed once and every result stored once.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from fewshot.ledger import Ledger  # noqa: E402
from fewshot.study import load_study  # noqa: E402
from tests.support import reset_pg, study_toml, write_study  # noqa: E402
from tests.test_reliability import WORKER  # noqa: E402


def _study(folder: Path, seeds: int) -> Path:
    """The study tests/test_reliability.py plans (its ``_study``), written without pytest."""
    text = study_toml(
        sizes=[1, 2, 3, 4],
        seeds=list(range(seeds)),
        arms={"wide": {"zero_shot": False}},
        metrics=["success"],
    )
    return write_study(folder, text)


def run(url: str, folder: Path, seeds: int, workers: int) -> None:
    led = Ledger.open(url)
    total = led.plan(load_study(_study(folder, seeds))).total_runs
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    t0 = time.perf_counter()
    procs = [
        subprocess.Popen(
            [sys.executable, "-c", WORKER, url, f"w{k}"],
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
            env=env,
        )
        for k in range(workers)
    ]
    outs = [p.communicate() for p in procs]
    took = time.perf_counter() - t0
    keys = [k for out, _ in outs for k in out.split()]
    res = led.results()
    ok = len(keys) == len(set(keys)) == total and len(res) == 5 * total
    locked = sum("locked" in err.lower() for _, err in outs)
    name = url.split(":")[0]
    print(
        f"{name:22} {total} runs, {len(res)} results in {took:6.1f} s: {total / took:6.1f} runs/s, "
        f"{len(res) / took:7.1f} results/s; claimed once and stored once: {ok}; 'locked' errors: {locked}"
    )
    led.close()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--seeds", type=int, default=100)
    parser.add_argument("--workers", type=int, default=8)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        run(f"sqlite:///{tmp}/load.sqlite", Path(tmp), args.seeds, args.workers)
        pg = os.environ.get("FEWSHOT_TEST_PG")
        if pg:
            reset_pg(pg)
            other = Path(tmp) / "pg"
            other.mkdir()
            run(pg, other, args.seeds, args.workers)
        else:
            print("PostgreSQL: set FEWSHOT_TEST_PG to a scratch database URL to measure it too")


if __name__ == "__main__":
    main()
