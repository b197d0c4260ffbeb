"""Fuzzing: any result line or study file gives either success or a FewshotError, never another exception."""

from __future__ import annotations

import json
import string
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fewshot.errors import FewshotError
from fewshot.ledger import Ledger
from fewshot.results_format import parse_result_file
from fewshot.study import load_study

JSON_VALUES = st.recursive(
    st.none()
    | st.booleans()
    | st.integers()
    | st.floats(allow_nan=True, allow_infinity=True)
    | st.text(max_size=12),
    lambda children: (
        st.lists(children, max_size=4) | st.dictionaries(st.text(max_size=6), children, max_size=4)
    ),
    max_leaves=10,
)
LINE_OBJECTS = st.fixed_dictionaries(
    {},
    optional={
        "run": st.sampled_from(["wide/reach/n1/s0", "wide/reach/n3/s2", "nope", ""]) | JSON_VALUES,
        "metric": st.sampled_from(["return", "success", ""]) | JSON_VALUES,
        "value": st.floats(allow_nan=True, allow_infinity=True) | JSON_VALUES,
        "step": st.integers(-3, 10**12) | JSON_VALUES,
        "values": st.lists(st.floats(allow_nan=True, allow_infinity=True), max_size=4)
        | JSON_VALUES,
        "subset_digest": st.text(alphabet="0123456789abcdef", min_size=64, max_size=64)
        | JSON_VALUES,
        "budget": st.dictionaries(st.text(max_size=5), st.floats(), max_size=3) | JSON_VALUES,
        "extra": JSON_VALUES,
    },
)


@settings(
    max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(lines=st.lists(LINE_OBJECTS, min_size=1, max_size=4), garbage=st.binary(max_size=30))
def test_result_files_parse_or_refuse(tmp_path: Path, lines, garbage):
    text = "\n".join(json.dumps(obj, allow_nan=True) for obj in lines).encode() + b"\n" + garbage
    try:
        parse_result_file(tmp_path / "r.jsonl", text)
    except FewshotError:
        pass


_LEDGER: dict[str, object] = {}


def _ledger(tmp_path_factory, study_in) -> Ledger:  # type: ignore[no-untyped-def]
    if "led" not in _LEDGER:
        folder = tmp_path_factory.mktemp("fuzz")
        led = Ledger.open(folder / "l.sqlite")
        led.plan(load_study(study_in(folder)))
        _LEDGER["led"] = led
    return _LEDGER["led"]  # type: ignore[return-value]


@settings(
    max_examples=120, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(lines=st.lists(LINE_OBJECTS, min_size=1, max_size=3))
def test_result_lines_store_or_refuse(tmp_path_factory, lines, study_in):
    led = _ledger(tmp_path_factory, study_in)
    path = Path(str(tmp_path_factory.getbasetemp())) / "fuzz-lines.jsonl"
    path.write_text("\n".join(json.dumps(obj, allow_nan=True) for obj in lines) + "\n")
    try:
        led.ingest_file(path)
    except FewshotError:
        pass


KEYS = [
    "name",
    "metric",
    "higher_is_better",
    "sizes",
    "seeds",
    "replicates",
    "baseline",
    "draws_dir",
    "role",
    "checkpoint",
    "zero_shot",
    "attributes",
    "pool",
    "id_column",
    "keep_top",
    "rank_by",
    "floor",
    "expert",
    "group",
    "reserve",
    "allocation",
    "stratify_by",
    "exclude",
    "lowest_first",
    "typo",
]
TOML_VALUES = st.sampled_from(
    [
        '"x"',
        '"wide"',
        '"../up"',
        "1",
        "-1",
        "0",
        "1.5",
        "nan",
        "inf",
        "true",
        "[]",
        "[1, 2]",
        "[0, 0]",
        '["a"]',
        "{ a = 1 }",
        '"pool.csv"',
        "[[1]]",
        '""',
        "1e400",
    ]
)


@settings(
    max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(
    edits=st.lists(st.tuples(st.sampled_from(KEYS), TOML_VALUES), max_size=4),
    noise=st.text(alphabet=string.printable, max_size=20),
    cut=st.floats(0, 1),  # where the noise goes, as a share of the text
)
def test_study_files_load_or_refuse(tmp_path: Path, edits, noise, cut, study_file, study_text):
    text = study_text()
    for key, value in edits:
        if f"\n{key} = " in text:
            start = text.index(f"\n{key} = ") + 1
            end = text.index("\n", start)
            text = text[:start] + f"{key} = {value}" + text[end:]
        else:
            text = f"{key} = {value}\n" + text
    if noise:
        at = int(cut * len(text))
        text = text[:at] + noise + text[at:]
    path = study_file(tmp_path, text=text)
    try:
        study = load_study(path)
        list(study.runs())
    except FewshotError:
        pass
