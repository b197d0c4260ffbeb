"""The demo's trainer: fine-tune (or train from scratch) on a run's subset, then evaluate.

It knows nothing of the ledger: it gets the run's arm, task, size, seed and the file of the
subset's episode ids, exactly what ``fewshot exec`` hands any trainer, and returns the mean
return with the per-episode returns behind it.
"""

from __future__ import annotations

import pickle
from functools import lru_cache
from pathlib import Path

import numpy as np

from fewshot.demo.policy import evaluate, fine_tune
from fewshot.demo.scenario import eval_starts, load_scenario, stable_seed

__all__ = ["train_run"]


@lru_cache(maxsize=8)
def _checkpoint(path: str):  # type: ignore[no-untyped-def]
    with open(path, "rb") as f:
        return pickle.load(f)  # our own checkpoint, written by the scenario


@lru_cache(maxsize=8)
def _pool(path: str) -> tuple[dict[str, int], np.ndarray, np.ndarray, np.ndarray]:
    data = np.load(path)
    ids = {str(i): k for k, i in enumerate(data["ids"])}
    return ids, data["obs"].astype(float), data["act"].astype(float), data["live"]


def train_run(
    folder: str | Path,
    arm: str,
    task: str,
    size: int,
    seed: int,
    replicate: int,
    subset_file: str | Path,
) -> tuple[float, list[float]]:
    """Train one run of the demo study and return (mean return, per-episode returns)."""
    root = Path(folder)
    config, tasks = load_scenario(root)
    target = tasks[task]
    ids = [
        line.strip()
        for line in Path(subset_file).read_text(encoding="utf-8").splitlines()
        if line.strip()
    ]
    if len(ids) != size:
        raise ValueError(f"the subset file holds {len(ids)} ids, but the run's size is {size}")
    start = None if arm == "scratch" else _checkpoint(str(root / "checkpoints" / f"{arm}.pkl"))
    if size == 0:
        model = start
    else:
        index, obs, act, live = _pool(str(root / "pools" / f"{task}.npz"))
        rows = [index[i] for i in ids]
        model = fine_tune(
            start,
            obs[rows],
            act[rows],
            live[rows],
            passes=config.passes,
            seed=stable_seed(arm, task, size, seed, replicate) % 2**31,
        )
    returns = evaluate(target, model, eval_starts(target, config.eval_episodes))
    return float(returns.mean()), [float(r) for r in returns]
