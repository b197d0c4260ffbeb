"""Study files: parsing, the plan, and errors that name file, key and line."""

from __future__ import annotations

from pathlib import Path

import pytest

from fewshot.study import StudyError, load_study, run_key
from tests.conftest import STUDY_TOML, write_study


def test_the_study_factory_writes_the_shared_study(tmp_path: Path, study_file):
    # the fixture's study (built from named edits) and the shared text are one study
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    a = load_study(study_file(tmp_path / "a"))
    b = load_study(write_study(tmp_path / "b"))
    assert a.arms == b.arms and a.sizes == b.sizes and a.seeds == b.seeds
    assert [t.draw_settings() for t in a.tasks] == [t.draw_settings() for t in b.tasks]
    with pytest.raises(KeyError, match="no arm 'nope'"):
        study_file(arms={"nope": {"role": "baseline"}})


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


def _edit(old: str, new: str) -> str:
    assert old in STUDY_TOML
    return STUDY_TOML.replace(old, new, 1)


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("sizez = [1]\n" + STUDY_TOML, "line 1: sizez: unknown key. Did you mean 'sizes'?"),
        (STUDY_TOML + 'name = "x"\n', "not valid TOML"),
        ("[[arms]\n" + STUDY_TOML, "not valid TOML"),
        (
            _edit('role = "baseline"', 'role = "baseline"\ncheckpont = "x"'),
            "arms[1].checkpont: unknown key. Did you mean 'checkpoint'?",
        ),
        (
            _edit("keep_top = 100", "keep_topp = 100"),
            "tasks[0].keep_topp: unknown key. Did you mean 'keep_top'?",
        ),
        (_edit("sizes = [0, 1, 3, 10]", 'sizes = "1,3"'), "sizes: must be a list of whole numbers"),
        (_edit("sizes = [0, 1, 3, 10]", "sizes = [1, 1]"), "sizes: must be distinct"),
        (
            _edit("sizes = [0, 1, 3, 10]", "sizes = [-1, 3]"),
            "sizes: must be distinct whole numbers from 0 (zero-shot) to 2**63-1",
        ),
        (
            _edit("seeds = [0, 1, 2]", "seeds = [-4]"),
            "seeds: must be distinct whole numbers from 0",
        ),
        (
            _edit("higher_is_better = true", 'higher_is_better = "yes"'),
            "higher_is_better: must be true or false",
        ),
        (_edit('name = "scratch"', 'name = "wide"'), "arms[1].name: 'wide' is named twice"),
        (_edit('name = "wide"', 'name = "wide base"'), "arm name 'wide base' is not valid"),
        (_edit('name = "wide"', 'name = "../wide"'), "arm name '../wide' is not valid"),
        (_edit('name = "reach"', 'name = "<b>reach</b>"'), "task name '<b>reach</b>' is not valid"),
        (
            _edit('baseline = "scratch"', 'baseline = "scratc"'),
            "'scratc' is not one of the arms (wide, scratch). Did you mean 'scratch'?",
        ),
        (_edit('role = "pretrained"', 'role = "teacher"'), "must be 'pretrained' or 'baseline'"),
        (_edit("keep_top = 100\n", ""), "keep_top and rank_by go together"),
        (_edit("expert = 100.0", "expert = nan"), "expert: must be a finite number"),
        (_edit("expert = 100.0", "expert = 0.0"), "floor and expert must differ"),
        (
            _edit("attributes = { params = 1e6 }", 'attributes = { params = [1, 2] }'),
            "attribute 'params' must be a finite number",
        ),
        (_edit('metric = "return"\n', ""), "the file needs a 'metric' key"),
        (_edit('pool = "pool.csv"\n', ""), "tasks[0] needs a 'pool' key"),
        (_edit('group = "arm"', 'group = "a b"'), "group name 'a b' is not valid"),
    ],
)
def test_bad_study_files(tmp_path: Path, text, fragment):
    path = write_study(tmp_path, text)
    with pytest.raises(StudyError) as info:
        load_study(path)
    assert fragment in str(info.value)
    assert str(path) in str(info.value)


def test_error_line_points_at_the_key(tmp_path: Path):
    text = _edit('role = "baseline"', 'role = "baseline"\nzero_shot = "no"')
    path = write_study(tmp_path, text)
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
