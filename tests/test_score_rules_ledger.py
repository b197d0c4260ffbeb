"""Score rules over what the ledger gives: a final result the ledger took from a run's last
reported step is that step, not one more evaluation."""

from __future__ import annotations

import numpy as np
import pytest

from fewshot.ledger import Ledger
from fewshot.stats import run_scores
from fewshot.study import load_study


def test_last_k_counts_a_final_taken_from_the_last_step_once(ledger_url: str, study_file):
    led = Ledger.open(ledger_url)
    try:
        led.plan(load_study(study_file(sizes=[1], seeds=[0], arms={"wide": {"zero_shot": False}})))
        claim = led.claim("w", lease=60)
        assert claim is not None
        for step, value in ((10, 1.0), (20, 2.0), (30, 3.0)):
            led.record(claim.key, "return", value, step=step, attempt=claim.attempt)
        led.done(claim.key, attempt=claim.attempt)  # no final: the ledger takes step 30's
        res = led.results()
    finally:
        led.close()
    mine = res[res["run"] == claim.key]
    assert mine["final_from_step"].dropna().tolist() == [30]
    scores = run_scores(mine, "return", "last:2")
    # the mean of the last two evaluations, steps 20 and 30 (numpy's mean as the reference)
    assert scores["score"].tolist() == [pytest.approx(np.mean([2.0, 3.0]))]
    assert run_scores(mine, "return", "final")["score"].tolist() == [3.0]
