"""Many processes at once: every run claimed once, every result stored once; killed ingests."""

from __future__ import annotations

import json
import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

from fewshot.ledger import Ledger
from fewshot.study import load_study

WORKER = r"""
import sys
from fewshot.ledger import Ledger
led = Ledger.open(sys.argv[1])
name = sys.argv[2]
n = 0
while (c := led.claim(name, lease=600)) is not None:
    led.record(
        c.key, "return", float(c.seed), final=True, values=[1.0, 2.0], subset_digest=c.subset_digest
    )
    led.record(c.key, "return", 0.5, step=10)
    led.record(c.key, "success", 1.0, final=True)
    led.done(c.key)
    print(c.key, flush=True)
    n += 1
led.close()
"""


def _big_study(study_file) -> Path:
    return study_file(
        sizes=[1, 2, 3, 4, 5],
        seeds=list(range(100)),
        arms={"wide": {"zero_shot": False}},
        metrics=["success"],
    )


def test_four_processes_claim_each_run_once(tmp_path: Path, ledger_url: str, study_file):
    led = Ledger.open(ledger_url)
    report = led.plan(load_study(_big_study(study_file)))
    assert report.total_runs == 1000
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parent.parent)}
    procs = [
        subprocess.Popen(
            [sys.executable, "-c", WORKER, ledger_url, f"w{k}"],
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
            env=env,
        )
        for k in range(4)
    ]
    outputs = [p.communicate(timeout=300) for p in procs]
    for p, (_, err) in zip(procs, outputs, strict=True):
        assert p.returncode == 0, err
        assert "locked" not in err
    claimed = [line for out, _ in outputs for line in out.split()]
    assert len(claimed) == 1000 and len(set(claimed)) == 1000
    assert all(len(out.split()) > 0 for out, _ in outputs)  # every worker got some work
    runs = led.runs()
    assert (runs["status"] == "done").all() and (runs["attempts"] == 1).all()
    results = led.results()
    assert len(results) == 3000
    assert not results.duplicated(["run", "metric", "step"]).any()
    led.close()


def test_killed_ingest_then_rerun_stores_each_result_once(
    tmp_path: Path, ledger_url: str, study_file
):
    led = Ledger.open(ledger_url)
    led.plan(load_study(_big_study(study_file)))
    keys = list(led.runs()["key"])
    led.close()
    results = tmp_path / "results"
    results.mkdir()
    expected = 0
    for part in range(4):
        lines = [
            json.dumps(
                {
                    "run": k,
                    "metric": "return",
                    "value": float(i),
                    "step": part,
                    "values": [1.0, 2.0, 3.0],
                }
            )
            for i, k in enumerate(keys)
        ]
        (results / f"part{part}.jsonl").write_text("\n".join(lines) + "\n")
        expected += len(lines)
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parent.parent)}
    # by hand, on planned runs: --force
    cmd = [sys.executable, "-m", "fewshot.cli", "ingest", str(results), "--force"]
    cmd += ["--ledger", ledger_url]
    rng = random.Random(7)
    for _ in range(20):  # kill at random points: during start-up, parsing, or inside a transaction
        proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        time.sleep(rng.uniform(0.2, 1.6))
        proc.send_signal(signal.SIGKILL)
        proc.wait()
    done = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    led = Ledger.open(ledger_url)
    frame = led.results(include_running=True)
    assert len(frame) == expected
    assert not frame.duplicated(["run", "metric", "step"]).any()
    assert (frame["n_values"] == 3).all()
    led.close()
