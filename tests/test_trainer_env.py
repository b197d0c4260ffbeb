"""What a trainer is told: the arm's checkpoint (resolved against the study file's folder when it
names a file or folder there), the task's pool file, the arm's attributes as JSON and the primary
metric, in the work loop's environment and as job-line placeholders; read once per loop."""

from __future__ import annotations

import json
import shlex
import sys
from pathlib import Path

import pytest

from fewshot.worker.fields import resolve_checkpoint

DUMP = r"""
import json, os, pathlib
out = pathlib.Path(os.environ["DUMP_DIR"]) / (os.environ["FEWSHOT_RUN"].replace("/", "__") + ".json")
out.write_text(json.dumps({k: v for k, v in os.environ.items() if k.startswith("FEWSHOT_")}))
"""

# wide: a checkpoint file next to the study and a text attribute; scratch: a hub-style name that
# names nothing on disk, so it must reach the trainer as written.
ARMS = {
    "wide": {"checkpoint": "ckpt/wide.pt", "attributes": {"params": 1e6, "recipe": "mixed-v2"}},
    "scratch": {"checkpoint": "org/base-model"},
}


@pytest.fixture
def planned(tmp_path: Path, study_file, cli, monkeypatch) -> tuple[Path, str]:
    """Two runs (one per arm), planned from a study given by a relative path, as users type it."""
    folder = tmp_path / "study"
    folder.mkdir()
    (folder / "ckpt").mkdir()
    (folder / "ckpt" / "wide.pt").write_bytes(b"weights")
    study_file(folder, sizes=[1], seeds=[0], arms=ARMS)
    ledger = str(tmp_path / "l.sqlite")
    monkeypatch.chdir(folder)
    made = cli("init", "study.toml", "--ledger", ledger)
    assert made.exit_code == 0, made.output
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)  # the worker runs from another folder than init did
    return folder, ledger


def test_the_work_loop_tells_the_trainer_checkpoint_pool_attributes_and_metric(
    tmp_path: Path, planned, cli, monkeypatch
):
    folder, ledger = planned
    trainer, dumps = tmp_path / "dump.py", tmp_path / "dumps"
    trainer.write_text(DUMP, encoding="utf-8")
    dumps.mkdir()
    monkeypatch.setenv("DUMP_DIR", str(dumps))
    cli("exec", "--worker", "w", "--ledger", ledger, "--", sys.executable, trainer)
    wide = json.loads((dumps / "wide__reach__n1__s0.json").read_text())
    scratch = json.loads((dumps / "scratch__reach__n1__s0.json").read_text())
    # a relative checkpoint that exists next to the study file: that file, as an absolute path
    assert wide["FEWSHOT_CHECKPOINT"] == str((folder / "ckpt" / "wide.pt").resolve())
    assert scratch["FEWSHOT_CHECKPOINT"] == "org/base-model"  # names nothing there: as written
    pool = str((folder / "pool.csv").resolve())
    assert wide["FEWSHOT_POOL"] == scratch["FEWSHOT_POOL"] == pool
    assert json.loads(wide["FEWSHOT_ATTRIBUTES"]) == {"params": 1e6, "recipe": "mixed-v2"}
    assert json.loads(scratch["FEWSHOT_ATTRIBUTES"]) == {}
    assert wide["FEWSHOT_METRIC"] == scratch["FEWSHOT_METRIC"] == "return"
    # the table of fields is the one source: every variable it names is set
    from fewshot.worker.fields import ENV_ONLY, RUN_FIELDS

    names = {v for v, _ in RUN_FIELDS.values()} | {v for v, _ in ENV_ONLY.values()}
    assert names - {"FEWSHOT_RESULTS"} <= set(wide)  # RESULTS only with a results folder


def test_job_lines_take_checkpoint_pool_and_metric_placeholders(planned, cli):
    folder, ledger = planned
    got = cli(
        "jobs",
        "--template",
        "train --from {checkpoint} --pool {pool} --metric {metric} --run {run}",
        "--ledger",
        ledger,
    )
    assert got.exit_code == 0, got.output
    # the POSIX shell's own word splitting (shlex) reads the values back unchanged
    lines = {shlex.split(line)[-1]: shlex.split(line) for line in got.stdout.splitlines()}
    wide, scratch = lines["wide/reach/n1/s0"], lines["scratch/reach/n1/s0"]
    assert wide[:3] == ["train", "--from", str((folder / "ckpt" / "wide.pt").resolve())]
    assert scratch[2] == "org/base-model"
    assert wide[4] == str((folder / "pool.csv").resolve()) and wide[6] == "return"
    bad = cli("jobs", "--template", "train {attributes}", "--ledger", ledger)
    assert bad.exit_code == 2 and "unknown placeholder(s) {attributes}" in bad.output


def test_the_study_fields_are_read_once_per_loop(tmp_path: Path, study_file, monkeypatch):
    from fewshot.ledger import Ledger
    from fewshot.study import load_study
    from fewshot.worker.loop import run_claims

    url = str(tmp_path / "l.sqlite")
    led = Ledger.open(url)
    led.plan(load_study(study_file(sizes=[1, 3], seeds=[0, 1])))  # 8 runs
    calls = {"arms": 0, "tasks": 0}
    for name in calls:
        real = getattr(led, name)

        def counted(real=real, name=name):  # type: ignore[no-untyped-def]
            calls[name] += 1
            return real()

        monkeypatch.setattr(led, name, counted)
    outcomes = run_claims(led, "w", [sys.executable, "-c", "pass"], ledger_url=url)
    assert len(outcomes) == 8 and calls == {"arms": 1, "tasks": 1}
    led.close()


@pytest.mark.parametrize(
    ("written", "expected"),
    [
        (None, ""),
        ("", ""),
        ("ckpt/wide.pt", "{folder}/ckpt/wide.pt"),  # exists next to the study: absolute
        ("ckpt", "{folder}/ckpt"),  # a folder counts too
        ("ckpt/later.pt", "ckpt/later.pt"),  # not there (yet): as written
        ("org/base-model", "org/base-model"),  # a hub name
        ("https://example.org/w.pt", "https://example.org/w.pt"),  # a URL
        ("/abs/path/w.pt", "/abs/path/w.pt"),  # absolute: as written
    ],
)
def test_the_checkpoint_rule(tmp_path: Path, written, expected):
    (tmp_path / "ckpt").mkdir()
    (tmp_path / "ckpt" / "wide.pt").write_bytes(b"w")
    want = expected.replace("{folder}", str(tmp_path.resolve()))
    assert resolve_checkpoint(written, tmp_path) == want
    if written:  # no known study folder (a ledger planned before it was stored): as written
        assert resolve_checkpoint(written, None) == written
