"""The README's "From Python" example runs as written on the demo's ledger, and its findings are the
ones `fewshot compare` prints (the same library call behind both)."""

from __future__ import annotations

import os
import re
from pathlib import Path

import pytest

from fewshot.demo.run import prepare_demo, run_workers

README = Path(__file__).resolve().parent.parent / "README.md"


def _python_example() -> str:
    text = README.read_text(encoding="utf-8")
    section = text.split("## From Python", 1)[1]
    match = re.search(r"```python\n(.*?)```", section, re.S)
    assert match, "the README's From Python section has a python block"
    return match.group(1)


@pytest.fixture(scope="module")
def demo_folder(tmp_path_factory) -> Path:  # type: ignore[no-untyped-def]
    folder = tmp_path_factory.mktemp("demo")
    run = prepare_demo(folder, quick=True)
    run_workers(run, 2)
    return folder


def test_the_example_runs_and_its_findings_are_what_compare_prints(demo_folder: Path, cli):
    code = _python_example()
    assert 'Ledger.open("ledger.sqlite")' in code  # the example opens the demo's file name
    ns: dict[str, object] = {}
    cwd = os.getcwd()
    os.chdir(demo_folder)
    try:
        exec(compile(code, "README.md (From Python)", "exec"), ns)  # noqa: S102 - our own README
    finally:
        os.chdir(cwd)
    assert (demo_folder / "report.html").is_file()
    import fewshot

    found = fewshot.compare_findings(ns["cmp"], ns["data"])
    assert found.statements
    shown = cli("compare", "--ledger", demo_folder / "ledger.sqlite")
    assert shown.exit_code == 0, shown.output
    from fewshot.cli.common import out  # the console compare printed on, at its width

    printed = shown.stdout.split("Findings\n", 1)[1]
    expected = found.text(out.width)
    assert printed.startswith(expected), (printed[:800], expected[:800])
