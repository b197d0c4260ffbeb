"""Load and faults: 8 workers at once, and a worker killed mid-run."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

from fewshot.ledger import Ledger
from fewshot.study import load_study

ROOT = Path(__file__).resolve().parent.parent
# A trainer that records several metrics at several steps, through the public API.
WORKER = r"""
import sys
from fewshot.ledger import Ledger
led = Ledger.open(sys.argv[1])
while (c := led.claim(sys.argv[2], lease=600)) is not None:
    for step in (100, 200):
        led.record(c.key, "return", float(step + c.seed), step=step)
        led.record(c.key, "success", 0.5, step=step)
    led.record(c.key, "return", float(c.size), final=True, values=[1.0, 2.0, 3.0], subset_digest=c.subset_digest)
    led.done(c.key)
    print(c.key, flush=True)
"""


def _study(study_file, seeds: int) -> Path:
    return study_file(
        sizes=[1, 2, 3, 4],
        seeds=list(range(seeds)),
        arms={"wide": {"zero_shot": False}},
        metrics=["success"],
    )


def _env() -> dict[str, str]:
    return {**os.environ, "PYTHONPATH": str(ROOT)}


def test_eight_workers_claim_once_and_store_once(ledger_url: str, study_file):
    led = Ledger.open(ledger_url)
    total = led.plan(
        load_study(_study(study_file, 50))
    ).total_runs  # 2 arms x 4 sizes x 50 seeds = 400
    procs = [
        subprocess.Popen(
            [sys.executable, "-c", WORKER, ledger_url, f"w{k}"],
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
            env=_env(),
        )
        for k in range(8)
    ]
    outs = [p.communicate(timeout=600) for p in procs]
    for p, (_, err) in zip(procs, outs, strict=True):
        assert p.returncode == 0, err[-2000:]
        assert "locked" not in err.lower()
    keys = [k for out, _ in outs for k in out.split()]
    assert len(keys) == total == len(set(keys))
    runs = led.runs()
    assert (runs["status"] == "done").all() and (runs["attempts"] == 1).all()
    res = led.results()
    assert len(res) == total * 5 and not res.duplicated(["run", "metric", "step"]).any()
    led.close()


def test_a_killed_worker_loses_its_lease_and_the_run_finishes_once(
    ledger_url: str, wait_until, study_file
):
    led = Ledger.open(ledger_url)
    led.plan(load_study(_study(study_file, 1)))
    # the victim claims with a short lease, then "trains" for a long time and is killed with SIGKILL
    victim = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "fewshot.cli",
            "exec",
            "--worker",
            "victim",
            "--lease",
            "2s",
            "--max-runs",
            "1",
            "--ledger",
            ledger_url,
            "--",
            sys.executable,
            "-c",
            "import time; time.sleep(60)",
        ],
        env=_env(),
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        start_new_session=True,
    )
    wait_until(lambda: led.counts()["running"] == 1, "the victim to claim a run", timeout=120)
    held_run = led.runs(["running"]).iloc[0]
    held = held_run["key"]
    os.killpg(victim.pid, signal.SIGKILL)  # the worker and its trainer die without a word
    victim.wait()
    # the lease expires (the ledger stamps leases with the same clock, time.time())
    expiry = float(held_run["lease_expires"])
    wait_until(lambda: time.time() > expiry, "the victim's lease to expire")
    rescuer = subprocess.run(
        [sys.executable, "-c", WORKER, ledger_url, "rescuer"],
        capture_output=True,
        text=True,
        env=_env(),
        timeout=300,
    )
    assert rescuer.returncode == 0, rescuer.stderr[-2000:]
    runs = led.runs().set_index("key")
    assert runs.loc[held, "status"] == "done" and runs.loc[held, "attempts"] >= 2
    assert (runs["status"] == "done").all()
    res = led.results()
    assert len(res[res["run"] == held]) == 5
    led.close()


def test_exec_never_goes_through_a_shell(tmp_path: Path, study_file):
    import json

    from typer.testing import CliRunner

    from fewshot.cli import app

    ledger = str(tmp_path / "l.sqlite")
    Ledger.open(ledger).plan(load_study(_study(study_file, 1)))
    seen = tmp_path / "argv.json"
    code = (
        f"import json, sys; json.dump(sys.argv[1:], open({str(seen)!r}, 'w')); "
        "from fewshot.writer import ResultWriter; "
        "ResultWriter.from_env().write('return', 1.0, final=True)"
    )
    tricky = ["$HOME", "; touch pwned", "`id`", "a && b", "*"]
    result = CliRunner().invoke(
        app,
        [
            "exec",
            "--worker",
            "w",
            "--max-runs",
            "1",
            "--ledger",
            ledger,
            "--",
            sys.executable,
            "-c",
            code,
            *tricky,
        ],
    )
    assert result.exit_code == 0, result.output
    assert (
        json.loads(seen.read_text()) == tricky
    )  # passed as they are: nothing expanded, nothing run
    assert not (Path.cwd() / "pwned").exists() and not (tmp_path / "pwned").exists()


def test_a_password_in_the_ledger_url_is_never_printed(study_file, pg_scratch: str):
    from typer.testing import CliRunner

    from fewshot.cli import app

    base = pg_scratch
    scheme, rest = base.split("://", 1)
    user_host = rest.split("@", 1)
    user = user_host[0].split(":", 1)[0]
    url = f"{scheme}://{user}:hunter2secret@{user_host[1]}"  # trust authentication ignores the password
    runner = CliRunner()
    out = [
        runner.invoke(app, ["init", str(_study(study_file, 1)), "--ledger", url]),
        runner.invoke(app, ["status", "--ledger", url]),
        runner.invoke(app, ["status", "--ledger", url, "--format", "json"]),
        runner.invoke(app, ["record", "nope/reach/n1/s0", "return=1", "--ledger", url]),
        runner.invoke(app, ["jobs", "--template", "{ledger} {run}", "--ledger", url]),
    ]
    for r in out:
        assert "hunter2secret" not in r.output
    assert "***" in out[1].output
    assert out[4].exit_code == 2 and "holds a password" in out[4].output
