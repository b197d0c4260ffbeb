"""Schema upgrades: a ledger from every earlier revision upgrades with its data intact."""

from __future__ import annotations

from pathlib import Path

import pytest
from alembic.script import ScriptDirectory
from sqlalchemy import text

from fewshot.ledger import Ledger, LedgerError
from fewshot.ledger.engine import (
    _alembic_config,
    head_revision,
    make_engine,
    resolve_url,
    upgrade_schema,
)
from fewshot.study import load_study

REVISIONS = [r.revision for r in ScriptDirectory.from_config(_alembic_config()).walk_revisions()][
    ::-1
]

# Rows written with plain SQL as each old revision's schema had them.
SEED_ROWS = [
    "INSERT INTO study VALUES (1, 'old', 'return', TRUE, 1, 'scratch', '{\"sizes\": [1], \"seeds\": [0], "
    '"replicates": 1, "file": "x"}\', 1.0)',
    "INSERT INTO arm VALUES (1, 1, 'wide', 'pretrained', NULL, FALSE, '{}')",
    "INSERT INTO arm VALUES (2, 1, 'scratch', 'baseline', NULL, FALSE, '{}')",
    "INSERT INTO task VALUES (1, 1, 'reach', 'pool.csv', 'abc', '{}', 0.0, 100.0, NULL)",
    "INSERT INTO draw VALUES (1, 1, 0, '[\"e1\"]', '[]')",
    "INSERT INTO subset VALUES (1, 1, 0, 1, 'd1', 'ids.txt')",
    "INSERT INTO run VALUES (1, 1, 'wide/reach/n1/s0', 1, 1, 1, 1, 0, 0, 'done', 'w', NULL, 1, NULL, 1.0, 1.0, 2.0)",
    "INSERT INTO run VALUES (2, 1, 'scratch/reach/n1/s0', 2, 1, 1, 1, 0, 0, 'planned', NULL, NULL, 0, NULL, 1.0, NULL, NULL)",
    "INSERT INTO result (id, run_id, metric, step, value, n_values, subset_digest, budget_json, recorded_at) "
    "VALUES (1, 1, 'return', -1, 42.5, 2, NULL, NULL, 3.0)",
    "INSERT INTO result_value VALUES (1, 0, 40.0)",
    "INSERT INTO result_value VALUES (1, 1, 45.0)",
]


def test_revisions_form_one_line():
    assert REVISIONS[0] == "0001" and REVISIONS[-1] == head_revision()


@pytest.mark.parametrize("revision", REVISIONS[:-1])
def test_upgrade_from_each_earlier_revision_keeps_the_data(ledger_url: str, revision: str, dump):
    engine = make_engine(resolve_url(ledger_url))
    upgrade_schema(engine, revision=revision)
    with engine.begin() as conn:
        for sql in SEED_ROWS:
            conn.execute(text(sql))
    before = dump(ledger_url)
    engine.dispose()
    led = Ledger.open(ledger_url)  # upgrades to head
    after = dump(ledger_url)
    for table, rows in before.items():
        if table == "alembic_version":
            continue
        # every old row is still there, column for column (new columns come after)
        assert [tuple(r)[: len(rows[0])] for r in after[table]] == [tuple(r) for r in rows], table
    frame = led.results()
    assert frame["value"].tolist() == [42.5] and frame["n_values"].tolist() == [2]
    assert led.counts() == {"planned": 1, "running": 0, "done": 1, "failed": 0}
    led.close()


def test_a_newer_ledger_is_refused_untouched(tmp_path: Path, ledger_url: str, dump, study_file):
    led = Ledger.open(ledger_url)
    led.plan(load_study(study_file(tmp_path)))
    led.close()
    engine = make_engine(resolve_url(ledger_url))
    with engine.begin() as conn:
        conn.execute(text("UPDATE alembic_version SET version_num = '9999'"))
    engine.dispose()
    before = dump(ledger_url)
    with pytest.raises(LedgerError, match="written by a newer fewshot"):
        Ledger.open(ledger_url)
    assert dump(ledger_url) == before
