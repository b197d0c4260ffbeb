"""Benchmark: whole CLI commands on synthetic studies of growing size (issue 16).

Run: python tests/benchmarks/bench_scale.py [--scales small,medium,large] [--keep FOLDER]
     [--resamples 10000] [--commands export,curves,across,compare,report]

Scales (arms x tasks x sizes x seeds): small 4x3x6x5 (~350 runs with the baseline's size-0 runs),
medium 6x10x7x5 (~2,100), large 8x40x8x10 (~25,600), huge 8x50x10x25 (~100,000; only when asked).
Each study is planned and filled through the Python API (``Ledger.plan``, ``Ledger.record_lines``)
with one final score per run drawn from a smooth curve plus seed noise. Each command then runs in
its own process; the script prints its CPU seconds (user + system, from ``os.wait4``), CPU
microseconds per run, the ratio to ``export`` of the same ledger, and the peak resident memory.
Targets (issue 16, printed, not asserted): at ~25,600 runs curves, curves --across-tasks and compare
within 5x of export, report within 15x; per-run cost from ~2,100 to ~25,600 runs grows < 1.5x;
peak memory under 2 GB.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from fewshot.ledger import Ledger  # noqa: E402
from fewshot.ledger.results import check_line  # noqa: E402
from fewshot.study import load_study  # noqa: E402

SCALES = {
    "small": (4, 3, 6, 5),
    "medium": (6, 10, 7, 5),
    "large": (8, 40, 8, 10),
    "huge": (8, 50, 10, 25),
}

COMMANDS = {
    "export": ["export", "--format", "csv"],
    "curves": ["curves", "--format", "json"],
    "across": ["curves", "--across-tasks", "--format", "json"],
    "compare": ["compare", "--format", "json"],
    "report": ["report"],
}


def study_text(arms: int, tasks: int, sizes: int, seeds: int) -> str:
    size_list = [2**k for k in range(sizes)]
    lines = [
        'name = "scale"',
        'metric = "return"',
        "higher_is_better = true",
        f"sizes = {[0, *size_list]}",
        f"seeds = {list(range(seeds))}",
        'baseline = "base"',
        "",
        "[[arms]]",
        'name = "base"',
        'role = "baseline"',
    ]
    for a in range(1, arms):
        lines += [
            "",
            "[[arms]]",
            f'name = "arm{a}"',
            'role = "pretrained"',
            "zero_shot = false",
            f'checkpoint = "ckpt/arm{a}.pt"',
        ]
    for t in range(tasks):
        lines += [
            "",
            "[[tasks]]",
            f'name = "task{t:02d}"',
            'pool = "pool.csv"',
            'id_column = "episode"',
            "floor = 0.0",
            "expert = 100.0",
            f'group = "g{t % 4}"',
        ]
    return "\n".join(lines) + "\n"


def build(folder: Path, shape: tuple[int, int, int, int]) -> tuple[Path, int]:
    """Plan and fill a study in ``folder``; return the ledger path and the number of runs."""
    arms, tasks, sizes, seeds = shape
    folder.mkdir(parents=True, exist_ok=True)
    rows = 2 ** (sizes - 1) + 20
    with open(folder / "pool.csv", "w") as f:
        f.write("episode,return\n")
        f.writelines(f"ep{k:05d},{(k * 37) % 101}.5\n" for k in range(rows))
    (folder / "study.toml").write_text(study_text(*shape), encoding="utf-8")
    ledger = folder / "ledger.sqlite"
    led = Ledger.open(ledger)
    led.plan(load_study(folder / "study.toml"))
    runs = led.runs()
    rng = np.random.default_rng(16)
    arm_gain = {a: 5.0 * k for k, a in enumerate(sorted(set(runs["arm"])))}
    task_gain = {t: 2.0 * (k % 7) for k, t in enumerate(sorted(set(runs["task"])))}
    batch = []
    for key, arm, task, size in zip(
        runs["key"], runs["arm"], runs["task"], runs["size"], strict=True
    ):
        mean = 20.0 + arm_gain[arm] + task_gain[task] + 40.0 * (1 - np.exp(-int(size) / 16))
        value = float(mean + rng.normal(0.0, 6.0))
        batch.append(check_line(str(key), "return", value, final=True))
        if len(batch) == 2000:
            led.record_lines(batch, done=True, force=True)  # filled by hand: no claims
            batch = []
    if batch:
        led.record_lines(batch, done=True, force=True)
    led.close()
    return ledger, len(runs)


def timed(args: list[str], folder: Path) -> tuple[float, float, float]:
    """CPU seconds, wall seconds and peak resident MB of one CLI command."""
    t0 = time.perf_counter()
    with open(folder / "out.txt", "wb") as out, open(folder / "err.txt", "wb") as err:
        proc = subprocess.Popen(
            [sys.executable, "-m", "fewshot.cli", *args], stdout=out, stderr=err
        )
        _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t0
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        raise SystemExit((folder / "err.txt").read_text()[-3000:])
    return usage.ru_utime + usage.ru_stime, wall, usage.ru_maxrss / 1024


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--scales", default="small,medium,large")
    parser.add_argument("--commands", default=",".join(COMMANDS))
    parser.add_argument("--resamples", type=int, default=10_000)
    parser.add_argument("--keep", default=None, help="build (or reuse) the studies in this folder")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        base = Path(args.keep) if args.keep else Path(tmp)
        print(
            f"{'scale':8} {'runs':>7} {'command':8} {'cpu s':>8} {'wall s':>8} {'us/run':>9} "
            f"{'x export':>9} {'peak MB':>8}"
        )
        for name in args.scales.split(","):
            folder = base / name
            ledger = folder / "ledger.sqlite"
            if ledger.exists():
                led = Ledger.open(ledger, create=False)
                n = len(led.runs())
                led.close()
            else:
                t0 = time.perf_counter()
                ledger, n = build(folder, SCALES[name])
                print(f"# {name}: {n} runs planned and filled in {time.perf_counter() - t0:.1f} s")
            export_cpu = None
            for cmd in args.commands.split(","):
                extra = ["--ledger", str(ledger)]
                if cmd in ("curves", "across", "compare", "report"):
                    extra += ["--resamples", str(args.resamples)]
                if cmd == "report":
                    extra += ["--out", str(folder / "report.html")]
                cpu, wall, peak = timed(COMMANDS[cmd] + extra, folder)
                if cmd == "export":
                    export_cpu = cpu
                ratio = f"{cpu / export_cpu:9.2f}" if export_cpu else f"{'-':>9}"
                print(
                    f"{name:8} {n:7d} {cmd:8} {cpu:8.2f} {wall:8.2f} {1e6 * cpu / n:9.1f} "
                    f"{ratio} {peak:8.0f}",
                    flush=True,
                )
                if cmd == "report":
                    size = (folder / "report.html").stat().st_size / 1e6
                    print(f"# {name}: report.html is {size:.2f} MB")


if __name__ == "__main__":
    main()
