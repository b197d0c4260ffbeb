"""Benchmark: a whole draw of a 1,000,000-episode CSV pool against pandas merely reading it.

Run: python tests/benchmarks/bench_draw.py [--rows N] [--repeat K]
Prints the best time of each side, measured in turns in one run, and their ratio.
Target (issue 2): the whole draw (read, rank 5 seeds, write manifest and id files) within 3x.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from fewshot import DrawSpec, draw_task, write_draw
from fewshot.sampling import hash_ids


def make_pool(path: Path, rows: int) -> None:
    rng = np.random.default_rng(0)
    frame = pd.DataFrame(
        {
            "episode": [f"run-{k:07d}-{h:08x}" for k, h in enumerate(rng.integers(0, 2**32, rows))],
            "return": rng.normal(100, 20, rows).round(3),
            "site": rng.choice(["a", "b", "c", "d"], rows),
        }
    )
    frame.to_csv(path, index=False)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        pool = Path(tmp) / "pool.csv"
        make_pool(pool, args.rows)
        spec = DrawSpec(
            "bench", pool, (1, 3, 5, 10, 100, 1000), (0, 1, 2, 3, 4), id_column="episode"
        )
        read_times, object_times, hash_times, draw_times = [], [], [], []
        for k in range(args.repeat):
            t0 = time.perf_counter()
            frame = pd.read_csv(pool)
            read_times.append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            pd.read_csv(pool, dtype=object)
            object_times.append(time.perf_counter() - t0)
            ids = frame["episode"].tolist()
            t0 = time.perf_counter()
            hash_ids(ids)
            hash_times.append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            write_draw(Path(tmp) / f"out{k}", draw_task(spec))
            draw_times.append(time.perf_counter() - t0)
        r, o, h, d = min(read_times), min(object_times), min(hash_times), min(draw_times)
        print(f"pool: {args.rows} rows, 5 seeds, sizes up to 1000 (best of {args.repeat})")
        print(f"pandas.read_csv (default dtypes)     {r:8.3f} s")
        print(f"pandas.read_csv (dtype=object)       {o:8.3f} s")
        print(f"SHA-256 of every id alone (hashlib)  {h:8.3f} s")
        print(f"fewshot draw, end to end             {d:8.3f} s")
        print(f"ratio draw / default read            {d / r:8.2f}x   (target <= 3x)")
        print(f"ratio draw / object read             {d / o:8.2f}x")
        print(f"share of the draw spent hashing      {h / d:8.0%}")


if __name__ == "__main__":
    main()
