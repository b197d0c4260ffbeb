"""The layers of DESIGN.md ("Architecture"), checked by reading every module's imports (AST).

Imports inside functions count too: a rule is about what a module may ever load, not only what it
loads at import time.
"""

from __future__ import annotations

import ast
from pathlib import Path

PKG = Path(__file__).resolve().parent.parent / "fewshot"


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(PKG.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def imports_of(path: Path, module: str | None = None) -> set[str]:
    """Every module ``path`` (the module named ``module``, by default from its place in the
    package) imports: ``import a.b`` gives ``a.b``; ``from a import b`` gives ``a`` and ``a.b``
    (``b`` may be a module); relative imports are resolved."""
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    package = (module or _module_name(path)).split(".")
    if path.name != "__init__.py":
        package = package[:-1]
    found: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[: len(package) - node.level + 1]
                module = ".".join([*base, *([node.module] if node.module else [])])
            else:
                module = node.module or ""
            found.add(module)
            found.update(f"{module}.{alias.name}" for alias in node.names)
    return found


def _files(*under: str) -> list[Path]:
    return sorted(p for u in under for p in (PKG / u).rglob("*.py")) if under else []


def _offenders(files: list[Path], bad) -> dict[str, list[str]]:
    out = {}
    for f in files:
        hits = sorted(m for m in imports_of(f) if bad(m))
        if hits:
            out[str(f.relative_to(PKG.parent))] = hits
    return out


def _under(module: str, *roots: str) -> bool:
    return any(module == r or module.startswith(r + ".") for r in roots)


def test_the_reader_sees_imports_inside_functions_and_relative_ones(tmp_path: Path):
    # The checker itself, on a known file: a rule is only as good as the import reader.
    sample = tmp_path / "probe.py"
    sample.write_text(
        "from . import curves\nimport typer\ndef f():\n    from ..ledger import Ledger\n",
        encoding="utf-8",
    )
    got = imports_of(sample, "fewshot.stats.probe")
    assert {"fewshot.stats.curves", "typer", "fewshot.ledger", "fewshot.ledger.Ledger"} <= got


def test_stats_imports_no_ledger_cli_or_database():
    bad = _offenders(
        _files("stats"),
        lambda m: _under(m, "fewshot.ledger", "fewshot.cli", "sqlalchemy", "alembic", "typer"),
    )
    assert bad == {}


def test_nothing_outside_cli_imports_typer_or_the_cli():
    files = [p for p in PKG.rglob("*.py") if "cli" not in p.relative_to(PKG).parts]
    assert _offenders(files, lambda m: _under(m, "typer", "click", "fewshot.cli")) == {}


def test_the_draw_rule_imports_only_errors_of_the_project():
    bad = _offenders(
        [PKG / "sampling" / "rule.py"],
        lambda m: _under(m, "fewshot") and not _under(m, "fewshot.errors"),
    )
    assert bad == {}


def test_the_report_imports_no_ledger():
    assert _offenders(_files("report"), lambda m: _under(m, "fewshot.ledger", "sqlalchemy")) == {}


def test_the_demo_imports_only_the_public_api_and_the_writer():
    # ``from fewshot import X`` (the public API), the writer, and the demo's own modules
    public = {f"fewshot.{name}" for name in __import__("fewshot").__all__}

    def bad(m: str) -> bool:
        if not _under(m, "fewshot") or m == "fewshot" or m in public:
            return False
        return not _under(m, "fewshot.writer", "fewshot.demo")

    assert _offenders(_files("demo"), bad) == {}
