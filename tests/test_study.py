"""Study files: parsing, the plan, and errors that name file, key and line."""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from fewshot.study import StudyError, load_study, run_key


def test_the_study_factory_refuses_edits_that_do_not_apply(tmp_path: Path, study_file):
    # the fixture's named edits reach the loaded study, and an edit that cannot apply fails
    study = load_study(
        study_file(seeds=[4, 5], arms={"wide": {"name": "deep"}}, task={"reserve": 2})
    )
    assert study.seeds == (4, 5) and study.arms[0].name == "deep" and study.tasks[0].reserve == 2
    with pytest.raises(KeyError, match="no arm 'nope'"):
        study_file(arms={"nope": {"role": "baseline"}})
    with pytest.raises(KeyError, match="no arm 'nope' to drop"):
        study_file(drop_arms=("nope",))
    with pytest.raises(KeyError, match="no key 'lowest_first' in the task to remove"):
        study_file(task={"lowest_first": None})
    with pytest.raises(KeyError, match="no top-level key 'caution' to remove"):
        study_file(caution=None)
    with pytest.raises(TypeError, match="either the raw text or named edits"):
        study_file(text="name = 'x'\n", seeds=[1])


def test_parse_and_plan(tmp_path: Path, study_file):
    study = load_study(study_file())
    assert study.name == "mini" and study.sizes == (0, 1, 3, 10) and study.seeds == (0, 1, 2)
    wide, scratch = study.arms
    assert wide.zero_shot and not scratch.zero_shot  # size 0 by default only for pretrained arms
    assert wide.attributes == {"params": 1e6}
    task = study.tasks[0]
    assert task.pool == tmp_path.resolve() / "pool.csv" and task.group == "arm"
    runs = list(study.runs())
    # wide: 4 sizes x 3 seeds; scratch: 3 sizes (no zero-shot) x 3 seeds
    assert len(runs) == 12 + 9
    assert runs[0].key == "wide/reach/n0/s0"
    assert study.draws_dir == tmp_path.resolve() / "draws" / "mini"


def test_replicates_add_a_suffix(study_file):
    study = load_study(study_file(replicates=2))
    keys = [r.key for r in study.runs()]
    assert len(keys) == 42 and keys[:2] == ["wide/reach/n0/s0/r0", "wide/reach/n0/s0/r1"]
    assert run_key("a", "t", 1, 2, 0, 1) == "a/t/n1/s2"


@pytest.mark.parametrize(
    ("edits", "fragment"),
    [
        ({"_before": "sizez = [1]\n"}, "line 1: sizez: unknown key. Did you mean 'sizes'?"),
        ({"_after": 'name = "x"\n'}, "not valid TOML"),
        ({"_before": "[[arms]\n"}, "not valid TOML"),
        (
            {"arms": {"scratch": {"checkpont": "x"}}},
            "arms[1].checkpont: unknown key. Did you mean 'checkpoint'?",
        ),
        (
            {"task": {"keep_top": None, "keep_topp": 100}},
            "tasks[0].keep_topp: unknown key. Did you mean 'keep_top'?",
        ),
        ({"sizes": "1,3"}, "sizes: must be a list of whole numbers"),
        ({"sizes": [1, 1]}, "sizes: must be distinct"),
        ({"sizes": [-1, 3]}, "sizes: must be distinct whole numbers from 0 (zero-shot) to 2**63-1"),
        ({"seeds": [-4]}, "seeds: must be distinct whole numbers from 0"),
        ({"higher_is_better": "yes"}, "higher_is_better: must be true or false"),
        ({"arms": {"scratch": {"name": "wide"}}}, "arms[1].name: 'wide' is named twice"),
        ({"arms": {"wide": {"name": "wide base"}}}, "arm name 'wide base' is not valid"),
        ({"arms": {"wide": {"name": "../wide"}}}, "arm name '../wide' is not valid"),
        ({"task": {"name": "<b>reach</b>"}}, "task name '<b>reach</b>' is not valid"),
        (
            {"baseline": "scratc"},
            "'scratc' is not one of the arms (wide, scratch). Did you mean 'scratch'?",
        ),
        ({"arms": {"wide": {"role": "teacher"}}}, "must be 'pretrained' or 'baseline'"),
        ({"task": {"keep_top": None}}, "keep_top and rank_by go together"),
        ({"task": {"expert": math.nan}}, "expert: must be a finite number"),
        ({"task": {"expert": 0.0}}, "floor and expert must differ"),
        (
            {"arms": {"wide": {"attributes": {"params": [1, 2]}}}},
            "attribute 'params' must be a finite number",
        ),
        ({"metric": None}, "the file needs a 'metric' key"),
        ({"task": {"pool": None}}, "tasks[0] needs a 'pool' key"),
        ({"task": {"group": "a b"}}, "group name 'a b' is not valid"),
    ],
)
def test_bad_study_files(tmp_path: Path, edits, fragment, study_file, study_text):
    edits = dict(edits)
    before, after = edits.pop("_before", ""), edits.pop("_after", "")
    path = study_file(tmp_path, text=before + study_text(**edits) + after)
    with pytest.raises(StudyError) as info:
        load_study(path)
    assert fragment in str(info.value)
    assert str(path) in str(info.value)


def test_error_line_points_at_the_key(tmp_path: Path, study_file):
    path = study_file(tmp_path, arms={"scratch": {"zero_shot": "no"}})
    text = path.read_text(encoding="utf-8")
    line = next(n for n, t in enumerate(text.splitlines(), 1) if t.startswith("zero_shot"))
    with pytest.raises(
        StudyError, match=rf"line {line}: arms\[1\].zero_shot: must be true or false"
    ):
        load_study(path)


def test_missing_and_non_utf8_study_files(tmp_path: Path):
    with pytest.raises(StudyError, match="study file not found"):
        load_study(tmp_path / "none.toml")
    p = tmp_path / "bad.toml"
    p.write_bytes(b'name = "x"\nmetric = "\xff"\n')
    with pytest.raises(StudyError, match="line 2: not valid UTF-8"):
        load_study(p)
    empty = tmp_path / "empty.toml"
    empty.write_text("")
    with pytest.raises(StudyError, match="needs a 'name' key"):
        load_study(empty)


def test_plan_counts_match_the_runs(tmp_path: Path, study_file):
    # counted by hand from the study: wide (zero-shot) 4 sizes, scratch 3 sizes; 3 seeds each
    from fewshot import check_study

    study = check_study(study_file())
    plan = study.plan_counts()
    assert plan.sizes == (0, 1, 3, 10)
    assert plan.cells == {("wide", "reach"): (3, 3, 3, 3), ("scratch", "reach"): (0, 3, 3, 3)}
    assert plan.total == 21 == len(list(study.runs())) and not plan.few_seeds
    assert study.plan_dict()["runs"] == 21
    (tmp_path / "two").mkdir()
    two = load_study(study_file(tmp_path / "two", seeds=[0, 1]))
    assert two.plan_counts().few_seeds  # fewer than 3 seeds: the check says so
