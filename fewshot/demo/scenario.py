"""The demo's invented study: docking robots, three pretraining mixtures and a from-scratch baseline.

``write_scenario(folder, quick)`` writes everything a user's study would have: the study file,
a pool of expert episodes per held-out task (a CSV the sampler reads, with the trajectories
beside it in an .npz), the pretrained checkpoints, and the tasks' floor (a random policy) and
expert references measured in the simulator.
"""

from __future__ import annotations

import json
import pickle
import zlib
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from fewshot import InvalidInput
from fewshot.demo.policy import demonstrations, pretrain
from fewshot.demo.sim import Task, expert_actions, random_actions, rollout, starts

__all__ = [
    "DemoConfig",
    "FULL",
    "QUICK",
    "TARGETS",
    "write_scenario",
    "load_scenario",
    "eval_starts",
    "STUDY_NAME",
]

STUDY_NAME = "dock-demo"

TARGETS = (
    Task("bay-north", dock=(-1.5, 1.0), motor=0.35, steer=2.0, facing=2.5),
    Task("bay-east", dock=(1.6, -0.4), motor=0.45, steer=1.9, facing=-0.3),
    Task("bay-low", dock=(0.2, -1.7), motor=0.4, steer=1.7, facing=-1.9),
)


@dataclass(frozen=True)
class DemoConfig:
    """How big the demo study is.

    Attributes
    ----------
    name : str
        ``full`` or ``quick``.
    sizes, seeds : tuple of int
    targets : int
        How many of :data:`TARGETS` are held out.
    pool, keep_top : int
        Expert episodes per target task, and how many of the best the study keeps.
    source_tasks, source_episodes, pretrain_passes : int
        Pretraining data per mixture and passes over it.
    passes : int
        Fine-tuning passes over a run's episodes.
    eval_episodes : int
        Evaluation rollouts per run.
    """

    name: str
    sizes: tuple[int, ...]
    seeds: tuple[int, ...]
    targets: int
    pool: int
    keep_top: int
    source_tasks: int
    source_episodes: int
    pretrain_passes: int
    passes: int
    eval_episodes: int


FULL = DemoConfig("full", (0, 1, 3, 10, 30, 100), (0, 1, 2, 3, 4), 3, 200, 150, 20, 10, 30, 30, 32)
QUICK = DemoConfig("quick", (0, 1, 3, 10, 30), (0, 1, 2), 2, 90, 60, 12, 8, 25, 25, 24)

ARMS = (
    ("broad-mix", "pretrained", "docking tasks of every gain and bay direction"),
    ("narrow-mix", "pretrained", "docking tasks of one robot model, bays facing one way"),
    ("mirrored-mix", "pretrained", "a different domain: robots whose steering is mirrored"),
    ("scratch", "baseline", "no pretraining"),
)


def stable_seed(*parts: object) -> int:
    """A seed from names, the same on every machine (CRC-32 of the joined parts)."""
    return zlib.crc32("/".join(map(str, parts)).encode())


def eval_starts(task: Task, n: int) -> np.ndarray:
    """The fixed evaluation starts of a task (the same for every run)."""
    return starts(np.random.default_rng(stable_seed("eval", task.name)), n)


def references(task: Task, config: DemoConfig) -> tuple[float, float]:
    """The task's floor (a random policy) and expert (the scripted controller) mean returns."""
    ev = eval_starts(task, config.eval_episodes)
    rng = np.random.default_rng(stable_seed("floor", task.name))
    floor = rollout(task, lambda o: random_actions(rng, len(o)), ev)
    expert = rollout(task, lambda o: expert_actions(task, o), ev)
    return float(floor.mean()), float(expert.mean())


def _source_tasks(kind: str, k: int, rng: np.random.Generator) -> list[Task]:
    out = []
    for i in range(k):
        dock = (float(rng.uniform(-2, 2)), float(rng.uniform(-2, 2)))
        facing = float(rng.uniform(-np.pi, np.pi))
        if kind == "broad-mix":
            out.append(
                Task(
                    f"b{i}",
                    dock,
                    motor=float(rng.uniform(0.5, 1.6)),
                    steer=float(rng.uniform(0.5, 1.6)),
                    facing=facing,
                )
            )
        elif kind == "narrow-mix":
            out.append(
                Task(
                    f"n{i}",
                    (float(rng.uniform(1, 2)), float(rng.uniform(1, 2))),
                    motor=1.3,
                    steer=0.8,
                    facing=float(rng.uniform(0, 1.5)),
                )
            )
        else:
            out.append(
                Task(
                    f"m{i}",
                    dock,
                    motor=float(rng.uniform(0.5, 1.6)),
                    steer=float(rng.uniform(0.5, 1.6)),
                    mirrored=True,
                    facing=facing,
                )
            )
    return out


def _study_text(config: DemoConfig, refs: dict[str, tuple[float, float]]) -> str:
    lines = [
        "# The demo study: written by `fewshot demo` (an invented docking scenario).",
        f'name = "{STUDY_NAME}"',
        'metric = "return"',
        "higher_is_better = true",
        f"sizes = [{', '.join(map(str, config.sizes))}]",
        f"seeds = [{', '.join(map(str, config.seeds))}]",
        'baseline = "scratch"',
        "",
    ]
    for name, role, _ in ARMS:
        lines += ["[[arms]]", f'name = "{name}"', f'role = "{role}"']
        if role == "pretrained":
            lines.append(f'checkpoint = "checkpoints/{name}.pkl"')
        lines.append("")
    for task in TARGETS[: config.targets]:
        floor, expert = refs[task.name]
        lines += [
            "[[tasks]]",
            f'name = "{task.name}"',
            f'pool = "pools/{task.name}.csv"',
            'id_column = "episode"',
            f"keep_top = {config.keep_top}",
            'rank_by = "return"',
            f"floor = {floor:.4f}",
            f"expert = {expert:.4f}",
            'group = "docking"',
            "",
        ]
    return "\n".join(lines)


DEMO_MARK = ".fewshot-demo"
"""The file that marks a folder as a demo's own; the demo writes into no other folder."""


def _claim_folder(folder: Path) -> None:
    """Make ``folder`` the demo's, or refuse: the demo writes only into a new or empty folder,
    or one an earlier demo made (which holds the mark), so it never overwrites a user's files."""
    mark = folder / DEMO_MARK
    if mark.is_file():
        return
    if (folder / "scenario.json").is_file() and (folder / "ledger.sqlite").is_file():
        mark.write_text("This folder was written by `fewshot demo`.\n", encoding="utf-8")
        return  # a demo folder written before the mark existed
    present = sorted(p.name for p in folder.iterdir())
    if present:
        shown = ", ".join(present[:3]) + (
            f" and {len(present) - 3} more" if len(present) > 3 else ""
        )
        raise InvalidInput(
            f"{folder}: this folder holds files that are not a fewshot demo's ({shown}); the demo "
            "writes only into a new or empty folder, or one it made. Pick another folder."
        )
    mark.write_text("This folder was written by `fewshot demo`.\n", encoding="utf-8")


def write_scenario(folder: Path, config: DemoConfig) -> Path:
    """Write the scenario into ``folder`` (resumable: an existing scenario of the same config is kept).

    Returns the study file.
    """
    if folder.exists() and not folder.is_dir():
        raise InvalidInput(
            f"{folder} is a file, not a folder. Give --out a folder (new or a demo's)."
        )
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InvalidInput(f"{folder}: cannot create the demo folder ({exc.strerror}).") from None
    marker = folder / "scenario.json"
    study_file = folder / "study.toml"
    _claim_folder(folder)
    if marker.exists():
        made = json.loads(marker.read_text())["config"]
        if made["name"] != config.name:
            raise InvalidInput(
                f"{folder} holds a {made['name']} demo; run again with{'' if made['name'] == 'quick' else 'out'} "
                "--quick, or pick another --out folder."
            )
        return study_file
    rng = np.random.default_rng(stable_seed("scenario", config.name))
    (folder / "checkpoints").mkdir(exist_ok=True)
    (folder / "pools").mkdir(exist_ok=True)
    for name, role, _ in ARMS:
        if role != "pretrained":
            continue
        data = [
            demonstrations(
                t, config.source_episodes, rng, rng.uniform(0.05, 0.3, config.source_episodes)
            )
            for t in _source_tasks(name, config.source_tasks, rng)
        ]
        obs, act, live = (np.concatenate([d[k] for d in data]) for k in (1, 2, 3))
        model = pretrain(obs, act, live, passes=config.pretrain_passes, seed=stable_seed(name))
        with open(folder / "checkpoints" / f"{name}.pkl", "wb") as f:
            pickle.dump(model, f)
    refs = {}
    for task in TARGETS[: config.targets]:
        noise = rng.uniform(0.3, 1.0, config.pool)
        ret, obs, act, live = demonstrations(task, config.pool, rng, noise)
        ids = np.array([f"{task.name}-{k:04d}" for k in range(config.pool)])
        pd.DataFrame({"episode": ids, "return": ret.round(4), "noise": noise.round(3)}).to_csv(
            folder / "pools" / f"{task.name}.csv", index=False
        )
        np.savez_compressed(
            folder / "pools" / f"{task.name}.npz",
            ids=ids,
            obs=obs.astype(np.float32),
            act=act.astype(np.float32),
            live=live,
        )
        refs[task.name] = references(task, config)
    study_file.write_text(_study_text(config, refs), encoding="utf-8")
    marker.write_text(
        json.dumps(
            {"config": asdict(config), "tasks": [asdict(t) for t in TARGETS[: config.targets]]},
            indent=1,
        )
    )
    return study_file


def load_scenario(folder: Path) -> tuple[DemoConfig, dict[str, Task]]:
    """The config and target tasks a scenario folder was written with."""
    marker = folder / "scenario.json"
    if not marker.exists():
        raise InvalidInput(
            f"{folder} is not a demo folder (no scenario.json). Run `fewshot demo --out {folder}`."
        )
    data = json.loads(marker.read_text())
    cfg = data["config"]
    config = DemoConfig(**{**cfg, "sizes": tuple(cfg["sizes"]), "seeds": tuple(cfg["seeds"])})
    tasks = {
        t["name"]: Task(**{**t, "dock": tuple(t["dock"]), "drift": tuple(t["drift"])})
        for t in data["tasks"]
    }
    return config, tasks
