"""Every benchmark script still runs, at its smallest settings (they call the library the way
users do, so a change of its rules can break them silently). Nothing here times anything: the
scripts print their measurements, and only their exit status and a line of output are checked."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
BENCH = ROOT / "tests" / "benchmarks"

SMALLEST = {  # script -> (arguments, a fragment its output must hold)
    "bench_bootstrap.py": (["--resamples", "200"], "scipy"),
    "bench_compare.py": (["--repeat", "1"], "compare"),
    "bench_demo.py": (["--workers", "1", "--skip-full"], "demo"),
    "bench_draw.py": (["--rows", "2000", "--repeat", "1"], "fewshot draw, end to end"),
    "bench_ingest.py": (["--lines", "300"], "fewshot ingest"),
    "bench_load.py": (["--seeds", "2", "--workers", "2"], "claimed once and stored once: True"),
    "bench_scale.py": (
        ["--scales", "small", "--commands", "export,compare", "--resamples", "200"],
        "compare",
    ),
    "bench_startup.py": (["--repeat", "1"], "typer"),
    "bench_work.py": (["--runs", "4"], "once they run"),
}


def test_every_script_is_listed():
    scripts = {p.name for p in BENCH.glob("bench_*.py")}
    assert scripts == set(SMALLEST)


@pytest.mark.parametrize("script", sorted(SMALLEST))
def test_the_script_runs(script: str, tmp_path: Path):
    args, fragment = SMALLEST[script]
    env = {k: v for k, v in os.environ.items() if k != "FEWSHOT_TEST_PG"}  # SQLite only here
    done = subprocess.run(
        [sys.executable, str(BENCH / script), *args],
        cwd=tmp_path,
        env=env,
        capture_output=True,
        text=True,
        timeout=900,
    )
    assert done.returncode == 0, (done.stdout + done.stderr)[-3000:]
    assert fragment in done.stdout + done.stderr, (done.stdout + done.stderr)[-3000:]
