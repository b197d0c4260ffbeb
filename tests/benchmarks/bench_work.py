"""Benchmark: claims per second of 1, 2, 4 and 8 local work loops (`fewshot work --parallel`)
with a no-op trainer, on SQLite and PostgreSQL, and the work loop's overhead per run as a
fraction of a 1-second trainer run at 8 loops.

Run: python tests/benchmarks/bench_work.py [--runs 400] [--pg URL]
PostgreSQL is measured when --pg or FEWSHOT_TEST_PG names a scratch database (its public schema
is dropped and recreated). Times are wall clock from starting the loops to the last one ending,
so they include starting the loop processes (about 0.5 s each, side by side).
Target (issue 14): overhead under 5% of a 1-second run at 8 loops.
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from fewshot.cluster.parallel import loop_plan, run_parallel  # noqa: E402
from fewshot.ledger import Ledger, resolve_url  # noqa: E402
from fewshot.study import load_study  # noqa: E402
from tests.support import reset_pg, study_toml, write_study  # noqa: E402

REPORT = (
    'printf \'{"run": "%s", "metric": "return", "value": 1, "final": true}\\n\' "$FEWSHOT_RUN" '
    '> "$FEWSHOT_RESULTS"'
)


def _ledger(folder: Path, backend: str, pg: str | None, seeds: int) -> str:
    text = study_toml(sizes=[1, 2, 3, 4], seeds=list(range(seeds)))
    if backend == "sqlite":
        url = str(folder / f"l{time.monotonic_ns()}.sqlite")
    else:
        assert pg is not None
        reset_pg(pg)
        url = pg
    with Ledger.open(url, create=True) as led:
        led.plan(load_study(write_study(folder, text)))
    return resolve_url(url)


def _time(url: str, loops: int, command: list[str]) -> tuple[float, int, float]:
    start = time.perf_counter()
    summary = run_parallel(
        ledger=url,
        study=None,
        loops=loop_plan("bench", loops, None),
        command=command,
        max_runs=None,
        lease=3600.0,
        results_dir=None,
    )
    wall = time.perf_counter() - start
    # per loop: from its first run's start to its last run's end, i.e. without the loop's own
    # start-up; the claims between runs are inside the span
    spans = {}
    for o in summary.outcomes:
        w = str(o["worker"])
        end = float(o["at"])  # type: ignore[arg-type]
        begin = end - float(o["seconds"])  # type: ignore[arg-type]
        lo, hi, n = spans.get(w, (begin, end, 0))
        spans[w] = (min(lo, begin), max(hi, end), n + 1)
    in_loop = sum(hi - lo for lo, hi, _ in spans.values()) / max(
        1, sum(n for *_, n in spans.values())
    )
    return wall, sum(s.done for s in summary.loops), in_loop


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--runs", type=int, default=400, help="runs per no-op measurement")
    parser.add_argument("--pg", default=os.environ.get("FEWSHOT_TEST_PG"))
    args = parser.parse_args()
    # the lightest trainer the loop accepts: it writes the run's final result and ends (a run
    # whose trainer reports nothing fails, so a bare `true` would measure failures)
    sh = shutil.which("sh") or "/bin/sh"
    noop = [sh, "-c", REPORT]
    sleep1 = [sh, "-c", "sleep 1; " + REPORT]
    backends = ["sqlite"] + (["postgresql"] if args.pg else [])
    seeds = max(1, -(-args.runs // 7))  # 7 runs a seed (2 arms x 4 sizes, 1 excluded)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        print(f"{'backend':<11} {'loops':>5} {'runs':>5} {'seconds':>8} {'claims/s':>9}")
        for backend in backends:
            for loops in (1, 2, 4, 8):
                url = _ledger(folder, backend, args.pg, seeds)
                wall, n, _ = _time(url, loops, noop)
                if n == 0:
                    raise SystemExit(
                        f"{backend}: no run was marked done; the trainer command failed"
                    )
                print(f"{backend:<11} {loops:>5} {n:>5} {wall:>8.2f} {n / wall:>9.1f}")
        for backend in backends:
            url = _ledger(folder, backend, args.pg, 6)  # 42 runs: 5 or 6 a loop at 8 loops
            wall, n, in_loop = _time(url, 8, sleep1)
            if n == 0:
                raise SystemExit(f"{backend}: no run was marked done; the trainer command failed")
            per_run = wall * 8 / n  # loop time per run, the trainer taking 1 s of it
            print(
                f"{backend}: 8 loops, {n} runs of a 1 s trainer in {wall:.2f} s: overhead "
                f"{(per_run - 1.0) * 100:.1f}% of a 1-second run counting the loops' start-up, "
                f"{(in_loop - 1.0) * 100:.1f}% once they run (target < 5%)"
            )


if __name__ == "__main__":
    main()
