"""PostgreSQL under a fleet: processes started together at a barrier open, plan, ingest and record
on one ledger, and each gets the documented answer (never an IntegrityError traceback)."""

from __future__ import annotations

import json
import multiprocessing
import traceback
from pathlib import Path
from typing import Any

import pytest

from fewshot.errors import FewshotError
from fewshot.ledger import Ledger

N = 4
CTX = multiprocessing.get_context("spawn")  # fresh interpreters: no engine shared across a fork


def _child(job: str, url: str, arg: str, barrier: Any, out: Any) -> None:
    try:
        barrier.wait(timeout=120)
        if job == "open":
            Ledger.open(url).close()
            answer: object = "opened"
        elif job == "init":
            from fewshot.study import load_study

            with Ledger.open(url, create=True) as led:
                rep = led.plan(load_study(arg))
            answer = ("created" if rep.created else "updated", rep.new_runs)
        elif job == "ingest":
            with Ledger.open(url) as led:
                r = led.ingest_file(arg, force=True)  # by hand, on planned runs
            answer = ("skipped" if r.skipped else "ingested", r.stored, r.unchanged)
        elif job == "record":
            with Ledger.open(url) as led:
                r2 = led.record("wide/reach/n1/s0", "return", float(arg), final=True, force=True)
            answer = ("recorded", r2.stored, r2.unchanged)
        else:
            raise AssertionError(job)
        out.put(("ok", answer))
    except FewshotError as exc:
        out.put(("refused", str(exc)))
    except BaseException:  # noqa: BLE001 - the parent reports whatever went wrong
        out.put(("crash", traceback.format_exc()))


def _together(jobs: list[tuple[str, str, str]]) -> list[tuple[str, object]]:
    """Start one process per job; they pass a barrier together before touching the ledger."""
    barrier = CTX.Barrier(len(jobs))
    out = CTX.Queue()
    procs = [CTX.Process(target=_child, args=(*job, barrier, out)) for job in jobs]
    for p in procs:
        p.start()
    answers = []
    for _ in procs:
        try:
            answers.append(out.get(timeout=300))
        except Exception:  # noqa: BLE001
            pytest.fail("a process gave no answer within 300 s")
    for p in procs:
        p.join(timeout=60)
        if p.is_alive():
            p.kill()
            pytest.fail("a process did not end within 60 s of answering")
    crashes = [a[1] for a in answers if a[0] == "crash"]
    assert not crashes, "\n".join(map(str, crashes))
    return answers


def test_four_processes_create_a_new_ledger_at_once(pg_scratch: str):
    answers = _together([("open", pg_scratch, "")] * N)
    assert answers == [("ok", "opened")] * N
    from sqlalchemy import create_engine, text

    from fewshot.ledger.engine import head_revision, resolve_url

    engine = create_engine(resolve_url(pg_scratch))
    with engine.connect() as conn:
        assert conn.execute(text("SELECT version_num FROM alembic_version")).scalars().all() == [
            head_revision()
        ]
    engine.dispose()


def test_four_processes_upgrade_an_older_ledger_at_once(pg_scratch: str):
    from sqlalchemy import create_engine, text

    from fewshot.ledger.engine import head_revision, resolve_url, upgrade_schema

    engine = create_engine(resolve_url(pg_scratch))
    upgrade_schema(engine, revision="0001")
    with engine.connect() as conn:
        assert conn.execute(text("SELECT version_num FROM alembic_version")).scalar() == "0001"
    answers = _together([("open", pg_scratch, "")] * N)
    assert answers == [("ok", "opened")] * N
    with engine.connect() as conn:
        assert conn.execute(text("SELECT version_num FROM alembic_version")).scalars().all() == [
            head_revision()
        ]
    engine.dispose()


def test_four_inits_of_one_study_at_once(pg_scratch: str, tmp_path: Path, study_file):
    study = study_file(tmp_path)
    answers = _together([("init", pg_scratch, str(study))] * N)
    kinds = sorted(a[1] for a in answers)
    # one process plans the 21 runs; the others find the study planned, as a second init does
    assert kinds == [("created", 21)] + [("updated", 0)] * (N - 1), answers
    with Ledger.open(pg_scratch) as led:
        assert led.counts()["planned"] == 21


@pytest.fixture
def planned(pg_scratch: str, tmp_path: Path, study_file) -> str:
    with Ledger.open(pg_scratch) as led:
        from fewshot.study import load_study

        led.plan(load_study(study_file(tmp_path)))
    return pg_scratch


def test_one_file_ingested_by_four_processes_at_once(planned: str, tmp_path: Path):
    path = tmp_path / "r.jsonl"
    lines = [
        {
            "run": f"wide/reach/n{n}/s{s}",
            "metric": "return",
            "value": float(10 * n + s),
            "final": True,
        }
        for n in (1, 3, 10)
        for s in (0, 1, 2)
    ]
    path.write_text("".join(json.dumps(x) + "\n" for x in lines))
    answers = _together([("ingest", planned, str(path))] * N)
    assert all(a[0] == "ok" for a in answers), answers
    stored = sum(a[1][1] for a in answers)  # type: ignore[index]
    assert stored == len(lines)  # stored once in all; the others skip the file or find it there
    with Ledger.open(planned) as led:
        assert len(led.results(include_running=True)) == len(lines)


def test_record_against_ingest_of_the_same_result(planned: str, tmp_path: Path):
    path = tmp_path / "r.jsonl"
    path.write_text(
        json.dumps({"run": "wide/reach/n1/s0", "metric": "return", "value": 5.0, "final": True})
        + "\n"
    )
    answers = _together([("ingest", planned, str(path)), ("record", planned, "7.0")] * 2)
    refusals = [a[1] for a in answers if a[0] == "refused"]
    # whichever came first stands; every later different value is refused with the usual message
    assert refusals and all("already has 'return'" in str(r) for r in refusals), answers
    with Ledger.open(planned) as led:
        values = led.results(include_running=True)["value"].tolist()
    assert values in ([5.0], [7.0])


def test_nul_characters_in_a_failure_message_are_dropped(planned: str):
    with Ledger.open(planned) as led:
        led.fail("wide/reach/n1/s0", "CUDA\x00 error\x00\n", unclaimed=True)
        assert led.runs().set_index("key").loc["wide/reach/n1/s0", "message"] == "CUDA error\n"
        with pytest.raises(FewshotError, match="NUL"):
            led.done("wide/reach/n1/s0\x00")
