"""Benchmark: `Ledger.ingest` of 200,000 JSONL result lines into SQLite, against raw sqlite3.

Run: python tests/benchmarks/bench_ingest.py [--lines N]
The reference parses the same lines with json.loads and inserts the same rows into the same
tables with one sqlite3 executemany in one transaction, on a copy of the same planned ledger.
The file holds results of many unclaimed runs, so it is ingested as results by hand (``force``;
a trainer's own file holds one attempt of one run). Target (issue 3): ingest within 2x of the raw
driver.
"""

from __future__ import annotations

import argparse
import json
import shutil
import sqlite3
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from fewshot.ledger import Ledger  # noqa: E402
from fewshot.study import load_study  # noqa: E402
from tests.support import study_toml, write_study  # noqa: E402


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--lines", type=int, default=200_000)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        text = study_toml(
            sizes=[1, 2, 3, 4, 5], seeds=list(range(100)), arms={"wide": {"zero_shot": False}}
        )
        led_path = folder / "base.sqlite"
        led = Ledger.open(led_path)
        led.plan(load_study(write_study(folder, text)))
        keys = list(led.runs()["key"])
        led.close()
        per_run = -(-args.lines // len(keys))
        results = folder / "results.jsonl"
        with open(results, "w") as f:
            n = 0
            for step in range(per_run):
                for k in keys:
                    if n == args.lines:
                        break
                    f.write(
                        json.dumps(
                            {"run": k, "metric": "return", "value": step * 0.5, "step": step}
                        )
                        + "\n"
                    )
                    n += 1
        ours_db, raw_db = folder / "ours.sqlite", folder / "raw.sqlite"
        shutil.copy(led_path, ours_db)
        shutil.copy(led_path, raw_db)

        t0 = time.perf_counter()
        conn = sqlite3.connect(raw_db)
        ids = dict(conn.execute("SELECT key, id FROM run"))
        rows = []
        for line in open(results):
            r = json.loads(line)
            rows.append(
                (
                    ids[r["run"]],
                    r["metric"],
                    r["step"],
                    r["value"],
                    0,
                    None,
                    None,
                    time.time(),
                    "raw",
                )
            )
        with conn:
            conn.executemany(
                "INSERT INTO result (run_id, metric, step, value, n_values, subset_digest, budget_json, "
                "recorded_at, source) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                rows,
            )
        conn.close()
        raw = time.perf_counter() - t0

        t0 = time.perf_counter()
        led = Ledger.open(ours_db)
        report = led.ingest([results], force=True)  # one file of many runs: results by hand
        led.close()
        ours = time.perf_counter() - t0
        assert report[0].stored == args.lines
        print(f"{args.lines} result lines, {len(keys)} runs")
        print(f"raw sqlite3 executemany   {raw:8.3f} s")
        print(f"fewshot ingest            {ours:8.3f} s")
        print(f"ratio ingest / raw        {ours / raw:8.2f}x   (target <= 2x)")


if __name__ == "__main__":
    main()
