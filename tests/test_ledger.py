"""The ledger: planning and re-planning, claims and leases, the result rules, ingest."""

from __future__ import annotations

import json
import time
from pathlib import Path

import pytest

from fewshot.errors import InvalidInput
from fewshot.ledger import (
    Ledger,
    LedgerError,
    ResultFileError,
    ResultRefused,
    StudyChangeRefused,
    UnknownRun,
)
from fewshot.sampling import subset_digest
from fewshot.sampling.manifest import load_manifest, verify_subset
from fewshot.study import load_study


@pytest.fixture
def planned(tmp_path: Path, ledger_url: str, study_file) -> tuple[Ledger, Path]:
    path = study_file(tmp_path)
    led = Ledger.open(ledger_url)
    led.plan(load_study(path))
    yield led, path
    led.close()


def test_plan_draws_subsets_and_plans_every_run(planned):
    led, path = planned
    runs = led.runs()
    assert len(runs) == 21 and set(runs["status"]) == {"planned"}
    assert led.study == "mini"
    # the id files exist and match their digests and the manifest
    manifest = load_manifest(path.parent / "draws" / "mini" / "reach.manifest.json")
    for r in runs.itertuples():
        ids = Path(r.subset_file).read_text().split()
        assert len(ids) == r.size
        assert subset_digest(ids) == r.subset_digest
        assert verify_subset(manifest, ids, r.seed, r.size).matches
    # paired design: every arm uses the same subset for a (task, seed, size)
    same = runs[runs["size"] == 3].groupby("seed")["subset_digest"].nunique()
    assert (same == 1).all()


def test_replan_adds_and_refuses(planned, tmp_path: Path, dump, study_file):
    led, path = planned
    again = led.plan(load_study(path))
    assert again.new_runs == 0 and again.total_runs == 21
    grown = {"seeds": [0, 1, 2, 3], "sizes": [0, 1, 3, 10, 30]}
    study_file(path.parent, **grown)
    more = led.plan(load_study(path))
    assert more.new_seeds == (3,) and more.new_sizes == (30,)
    assert more.total_runs == 5 * 4 + 4 * 4  # wide: 5 sizes x 4 seeds; scratch: 4 x 4 (no size 0)
    assert more.new_runs == more.total_runs - 21
    before = dump(led._url)
    for edits, fragment in [
        ({"task": {"keep_top": 90}}, "filter changed"),
        ({"metric": "success"}, "metric changed"),
        ({"arms": {"wide": {"checkpoint": "ckpt/other.pt"}}}, "checkpoint changed"),
        ({"seeds": [0, 1, 2]}, r"seed\(s\) 3 were planned before"),
    ]:
        study_file(path.parent, **{**grown, **edits})
        with pytest.raises(StudyChangeRefused, match=fragment):
            led.plan(load_study(path))
        assert dump(led._url) == before


def test_changed_pool_is_refused(planned, dump):
    led, path = planned
    pool = path.parent / "pool.csv"
    before = dump(led._url)
    pool.write_text(pool.read_text().replace("ep005,", "ep005x,"))
    with pytest.raises(StudyChangeRefused, match="pool changed since its subsets were drawn"):
        led.plan(load_study(path))
    assert dump(led._url) == before


def test_claims_are_unique_and_leases_expire(planned, wait_until):
    led, _ = planned
    first = led.claim("w1", lease=0.2)
    second = led.claim("w2", lease=60)
    assert first.key != second.key and first.attempt == 1
    # leases are stamped with time.time(): wait until this one has passed
    wait_until(lambda: time.time() > first.lease_expires, "the 0.2 s lease to expire")
    again = led.claim("w3", lease=60)
    assert again.key == first.key and again.attempt == 2  # the expired lease made it claimable
    assert not led.heartbeat(first.key, "w1")  # w1 no longer holds it
    assert led.heartbeat(again.key, "w3")
    led.record(again.key, "return", 1.0, final=True, attempt=again.attempt)
    led.done(again.key)
    led.fail(second.key, "out of memory\n" * 1000)
    st = led.status()
    assert st.totals["done"] == 1 and st.totals["failed"] == 1
    assert len(st.failed.iloc[0]["message"]) <= 4000


def test_fail_refuses_a_run_no_worker_claimed(planned):
    led, _ = planned
    key = led.runs().iloc[0]["key"]
    with pytest.raises(InvalidInput, match="never claimed"):
        led.fail(key, "nothing ran")
    assert led.runs().set_index("key").loc[key, "status"] == "planned"
    led.fail(key, "ran outside the claims", unclaimed=True)  # e.g. a pinned scheduler job
    assert led.runs().set_index("key").loc[key, "status"] == "failed"


def test_claim_until_empty(planned):
    led, _ = planned
    keys = []
    while (c := led.claim("w")) is not None:
        keys.append(c.key)
    assert len(keys) == len(set(keys)) == 21
    assert led.claim("w") is None


def test_result_rules(planned, dump):
    led, _ = planned
    run = led.runs().iloc[3]
    key, digest = run["key"], run["subset_digest"]
    # by hand on a planned run: `force` (a claim's attempt would need none)
    first = led.record(
        key, "return", 50.0, final=True, values=[49.0, 51.0], subset_digest=digest, force=True
    )
    assert first.stored == first.forced == 1
    assert led.record(key, "return", 50.0, final=True, values=[49.0, 51.0]).unchanged == 1
    assert led.record(key, "return", 10.0, step=100, force=True).stored == 1  # another step
    before = dump(led._url)
    refusals = [
        (dict(metric="return", value=51.0), ResultRefused, "already has 'return' = 50.0"),
        (dict(metric="return", value=50.0, values=[1.0]), ResultRefused, "already has"),
        (dict(metric="return", value=float("nan")), ResultRefused, "finite"),
        (dict(metric="return", value=float("inf")), ResultRefused, "finite"),
        (
            dict(metric="return", value=1.0, values=[1.0, float("nan")]),
            ResultRefused,
            "values\\[1\\]",
        ),
        (
            dict(metric="return", value=1.0, step=7, subset_digest="0" * 64),
            ResultRefused,
            "other episodes",
        ),
        (dict(metric="x", value=1.0, subset_digest="xyz"), ResultRefused, "64 lowercase hex"),
        (dict(metric="x", value=1.0, step=-2), ResultRefused, "step"),
        (dict(metric="", value=1.0), ResultRefused, "metric"),
        (dict(metric="retrun", value=1.0, step=7), ResultRefused, "Did you mean 'return'"),
        (dict(metric="return", value=1.0), ResultRefused, "not marked final"),
        (dict(metric="return", value=1.0, step=3, final=True), ResultRefused, "also has `step`"),
    ]
    for kwargs, error, fragment in refusals:
        with pytest.raises(error, match=fragment):
            call = {"final": "step" not in kwargs, "force": True, **kwargs}
            if fragment == "not marked final":
                call.pop("final")
            led.record(key, **call)
        assert dump(led._url) == before
    with pytest.raises(
        UnknownRun, match="no run 'wide/rech/n10/s1'. Did you mean 'wide/reach/n10/s1'"
    ):
        led.record("wide/rech/n10/s1", "return", 1.0, final=True)
    assert led.record(key, "return", 51.0, final=True, replace=True, force=True).replaced == 1
    led.done(key)
    frame = led.results()
    final = frame[(frame["run"] == key) & frame["step"].isna()].iloc[0]
    assert final["value"] == 51.0 and final["n_values"] == 0


def test_results_table_columns(planned):
    led, _ = planned
    runs = led.runs()
    for r in runs.itertuples():
        led.record(
            r.key,
            "return",
            float(r.size),
            final=True,
            values=[1.0, 2.0],
            budget={"steps": 10},
            force=True,
            done=True,
        )
    frame = led.results()
    assert list(frame.columns) == [
        "study",
        "run",
        "arm",
        "role",
        "task",
        "group",
        "size",
        "seed",
        "replicate",
        "metric",
        "step",
        "value",
        "n_values",
        "subset_digest",
        "budget",
        "recorded_at",
        "run_status",
        "final_from_step",
        "forced",
        "void",
        "void_at",
        "void_reason",
        "void_by",
    ]
    assert len(frame) == 21 and set(frame["role"]) == {"pretrained", "baseline"}
    assert set(frame["group"]) == {"arm"} and (frame["n_values"] == 2).all()
    assert json.loads(frame["budget"].iloc[0]) == {"steps": 10}


def _lines(keys: list[str], value: float = 1.0) -> str:
    return "".join(
        json.dumps({"run": k, "metric": "return", "value": value, "final": True}) + "\n"
        for k in keys
    )


def test_ingest_jsonl_and_csv_idempotent(planned, tmp_path: Path):
    led, _ = planned
    keys = list(led.runs()["key"])
    tmp_path = tmp_path / "results"
    tmp_path.mkdir()
    jl = tmp_path / "a.jsonl"
    jl.write_text(_lines(keys[:10]) + "\n")
    csvf = tmp_path / "b.csv"
    csvf.write_text(
        "run,metric,value,step,values,final\n"
        + "".join(f'{k},success,0.5,,"[0.0, 1.0]",true\n' for k in keys[10:15])
    )
    seen = []
    reports = led.ingest(
        [tmp_path],
        progress=lambda done, total, r: seen.append((done, total)),
        force=True,  # by hand, on planned runs
        new_metric=True,  # success is not declared
    )
    assert seen == [(1, 2), (2, 2)]  # the progress callback sees every file, in order
    assert [(Path(r.path).name, r.stored, r.skipped) for r in reports] == [
        ("a.jsonl", 10, False),
        ("b.csv", 5, False),
    ]
    assert [r.skipped for r in led.ingest([jl, csvf])] == [True, True]
    # a new file repeating known results stores nothing new
    again = tmp_path / "again.jsonl"
    again.write_text(_lines(keys[:3]) + _lines(keys[15:16]))
    rep = led.ingest_file(again, force=True)
    assert rep.stored == 1 and rep.unchanged == 3
    assert len(led.results(include_running=True)) == 16
    assert len(led.results()) == 0  # no run is done


@pytest.mark.parametrize(
    ("content", "fragment"),
    [
        (
            '{"run": "wide/reach/n1/s0", "metric": "return", "value": 1, "final": true}\n{"run": "wide/reach/n1/s1", "metr',
            "line 2: not valid JSON",
        ),
        (
            '{"run": "wide/reach/n1/s0", "metric": "return", "value": NaN, "final": true}\n',
            "finite",
        ),
        ('{"run": "wide/reach/n1/s0", "metric": "return", "final": true}\n', "missing 'value'"),
        (
            '{"run": "wide/reach/n1/s0", "metric": "return", "value": 1, "final": true, "extra": 2}\n',
            "unknown field",
        ),
        (
            '{"run": "nope/reach/n1/s0", "metric": "return", "value": 1, "final": true}\n',
            "has no run 'nope/reach/n1/s0'",
        ),
        ("[1, 2]\n", "must be a JSON object"),
        (
            '{"run": "wide/reach/n1/s0", "metric": "return", "value": 1, "final": true}\n'
            '{"run": "wide/reach/n1/s0", "metric": "return", "value": 2, "final": true}\n',
            "given twice with different values",
        ),
        (
            '{"run": "wide/reach/n1/s0", "metric": "return", "value": "' + "9" * (1 << 20) + '"}\n',
            "characters long",
        ),
    ],
)
def test_a_bad_file_writes_nothing(planned, tmp_path: Path, content, fragment, dump):
    led, _ = planned
    good = tmp_path / "good.jsonl"
    good.write_text(_lines(["wide/reach/n3/s0"]))
    led.ingest_file(good, force=True)
    before = dump(led._url)
    bad = tmp_path / "bad.jsonl"
    bad.write_text(content)
    with pytest.raises((ResultFileError, ResultRefused, UnknownRun)) as info:
        led.ingest_file(bad)
    assert fragment in str(info.value) and str(bad) in str(info.value)
    assert dump(led._url) == before


def test_non_utf8_and_empty_results_files(planned, tmp_path: Path):
    led, _ = planned
    bad = tmp_path / "bad.jsonl"
    bad.write_bytes(b'{"run": "\xff"}\n')
    with pytest.raises(ResultFileError, match="line 1: not valid UTF-8"):
        led.ingest_file(bad)
    empty = tmp_path / "empty.jsonl"
    empty.write_text("")
    assert led.ingest_file(empty).stored == 0


def test_several_studies_need_a_choice(tmp_path: Path, ledger_url: str, dump, study_file):
    a = tmp_path / "a"
    b = tmp_path / "b"
    a.mkdir()
    b.mkdir()
    led = Ledger.open(ledger_url)
    led.plan(load_study(study_file(a)))
    led.plan(load_study(study_file(b, name="other", arms={"wide": {"name": "deep"}})))
    led.close()
    with pytest.raises(
        LedgerError, match=r"several studies \(mini, other\); pick one with `study`"
    ):
        Ledger.open(ledger_url).claim("w")
    other = Ledger.open(ledger_url, study="other")
    assert other.claim("w").key == "deep/reach/n0/s0"
    mini = Ledger.open(ledger_url, study="mini")
    before = dump(ledger_url)
    with pytest.raises(UnknownRun, match="belongs to another study in this ledger, not to 'mini'"):
        mini.record("deep/reach/n1/s0", "return", 1.0, final=True)
    assert dump(ledger_url) == before
    with pytest.raises(LedgerError, match="no study 'third'"):
        Ledger.open(ledger_url, study="third").claim("w")
    other.close()
    mini.close()


def test_empty_ledger_says_what_to_do(tmp_path: Path, ledger_url: str):
    with pytest.raises(LedgerError, match="holds no study yet. Run `fewshot init"):
        Ledger.open(ledger_url).claim("w")


def test_missing_ledger_folder(tmp_path: Path):
    with pytest.raises(LedgerError, match="does not exist"):
        Ledger.open(tmp_path / "no" / "such" / "ledger.sqlite")


def test_the_filled_ledger_fixture_holds_one_result_per_run(filled_ledger, cli):
    res = filled_ledger.results()
    runs = filled_ledger.runs()
    assert len(res) == len(runs) == 21 and list(res.columns) == __import__("fewshot").RESULT_COLUMNS
    wide = res[(res["arm"] == "wide") & (res["size"] == 10) & (res["seed"] == 2)]
    assert wide["value"].tolist() == [102.0]  # 10 * size + seed, as the fixture documents
    shown = cli("status", "--ledger", filled_ledger.connect_url)
    assert shown.exit_code == 0, shown.output
