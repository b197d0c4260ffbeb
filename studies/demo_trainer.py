"""The demo study's trainer as a standalone script: the worked example to copy for your own.

`fewshot exec` runs it once per claimed run, with the run in its environment:

    FEWSHOT_RUN, FEWSHOT_ARM, FEWSHOT_TASK, FEWSHOT_SIZE, FEWSHOT_SEED, FEWSHOT_REPLICATE
    FEWSHOT_SUBSET          the file of the run's episode ids, one a line
    FEWSHOT_SUBSET_DIGEST   that subset's digest (reported back; the ledger checks it)
    FEWSHOT_RESULTS         where to append result lines (with `fewshot exec --results DIR`)

It trains (fine-tunes the arm's checkpoint on the subset, or trains from scratch), evaluates,
and appends one result line with the standard-library writer; `fewshot exec --results`
ingests the file when the script exits 0. For the demo folder written by `fewshot demo`:

    fewshot exec --worker laptop --results fewshot-demo/results --ledger fewshot-demo/ledger.sqlite \\
        -- python studies/demo_trainer.py fewshot-demo

Replace the call to `train_run` with your own training and evaluation; keep the rest.
"""

from __future__ import annotations

import os
import sys

from fewshot.demo.trainer import train_run
from fewshot.writer import ResultWriter


def main(argv: list[str]) -> int:
    if len(argv) != 2:
        print(
            "usage: demo_trainer.py DEMO_FOLDER   (run me through `fewshot exec`)", file=sys.stderr
        )
        return 2
    env = os.environ
    try:
        arm, task = env["FEWSHOT_ARM"], env["FEWSHOT_TASK"]
        size, seed = int(env["FEWSHOT_SIZE"]), int(env["FEWSHOT_SEED"])
        replicate, subset = int(env.get("FEWSHOT_REPLICATE", "0")), env["FEWSHOT_SUBSET"]
    except KeyError as missing:
        print(f"{missing} is not set: run me through `fewshot exec`", file=sys.stderr)
        return 2
    mean, per_episode = train_run(argv[1], arm, task, size, seed, replicate, subset)
    ResultWriter.from_env().write(
        "return", mean, final=True, values=per_episode, budget={"episodes": size}
    )
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
