"""The tidy results table: the columns the ledger writes and the statistics read.

:meth:`fewshot.Ledger.results` returns one row per stored result with exactly
:data:`RESULT_COLUMNS`, in that order (by default only live results of done runs; ``run_status``
and ``void`` say what a wider read holds); :func:`fewshot.stats.scores.run_scores` and everything
after it read this table (and nothing of the ledger). A results table built another way (a CSV
export read back, a table from another tool) works with the statistics when it has these columns.

This module imports nothing, so anything may import it.
"""

from __future__ import annotations

__all__ = [
    "MIN_TRUSTED_SEEDS",
    "INTERVAL_METHODS",
    "DEFAULT_INTERVAL_METHOD",
    "RESULT_COLUMNS",
    "RESULT_COLUMN_DOCS",
    "RUN_COLUMNS",
    "RUN_KEY_COLUMNS",
    "ARM_COLUMNS",
]

#: One line per column of the results table: its meaning and type.
RESULT_COLUMN_DOCS: dict[str, str] = {
    "study": "the study's name (text)",
    "run": "the run's key, e.g. 'wide/reach/n10/s2' (text)",
    "arm": "the arm (pretrained model or baseline) the run trains (text)",
    "role": "the arm's role: 'pretrained' or 'baseline' (text)",
    "task": "the task the run trains on (text)",
    "group": "the task's group, for stratified aggregates (text)",
    "size": "training episodes in the run's subset; 0 for a zero-shot run (integer)",
    "seed": "the draw seed, which is also the training seed (integer)",
    "replicate": "the replicate number of a repeated (arm, task, size, seed) (integer)",
    "metric": "the metric's name, e.g. 'return' (text)",
    "step": "the training step of the result; missing (<NA>) for the final evaluation (Int64)",
    "value": "the result, finite (float)",
    "n_values": "how many per-episode values the trainer sent with it; 0 when none (integer)",
    "subset_digest": "the digest of the subset the run trained on (text)",
    "budget": "the trainer's budget record as JSON text, or None",
    "recorded_at": "when the result was stored (UTC timestamp)",
    "run_status": "the run's status when read: done, running, failed or planned (text); the "
    "statistics read results of done runs only",
    "final_from_step": "for a final result taken from the run's last reported step when it was "
    "marked done, that step; missing (<NA>) otherwise (Int64)",
    "forced": "stored by hand on a run that no attempt held (`force`) (bool)",
    "void": "voided: kept, but left out of every statistic (bool)",
    "void_at": "when it was voided (UTC timestamp; missing unless void)",
    "void_reason": "why it was voided (text; None unless void)",
    "void_by": "who voided it, user@host (text; None unless void)",
}

#: The results table's columns, in order (a list, as pandas takes it).
RESULT_COLUMNS: list[str] = list(RESULT_COLUMN_DOCS)

#: The columns that identify one run within a study (a run's score is keyed by these).
RUN_KEY_COLUMNS: tuple[str, ...] = ("arm", "role", "task", "group", "size", "seed", "replicate")

#: :meth:`fewshot.Ledger.arms`: an arm's own columns; one more column per attribute of the arms,
#: so no attribute may take one of these names (the study loader refuses it).
ARM_COLUMNS: tuple[str, ...] = ("arm", "role", "checkpoint", "zero_shot")

#: :meth:`fewshot.Ledger.runs`: one row per planned run.
RUN_COLUMNS: list[str] = [
    "key",
    "arm",
    "role",
    "task",
    "size",
    "seed",
    "replicate",
    "status",
    "worker",
    "lease_expires",
    "attempts",
    "message",
    "subset_file",
    "subset_digest",
    "retries",
]

#: Below this many seeds a cell's interval is not to be trusted, and outputs say so (a common
#: practice: with two seeds a spread, and so any interval, rests on one difference).
MIN_TRUSTED_SEEDS = 3

#: The interval methods the statistics offer, and the default (here, with no numpy, so the
#: command line's help can read them without loading the statistics).
INTERVAL_METHODS = ("percentile", "basic", "bca", "t", "expanded", "bootstrap-t", "hall")
# Measured with tests/benchmarks/coverage.py (the README shows the table): no method reaches
# 93-97% at 5 seeds on all three test distributions. The t interval is exact for normal seeds,
# always finite and well-behaved; Hall's and the bootstrap-t interval cover skewed seeds a point
# or two better but give erratic, very wide intervals on single samples of 3-5 seeds.
DEFAULT_INTERVAL_METHOD = "t"
