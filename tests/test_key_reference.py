"""The study-file keys and the trainer's variables have one table each; the loader takes its
known keys and type words from the key table, the README holds both tables as printed, and the
loader's behaviour (types refused, defaults filled in, required keys) agrees with the table."""

from __future__ import annotations

import re
import subprocess
import sys
from dataclasses import fields
from pathlib import Path

import pytest

from fewshot.study import StudyError, load_study
from fewshot.study.keys import COMPUTED, KEYS, KIND_WORDS, REQUIRED, keys_of, markdown
from fewshot.study.model import Arm, Study, Task
from fewshot.worker.fields import environment_markdown

ROOT = Path(__file__).resolve().parent.parent


def _readme_block(name: str) -> str:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    m = re.search(
        rf"<!-- generated: python -m {re.escape(name)} -->\n(.*?)<!-- end of generated table -->",
        text,
        re.S,
    )
    assert m, f"README.md lost its generated block of `python -m {name}`"
    return m.group(1)


@pytest.mark.parametrize(
    ("module", "table"),
    [("fewshot.study.keys", markdown), ("fewshot.worker.fields", environment_markdown)],
)
def test_the_readme_holds_the_tables_as_printed(module: str, table):
    # Fix a failure by pasting the output of `python -m MODULE` between the README's markers.
    assert _readme_block(module) == table()
    printed = subprocess.run(
        [sys.executable, "-m", module], capture_output=True, text=True, timeout=120, cwd=ROOT
    )
    assert printed.returncode == 0 and printed.stdout == table(), printed.stderr


def test_the_key_table_covers_the_models_fields():
    assert keys_of("arms") == {f.name for f in fields(Arm)}
    assert keys_of("tasks") == {f.name for f in fields(Task)}
    # every top-level key is a field of Study, but for the arm and task tables and free text
    assert keys_of("study") - {"description"} <= {f.name for f in fields(Study)}
    assert all(k.kind is None or k.kind in KIND_WORDS for k in KEYS)


def _edit(key, value) -> dict:  # type: ignore[no-untyped-def]
    """study_file edits setting ``key`` of its table to ``value`` (None removes it)."""
    if key.table == "arms":
        return {"arms": {"wide": {key.name: value}}}
    if key.table == "tasks":
        return {"task": {key.name: value}}
    return {key.name: value}


def _label(key) -> str:  # type: ignore[no-untyped-def]
    return {"arms": f"arms[0].{key.name}", "tasks": f"tasks[0].{key.name}"}.get(key.table, key.name)


# a value of another type than each kind takes (TOML has no null, so nothing else is needed)
WRONG = {"str": 5, "bool": "yes", "int": "x", "num": "x", "intlist": "x", "numlist": "x"}
WRONG |= {"strlist": "x", "table": "x"}
TYPED = [k for k in KEYS if k.kind in WRONG]


@pytest.mark.parametrize("key", TYPED, ids=[f"{k.table}.{k.name}" for k in TYPED])
def test_each_key_refuses_another_type_with_the_tables_words(study_file, key):
    with pytest.raises(StudyError) as info:
        load_study(study_file(**_edit(key, WRONG[key.kind])))
    assert f"{_label(key)}: must be {KIND_WORDS[key.kind]}" in str(info.value)


NEEDED = [k for k in KEYS if k.default is REQUIRED and k.kind != "tables"]


@pytest.mark.parametrize("key", NEEDED, ids=[f"{k.table}.{k.name}" for k in NEEDED])
def test_each_required_key_is_required(study_file, key):
    with pytest.raises(StudyError, match=f"needs a '{key.name}' key"):
        load_study(study_file(**_edit(key, None)))


def test_each_default_is_what_the_loader_fills_in(tmp_path: Path, study_file):
    # the small study with every optional key it sets left out
    optional = [k for k in KEYS if k.default not in (REQUIRED, COMPUTED) and k.kind is not None]
    study = load_study(
        study_file(
            higher_is_better=None,
            arms={"wide": {"checkpoint": None, "attributes": None}},
            task={"id_column": None, "keep_top": None, "rank_by": None, "floor": None}
            | {"expert": None, "group": None},
        )
    )
    owner = {"study": study, "arms": study.arm("wide"), "tasks": study.tasks[0]}
    for key in optional:
        assert getattr(owner[key.table], key.name) == key.default, key
    # the computed ones, as the table describes them
    assert study.metrics == (study.metric,)  # "the primary metric only"
    assert study.draws_dir == tmp_path.resolve() / "draws" / "mini"
    assert study.arm("wide").zero_shot and not study.arm("scratch").zero_shot
