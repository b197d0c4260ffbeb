"""Start-up time of the ``fewshot`` command against typer alone, measured side by side.

Runs ``python -c "import typer"``, a two-command typer app's ``--help`` (the floor of any typer
command line) and ``python -m fewshot.cli --help`` alternately, several times each in fresh
interpreters, and prints the median wall time of each and its ratio to ``import typer``. The goal
(issue 12) is a ratio within 3; nothing is asserted, since timings depend on the machine.

    python tests/benchmarks/bench_startup.py [--repeat 7]
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import time

# The floor of any typer command line: a two-command app printing its help (typer loads rich's
# markdown and traceback modules to render help, which ``import typer`` alone does not).
MINIMAL_APP = """
import typer
app = typer.Typer()
@app.command()
def one(x: int = 1) -> None:
    "One."
@app.command()
def two(y: int = 1) -> None:
    "Two."
app()
"""

COMMANDS = {
    "import typer": [sys.executable, "-c", "import typer"],
    "2-command typer app --help": [sys.executable, "-c", MINIMAL_APP, "--help"],
    "fewshot --help": [sys.executable, "-m", "fewshot.cli", "--help"],
    "fewshot --version": [sys.executable, "-m", "fewshot.cli", "--version"],
}


def _once(argv: list[str]) -> float:
    start = time.perf_counter()
    subprocess.run(argv, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=True)
    return time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=7, help="runs of each command (default 7)")
    args = parser.parse_args()
    for argv in COMMANDS.values():  # warm the file cache so the first timing is not an outlier
        _once(argv)
    times: dict[str, list[float]] = {name: [] for name in COMMANDS}
    for _ in range(args.repeat):  # alternate, so a busy moment affects every command alike
        for name, argv in COMMANDS.items():
            times[name].append(_once(argv))
    base = statistics.median(times["import typer"])
    for name, ts in times.items():
        med = statistics.median(ts)
        print(f"{name:<27} median {med * 1000:7.1f} ms   ratio to typer {med / base:5.2f}")


if __name__ == "__main__":
    main()
