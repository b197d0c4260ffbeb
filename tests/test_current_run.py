"""The in-trainer helper of the standard-library writer: ``current_run()`` reads the run's
``FEWSHOT_*`` environment, ``subset_ids()`` its id file, ``log()`` appends result lines (a step or
final, with the attempt and the subset's digest); outside a run it names the missing variable."""

from __future__ import annotations

import hashlib
import json
import math
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

import fewshot.writer as writer_module
from fewshot.worker.fields import ENV_ONLY, RUN_FIELDS
from fewshot.writer import NotInARun, current_run

ROOT = Path(__file__).resolve().parent.parent
IDS = ["ep007", "ep002", "ep011"]


@pytest.fixture
def env(tmp_path: Path) -> dict[str, str]:
    ids = tmp_path / "ids.txt"
    ids.write_text("\r\n".join(IDS) + "\r\n", encoding="utf-8")  # CR LF, as from another system
    return {
        "FEWSHOT_RUN": "wide/reach/n3/s1",
        "FEWSHOT_ARM": "wide",
        "FEWSHOT_TASK": "reach",
        "FEWSHOT_SIZE": "3",
        "FEWSHOT_SEED": "1",
        "FEWSHOT_REPLICATE": "0",
        "FEWSHOT_ATTEMPT": "2",
        "FEWSHOT_SUBSET": str(ids),
        "FEWSHOT_METRIC": "return",
        "FEWSHOT_CHECKPOINT": "org/base-model",
        "FEWSHOT_POOL": str(tmp_path / "pool.csv"),
        "FEWSHOT_ATTRIBUTES": '{"params": 1000000.0, "recipe": "mixed-v2"}',
        "FEWSHOT_RESULTS": str(tmp_path / "results.jsonl"),
        "FEWSHOT_STUDY": "mini",
    }


def test_the_run_fields_come_from_the_environment(env):
    run = current_run(env)
    assert (run.key, run.arm, run.task, run.metric) == (
        "wide/reach/n3/s1",
        "wide",
        "reach",
        "return",
    )
    assert (run.size, run.seed, run.replicate, run.attempt) == (3, 1, 0, 2)
    assert run.checkpoint == "org/base-model" and run.pool == env["FEWSHOT_POOL"]
    assert run.attributes == {"params": 1e6, "recipe": "mixed-v2"} and run.study == "mini"
    assert run.subset_ids() == IDS  # in the file's order, CR LF dropped
    bare = current_run(
        {k: v for k, v in env.items() if k not in ("FEWSHOT_CHECKPOINT", "FEWSHOT_ATTRIBUTES")}
    )
    assert bare.checkpoint is None and bare.attributes == {}


def test_log_writes_step_and_final_lines_with_attempt_and_digest(env):
    run = current_run(env)
    run.log("return", 40, step=100)
    run.log("success", 0.5, step=100, values=[0, 1])
    run.log("return", 71.5, final=True, values=[70.0, 73.0])
    lines = [json.loads(x) for x in Path(env["FEWSHOT_RESULTS"]).read_text().splitlines()]
    # the digest as `LC_ALL=C sort ids.txt | sha256sum` computes it (hashlib's SHA-256 of the
    # sorted ids, one a line): the published rule of the subset digest
    digest = hashlib.sha256("".join(i + "\n" for i in sorted(IDS)).encode()).hexdigest()
    common = {"run": "wide/reach/n3/s1", "subset_digest": digest, "attempt": 2}
    assert lines == [
        {**common, "metric": "return", "value": 40.0, "step": 100},
        {**common, "metric": "success", "value": 0.5, "step": 100, "values": [0.0, 1.0]},
        {**common, "metric": "return", "value": 71.5, "final": True, "values": [70.0, 73.0]},
    ]
    assert "step" not in lines[2]  # a final evaluation has no step


@pytest.mark.parametrize(
    ("kwargs", "fragment"),
    [
        ({}, "give the training step of this evaluation (step=N), or mark the run's final"),
        ({"step": 5, "final": True}, "a final evaluation has no step"),
        ({"step": -1}, "step must be a whole number of 0 or more"),
        ({"step": True}, "step must be a whole number"),
        ({"final": True, "value": math.nan}, "must be a finite number"),
        ({"final": True, "value": "0.9"}, "must be a finite number"),
        ({"final": True, "values": [1.0, math.inf]}, "must all be finite numbers"),
        ({"final": True, "metric": " "}, "metric must be a metric name such as 'return'"),
    ],
)
def test_a_malformed_result_is_refused_and_nothing_is_written(env, kwargs, fragment):
    run = current_run(env)
    args = {"metric": "return", "value": 0.5, **kwargs}
    with pytest.raises(ValueError) as info:
        run.log(args.pop("metric"), args.pop("value"), **args)
    assert fragment in str(info.value)
    assert not Path(env["FEWSHOT_RESULTS"]).exists()


def test_outside_a_run_the_message_names_the_missing_variable(env):
    with pytest.raises(NotInARun, match="FEWSHOT_RUN is not set: current_run"):
        current_run({})
    for var in ("FEWSHOT_METRIC", "FEWSHOT_ATTEMPT", "FEWSHOT_SUBSET"):
        with pytest.raises(NotInARun, match=f"^{var} is not set"):
            current_run({k: v for k, v in env.items() if k != var})
    with pytest.raises(NotInARun, match="FEWSHOT_SIZE must be a whole number. Got 'ten'"):
        current_run({**env, "FEWSHOT_SIZE": "ten"})
    with pytest.raises(NotInARun, match="FEWSHOT_ATTRIBUTES must be a JSON object"):
        current_run({**env, "FEWSHOT_ATTRIBUTES": "[1, 2]"})
    no_file = current_run({k: v for k, v in env.items() if k != "FEWSHOT_RESULTS"})
    with pytest.raises(NotInARun, match="FEWSHOT_RESULTS is not set"):
        no_file.log("return", 1.0, final=True)


def test_outside_a_run_a_script_fails_naming_the_variable(tmp_path: Path):
    clean = {k: v for k, v in os.environ.items() if not k.startswith("FEWSHOT_")}
    done = subprocess.run(
        [sys.executable, "-c", "from fewshot.writer import current_run; current_run()"],
        env={**clean, "PYTHONPATH": str(ROOT)},
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode != 0
    assert "NotInARun: FEWSHOT_RUN is not set" in done.stderr


def test_the_writer_reads_the_variables_of_the_fields_table():
    # writer.py may import only the standard library, so it spells the variables out; they must
    # be the work loop's (fewshot.worker.fields), all of them except the planned digest (the
    # writer hashes the id file itself) and the ledger URL (a trainer never needs the password)
    table = {v for v, _ in RUN_FIELDS.values()} | {v for v, _ in ENV_ONLY.values()}
    read = set(writer_module._REQUIRED.values()) | set(writer_module._OPTIONAL.values())
    assert read <= table
    assert table - read == {"FEWSHOT_SUBSET_DIGEST", "FEWSHOT_LEDGER"}


# ------------------------------------------------------------------ under the work loop


def _readme_trainer() -> str:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    m = re.search(r"<!-- the ten-line trainer[^>]*-->\n```python\n(.*?)```", text, re.S)
    assert m, "README.md lost its ten-line trainer (marked <!-- the ten-line trainer ... -->)"
    return m.group(1)


def test_the_readme_trainer_is_ten_lines():
    code = [ln for ln in _readme_trainer().splitlines() if ln.strip()]
    assert len(code) <= 10, code
    compile(_readme_trainer(), "README trainer", "exec")


def test_the_readme_trainer_under_exec_has_its_lines_ingested(tmp_path: Path, study_file, cli):
    study = study_file(sizes=[1, 3], seeds=[0])
    ledger = str(tmp_path / "l.sqlite")
    assert cli("init", study, "--ledger", ledger).exit_code == 0
    trainer = tmp_path / "trainer.py"
    trainer.write_text(_readme_trainer(), encoding="utf-8")
    args = ["--worker", "w", "--results", str(tmp_path / "res"), "--ledger", ledger]
    ran = cli("exec", *args, "--", sys.executable, trainer)
    assert ran.exit_code == 0, ran.output
    from fewshot.ledger import Ledger

    with Ledger.open(ledger) as led:
        runs, results = led.runs(), led.results()
    assert (runs["status"] == "done").all(), runs[["key", "status", "message"]]
    # per run: three evaluations at steps 1..3 and one final value, all of the primary metric
    assert set(results["metric"]) == {"return"} and len(results) == 4 * len(runs)
    for _, rows in results.groupby("run"):
        assert sorted(rows["step"].dropna().astype(int)) == [1, 2, 3]
        assert rows["step"].isna().sum() == 1
