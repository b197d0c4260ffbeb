"""The one-file result writer: standard library only, one whole line per result."""

from __future__ import annotations

import ast
import json
import multiprocessing
import sys
from pathlib import Path

import pytest

import fewshot.writer as writer_module
from fewshot.writer import ResultWriter


def test_imports_only_the_standard_library():
    # sys.stdlib_module_names (Python 3.10+) is the interpreter's own list of standard modules.
    tree = ast.parse(Path(writer_module.__file__).read_text())
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names |= {a.name.split(".")[0] for a in node.names}
        elif isinstance(node, ast.ImportFrom) and node.module:
            names.add(node.module.split(".")[0])
    assert names <= set(sys.stdlib_module_names) | {"__future__"}, names


def test_lines_are_result_lines(tmp_path: Path):
    path = tmp_path / "r.jsonl"
    w = ResultWriter(str(path), "a/t/n1/s0", subset_digest="f" * 64)
    w.write("return", 71.5, values=[70.0, 73.0], budget={"steps": 5000})
    w.write("return", 40, step=100)
    lines = [json.loads(x) for x in path.read_text().splitlines()]
    assert lines[0] == {
        "run": "a/t/n1/s0",
        "metric": "return",
        "value": 71.5,
        "step": None,
        "values": [70.0, 73.0],
        "subset_digest": "f" * 64,
        "budget": {"steps": 5000},
    }
    assert lines[1]["step"] == 100 and lines[1]["value"] == 40.0


@pytest.mark.parametrize("bad", [float("nan"), float("inf"), "1"])
def test_non_finite_values_never_reach_the_file(tmp_path: Path, bad):
    path = tmp_path / "r.jsonl"
    with pytest.raises(ValueError):
        ResultWriter(str(path), "a/t/n1/s0").write("return", bad)
    assert not path.exists()


def test_from_env(monkeypatch, tmp_path: Path):
    monkeypatch.delenv("FEWSHOT_RUN", raising=False)
    with pytest.raises(RuntimeError, match="fewshot exec"):
        ResultWriter.from_env()
    monkeypatch.setenv("FEWSHOT_RUN", "a/t/n3/s1")
    monkeypatch.setenv("FEWSHOT_RESULTS", str(tmp_path / "x.jsonl"))
    monkeypatch.setenv("FEWSHOT_SUBSET_DIGEST", "e" * 64)
    w = ResultWriter.from_env()
    assert (w.path, w.run, w.subset_digest) == (str(tmp_path / "x.jsonl"), "a/t/n3/s1", "e" * 64)


def _append_many(path: str, k: int) -> None:
    w = ResultWriter(path, f"a/t/n1/s{k}")
    for i in range(300):
        w.write("return", float(i), values=[float(i)] * 50)


def test_processes_appending_at_once_never_interleave(tmp_path: Path):
    path = str(tmp_path / "shared.jsonl")
    procs = [
        multiprocessing.get_context("fork").Process(target=_append_many, args=(path, k))
        for k in range(4)
    ]
    for p in procs:
        p.start()
    for p in procs:
        p.join()
    lines = Path(path).read_text().splitlines()
    assert len(lines) == 1200
    assert all(json.loads(x)["metric"] == "return" for x in lines)
