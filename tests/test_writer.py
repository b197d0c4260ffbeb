"""The one-file result writer: standard library only, one whole line per result."""

from __future__ import annotations

import ast
import json
import multiprocessing
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

import fewshot.writer as writer_module
from fewshot.writer import ResultWriter, id_file_digest


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
    w.write("return", 71.5, final=True, values=[70.0, 73.0], budget={"steps": 5000})
    w.write("return", 40, step=100)
    lines = [json.loads(x) for x in path.read_text().splitlines()]
    assert lines[0] == {
        "run": "a/t/n1/s0",
        "metric": "return",
        "value": 71.5,
        "final": True,
        "values": [70.0, 73.0],
        "subset_digest": "f" * 64,
        "budget": {"steps": 5000},
    }
    assert lines[1]["step"] == 100 and lines[1]["value"] == 40.0


@pytest.mark.parametrize("bad", [float("nan"), float("inf"), "1"])
def test_non_finite_values_never_reach_the_file(tmp_path: Path, bad):
    path = tmp_path / "r.jsonl"
    with pytest.raises(ValueError):
        ResultWriter(str(path), "a/t/n1/s0").write("return", bad, final=True)
    assert not path.exists()


def test_from_env(monkeypatch, tmp_path: Path):
    monkeypatch.delenv("FEWSHOT_RUN", raising=False)
    with pytest.raises(RuntimeError, match="fewshot exec"):
        ResultWriter.from_env()
    monkeypatch.setenv("FEWSHOT_RUN", "a/t/n3/s1")
    monkeypatch.setenv("FEWSHOT_RESULTS", str(tmp_path / "x.jsonl"))
    monkeypatch.delenv("FEWSHOT_SUBSET", raising=False)
    w = ResultWriter.from_env()
    assert (w.path, w.run, w.subset_digest) == (str(tmp_path / "x.jsonl"), "a/t/n3/s1", None)


@pytest.mark.skipif(
    shutil.which("sort") is None or shutil.which("sha256sum") is None,
    reason="needs coreutils sort and sha256sum",
)
def test_from_env_digests_the_id_file_it_was_given(monkeypatch, tmp_path: Path):
    # The planned digest in the environment is ignored: the writer hashes the file itself, so an
    # edited id file shows as a mismatch. Reference: coreutils `LC_ALL=C sort FILE | sha256sum`.
    ids = tmp_path / "n3.txt"
    ids.write_text("ep7\nep10\nep2\n", encoding="utf-8")
    monkeypatch.setenv("FEWSHOT_RUN", "a/t/n3/s1")
    monkeypatch.setenv("FEWSHOT_SUBSET", str(ids))
    monkeypatch.setenv("FEWSHOT_SUBSET_DIGEST", "e" * 64)
    expected = subprocess.run(
        f"sort {ids} | sha256sum",
        shell=True,
        env={"LC_ALL": "C", "PATH": os.environ["PATH"]},
        capture_output=True,
        text=True,
        check=True,
    ).stdout.split()[0]
    assert ResultWriter.from_env(str(tmp_path / "r.jsonl")).subset_digest == expected
    assert id_file_digest(str(ids)) == expected
    other = tmp_path / "copy.txt"
    other.write_text("ep7\r\nep2\r\n\nep10\r\n", encoding="utf-8")  # CR LF and a blank line
    assert (
        ResultWriter.from_env(str(tmp_path / "r.jsonl"), subset_file=str(other)).subset_digest
        == expected
    )
    ids.write_text("ep7\nep10\nep3\n", encoding="utf-8")  # edited: another episode
    assert ResultWriter.from_env(str(tmp_path / "r.jsonl")).subset_digest != expected


def _append_many(path: str, k: int) -> None:
    w = ResultWriter(path, f"a/t/n1/s{k}")
    for i in range(300):
        w.write("return", float(i), step=i, values=[float(i)] * 50)


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
