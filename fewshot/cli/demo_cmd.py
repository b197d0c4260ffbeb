"""``fewshot demo``: the whole job on an invented docking study, in a few minutes on a laptop CPU."""

from __future__ import annotations

import os
import time
from pathlib import Path
from typing import Annotated

import typer

from fewshot.cli.common import err, out, progress, reporting
from fewshot.cli.options import STATS_FLAGS
from fewshot.errors import InvalidInput


def demo(
    *,
    out_dir: Annotated[
        Path, typer.Option("--out", help="Folder for the demo study (reused to resume).")
    ] = Path("fewshot-demo"),
    quick: Annotated[
        bool, typer.Option("--quick", help="A smaller study (about half a minute).")
    ] = False,
    workers: Annotated[
        int,
        typer.Option("--workers", help="Trainer processes (default: the CPU count, at most 4)."),
    ] = 0,
) -> None:
    """Run a whole few-shot transfer study end to end and write its report."""
    from fewshot.analysis import study_findings
    from fewshot.cli.compare_cmd import print_findings
    from fewshot.demo.run import analyse_demo, prepare_demo, run_workers

    start = time.monotonic()
    with reporting(STATS_FLAGS):
        if workers < 0:
            raise InvalidInput(
                f"--workers must be 1 or more (0: one per CPU, at most 4). Got {workers}."
            )
        n = workers or min(4, os.cpu_count() or 1)
        err.print(
            f"writing the demo study in {out_dir} (pretraining three policies)..."
            if not (out_dir / "scenario.json").exists()
            else f"resuming the demo study in {out_dir}"
        )
        demo_run = prepare_demo(out_dir, quick=quick)
        with progress() as bar:
            job = bar.add_task(f"runs ({n} workers)", total=demo_run.total)
            run_workers(demo_run, n, on_tick=lambda done, total: bar.update(job, completed=done))
        result = analyse_demo(demo_run)
    print_findings(study_findings(result.reports))
    counts = result.counts
    led = demo_run.ledger
    out.print(
        f"\n{counts['done']} runs done, {counts['failed']} failed, in {time.monotonic() - start:.0f} s."
        f"\nReport (figures and every table): {result.report}\nDetails:\n"
        f"  fewshot curves --ledger {led} --normalised\n"
        f"  fewshot compare --ledger {led}\n"
        f"  fewshot status --ledger {led}",
        markup=False,
        highlight=False,
    )
