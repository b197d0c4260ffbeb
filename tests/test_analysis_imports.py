"""Import rules of the analysis side, read from the source (AST): the report never imports the
ledger; the statistics import nothing of the ledger, the command line or SQLAlchemy; the study
reports touch the ledger only for type checking; the demo uses only the public API; only the
command line imports typer; no package file passes 400 lines."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parent.parent / "fewshot"


def _imports(path: Path, *, runtime_only: bool) -> set[str]:
    """Modules ``path`` imports (``from x import y`` gives ``x``), skipping ``if TYPE_CHECKING:``
    blocks when ``runtime_only``."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    skipped: set[int] = set()
    if runtime_only:
        for node in ast.walk(tree):
            if isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test):
                skipped |= {id(n) for n in ast.walk(node)}
    found = set()
    for node in ast.walk(tree):
        if id(node) in skipped:
            continue
        if isinstance(node, ast.Import):
            found |= {a.name for a in node.names}
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            found.add(node.module)
    return found


def _files(folder: str) -> list[Path]:
    return sorted((PACKAGE / folder).rglob("*.py"))


def _starts(name: str, prefixes: tuple[str, ...]) -> bool:
    return any(name == p or name.startswith(p + ".") for p in prefixes)


@pytest.mark.parametrize(
    ("folder", "forbidden", "runtime_only"),
    [
        (
            "stats",
            ("fewshot.ledger", "fewshot.cli", "sqlalchemy", "typer", "fewshot.analysis"),
            False,
        ),
        ("report", ("fewshot.ledger", "fewshot.cli", "sqlalchemy", "typer"), False),
        (
            "plots",
            ("fewshot.ledger", "fewshot.cli", "sqlalchemy", "typer", "matplotlib.pyplot"),
            False,
        ),
        ("analysis", ("fewshot.ledger", "fewshot.cli", "sqlalchemy", "typer"), True),
    ],
)
def test_layers_import_only_downwards(
    folder: str, forbidden: tuple[str, ...], runtime_only: bool
) -> None:
    files = _files(folder)
    assert files, folder
    bad = {
        f"{p.relative_to(PACKAGE)}: {m}"
        for p in files
        for m in _imports(p, runtime_only=runtime_only)
        if _starts(m, forbidden)
    }
    assert not bad, sorted(bad)


def test_matplotlib_is_imported_only_inside_functions() -> None:
    for p in _files("plots") + _files("analysis") + _files("report"):
        tree = ast.parse(p.read_text(encoding="utf-8"))
        top = [n for n in tree.body if isinstance(n, ast.Import | ast.ImportFrom)]
        names = {a.name for n in top if isinstance(n, ast.Import) for a in n.names}
        names |= {n.module or "" for n in top if isinstance(n, ast.ImportFrom)}
        assert not any(_starts(m, ("matplotlib",)) for m in names), p


def test_demo_uses_only_the_public_api() -> None:
    allowed = ("fewshot.demo", "fewshot.writer")
    for p in _files("demo"):
        for m in _imports(p, runtime_only=False):
            if _starts(m, ("fewshot",)):
                assert m == "fewshot" or _starts(m, allowed), f"{p.name} imports {m}"


def test_only_the_command_line_imports_typer() -> None:
    outside = [p for p in PACKAGE.rglob("*.py") if "cli" not in p.relative_to(PACKAGE).parts]
    assert len(outside) > 50  # the walk found the package
    for p in outside:
        found = _imports(p, runtime_only=False)
        assert not any(_starts(m, ("typer", "click")) for m in found), f"{p} imports typer"


def test_no_package_file_passes_400_lines() -> None:
    """Small files named for what they hold; the written coverage table is data, not code, but
    it is held to the same bound."""
    lengths = {p: len(p.read_text(encoding="utf-8").splitlines()) for p in PACKAGE.rglob("*.py")}
    assert len(lengths) > 50
    assert {str(p.relative_to(PACKAGE)): n for p, n in lengths.items() if n > 400} == {}
