"""Long tables go through a pager only when the user asks (--pager), never by default."""

from __future__ import annotations

import pytest
import rich.pager


@pytest.fixture
def paged_text(monkeypatch):
    """What was handed to the system pager (rich's SystemPager), instead of running one."""
    shown: list[str] = []
    monkeypatch.setattr(rich.pager.SystemPager, "show", lambda self, content: shown.append(content))
    return shown


@pytest.mark.parametrize(
    "command",
    [
        ["status"],
        ["curves", "--resamples", "200"],
        ["compare", "--resamples", "200", "--threshold", "0.5"],
    ],
)
def test_pager_only_when_asked(filled_ledger, cli, paged_text, command):
    url = filled_ledger.url
    plain = cli(*command, "--ledger", url)
    assert plain.exit_code == 0, plain.output
    assert paged_text == []  # by default nothing is paged
    assert "wide" in plain.output
    asked = cli(*command, "--pager", "--ledger", url)
    assert asked.exit_code == 0, asked.output
    assert len(paged_text) == 1 and "wide" in paged_text[0]
    assert "wide" not in asked.output  # the table went to the pager, not straight out
