"""The wheel ships every subpackage: an editable install would hide a missing one."""

from __future__ import annotations

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_every_package_is_listed_in_pyproject():
    listed = set(
        tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"]
    )
    found = {
        ".".join(p.parent.relative_to(ROOT).parts) for p in (ROOT / "fewshot").rglob("__init__.py")
    }
    found |= {"fewshot.migrations", "fewshot.migrations.versions"}  # mapped from migrations/
    assert found == listed
