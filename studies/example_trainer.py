"""A stand-in trainer showing how any training script works with fewshot.

`fewshot exec` starts it once per claimed run with the run in its environment:

    FEWSHOT_RUN             the run key, e.g. broad-mix/dock-east/n10/s2
    FEWSHOT_ARM, FEWSHOT_TASK, FEWSHOT_SIZE, FEWSHOT_SEED, FEWSHOT_REPLICATE
    FEWSHOT_SUBSET          the file of the run's episode ids, one a line
    FEWSHOT_SUBSET_DIGEST   that subset's digest (the ledger checks it)
    FEWSHOT_RESULTS         where to append result lines (with `fewshot exec --results DIR`)

It needs nothing but the standard library and fewshot's one-file writer (copy
`fewshot/writer.py` beside your trainer if fewshot is not installed there).
Instead of fine-tuning a model it scores the run by the mean return of its
training episodes in the pool, so the example runs in milliseconds: replace
`train_and_evaluate` with your own code. Exit 0 on success; any other exit status
marks the run failed, with the tail of stderr as its message.

    fewshot init studies/dock-transfer.toml
    fewshot exec --worker laptop --results runs -- python studies/example_trainer.py
"""

from __future__ import annotations

import csv
import os
import sys
from pathlib import Path

try:
    from fewshot.writer import ResultWriter
except ImportError:  # a trainer that vendored the writer file
    from writer import ResultWriter  # type: ignore[no-redef]

POOL = Path(__file__).resolve().parent / "pools" / "dock-east.csv"


def train_and_evaluate(episode_ids: list[str]) -> tuple[float, list[float]]:
    """Stand-in for fine-tuning and evaluation: the returns of the training episodes."""
    if not episode_ids:
        return 0.0, []
    wanted = set(episode_ids)
    with open(POOL, newline="", encoding="utf-8") as f:
        returns = [float(row["return"]) for row in csv.DictReader(f) if row["episode"] in wanted]
    return sum(returns) / len(returns), returns


def main() -> int:
    subset = os.environ.get("FEWSHOT_SUBSET")
    if not subset:
        print("FEWSHOT_SUBSET is not set: run me through `fewshot exec`", file=sys.stderr)
        return 2
    ids = [
        line.strip()
        for line in Path(subset).read_text(encoding="utf-8").splitlines()
        if line.strip()
    ]
    score, per_episode = train_and_evaluate(ids)
    out = ResultWriter.from_env()
    out.write(
        "return", score, final=True, values=per_episode or None, budget={"episodes": len(ids)}
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
