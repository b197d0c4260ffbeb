"""The package type-checks: mypy over fewshot/ (the settings are in pyproject.toml)."""

from __future__ import annotations

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


def test_mypy_is_clean():
    api = pytest.importorskip("mypy.api", reason="mypy is not installed (pip install -e '.[test]')")
    out, err, status = api.run(
        [str(ROOT / "fewshot"), "--config-file", str(ROOT / "pyproject.toml")]
    )
    assert status == 0, out + err
