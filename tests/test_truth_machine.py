"""A property of the whole ledger: for any interleaving of claims, stepped and final records,
voids, retries, dones and failures (a hypothesis state machine over the Python API), the results
every statistic reads (:func:`fewshot.read_study`) are exactly the non-void results of done runs,
and their finals are the model's: the explicit final, else the last reported step's value."""

from __future__ import annotations

import itertools
import tempfile
from pathlib import Path

import pandas as pd
import pytest
from hypothesis import HealthCheck, settings
from hypothesis import strategies as st
from hypothesis.stateful import RuleBasedStateMachine, invariant, precondition, rule

from fewshot.analysis import read_study
from fewshot.ledger import Ledger, ResultRefused
from fewshot.ledger.finals import Incomplete
from fewshot.ledger.runs import StaleAttempt
from fewshot.study import load_study
from tests.support import reset_pg, study_toml, write_study

FINAL = None  # the model's step of a final result
# Two values per (step, final) slot, so that conflicts happen, and different values at different
# steps, so that taking the wrong step as the final shows
VALUES = st.sampled_from([0.0, 0.5])


def value_at(step: int | None, v: float) -> float:
    return (100.0 if step is None else 10.0 * step) + v


class Run:
    """The model of one run: its status, attempts, and live results {step: (value, by, taken)}
    of the primary metric (``taken``: a final taken from a step)."""

    def __init__(self, key: str) -> None:
        self.key = key
        self.status = "planned"
        self.attempts = 0
        self.results: dict[int | None, tuple[float, int | None, bool]] = {}

    def store(self, step: int | None, value: float, by: int | None, force: bool) -> str:
        """What the ledger should do with a result: 'stored', 'unchanged', 'replaced', 'refused'."""
        old = self.results.get(step)
        if old is None:
            self.results[step] = (value, by, False)
            return "stored"
        if old[0] == value:
            return "unchanged"
        older = by is not None and old[1] is not None and old[1] < by
        own_taken = old[2] and by is not None and old[1] == by
        if older or own_taken:
            self.results[step] = (value, by, False)
            return "replaced"
        return "refused"


def make_machine(new_url):  # noqa: ANN001, ANN201 - a class per ledger kind
    class LedgerMachine(RuleBasedStateMachine):
        def __init__(self) -> None:
            super().__init__()
            self.folder = Path(tempfile.mkdtemp())
            self.led = Ledger.open(new_url(self.folder))
            study = write_study(self.folder, study_toml(sizes=[1], seeds=[0, 1]))
            self.led.plan(load_study(study))
            self.runs = {k: Run(k) for k in self.led.runs()["key"]}
            self.order = list(self.runs)  # claims take the first claimable run in plan order

        def teardown(self) -> None:
            self.led.close()

        def _some(self, *statuses: str) -> bool:
            return any(r.status in statuses for r in self.runs.values())

        def _pick(self, data, *statuses: str) -> Run | None:  # noqa: ANN001
            some = [r for r in self.runs.values() if r.status in statuses]
            return data.draw(st.sampled_from(some)) if some else None

        @precondition(lambda self: self._some("planned"))
        @rule()
        def claim(self) -> None:
            got = self.led.claim("w", lease=3600)
            planned = [k for k in self.order if self.runs[k].status == "planned"]
            if not planned:
                assert got is None
                return
            run = self.runs[planned[0]]
            assert got is not None and got.key == run.key
            run.status, run.attempts = "running", run.attempts + 1
            assert got.attempt == run.attempts

        @precondition(lambda self: self._some("running"))
        @rule(data=st.data(), value=VALUES, step=st.integers(0, 3))
        def record_step(self, data, value: float, step: int) -> None:  # noqa: ANN001
            self.record(data, value_at(step, value), step)

        @precondition(lambda self: self._some("running"))
        @rule(data=st.data(), steps=st.lists(st.integers(0, 5), min_size=2, max_size=4))
        def train(self, data, steps: list[int]) -> None:  # noqa: ANN001
            """A trainer reporting several evaluations of one run, without a final one."""
            run = self._pick(data, "running")
            for step in steps:
                if run is not None and run.status == "running":
                    self.record(_Fixed(run), value_at(step, 0.0), step)

        @precondition(lambda self: self._some("running"))
        @rule(data=st.data(), value=VALUES)
        def record_final(self, data, value: float) -> None:  # noqa: ANN001
            self.record(data, value_at(FINAL, value), FINAL)

        def record(self, data, value: float, step: int | None) -> None:  # noqa: ANN001
            run = self._pick(data, "running")
            if run is None:
                return
            expect = run.store(step, value, run.attempts, force=False)
            call = dict(step=step) if step is not None else dict(final=True)
            if expect == "refused":
                with pytest.raises(ResultRefused, match="already has"):
                    self.led.record(run.key, "return", value, attempt=run.attempts, **call)
                return
            rep = self.led.record(run.key, "return", value, attempt=run.attempts, **call)
            assert getattr(rep, expect) == 1

        @precondition(lambda self: self._some("planned", "done", "failed"))
        @rule(data=st.data(), value=VALUES)
        def record_by_hand(self, data, value: float) -> None:  # noqa: ANN001
            value = value_at(FINAL, value)
            run = self._pick(data, "planned", "done", "failed")
            if run is None:
                return
            expect = run.store(FINAL, value, None, force=True)
            if expect == "refused":
                with pytest.raises(ResultRefused, match="already has"):
                    self.led.record(run.key, "return", value, final=True, force=True)
                return
            with (
                pytest.raises(ResultRefused, match="pass `force`")
                if expect != "unchanged"
                else _nothing()
            ):
                self.led.record(run.key, "return", value, final=True)  # without force: refused
            rep = self.led.record(run.key, "return", value, final=True, force=True)
            assert getattr(rep, expect) == 1
            assert rep.forced == (0 if expect == "unchanged" else 1)

        @precondition(lambda self: self._some("running"))
        @rule(data=st.data())
        def done(self, data) -> None:  # noqa: ANN001
            run = self._pick(data, "running")
            if run is None:
                return
            steps = [s for s in run.results if s is not FINAL]
            if FINAL not in run.results and not steps:
                with pytest.raises(Incomplete):
                    self.led.done(run.key, attempt=run.attempts)
                return
            if FINAL not in run.results:  # the last reported step becomes the final
                value, by, _ = run.results[max(steps)]
                run.results[FINAL] = (value, by, True)
            self.led.done(run.key, attempt=run.attempts)
            run.status = "done"

        @precondition(lambda self: self._some("running"))
        @rule(data=st.data())
        def fail(self, data) -> None:  # noqa: ANN001
            run = self._pick(data, "running")
            if run is not None:
                self.led.fail(run.key, "boom", attempt=run.attempts)
                run.status = "failed"

        @precondition(lambda self: any(r.results for r in self.runs.values()))
        @rule(data=st.data())
        def void(self, data) -> None:  # noqa: ANN001
            some = [r for r in self.runs.values() if r.results]
            if not some:
                return
            run = data.draw(st.sampled_from(some))
            rep = self.led.void(run.key, reason="checked by hand")
            assert rep.voided == len(run.results)
            had_final = FINAL in run.results
            run.results = {}
            assert rep.replanned == (had_final and run.status != "planned")
            if rep.replanned:
                run.status = "planned"

        @precondition(lambda self: self._some("done", "failed"))
        @rule(data=st.data())
        def retry(self, data) -> None:  # noqa: ANN001
            run = self._pick(data, "done", "failed")
            if run is not None:
                assert self.led.retry([run.key]) == [run.key]
                run.status = "planned"

        @precondition(lambda self: self._some("failed"))
        @rule()
        def retry_failed(self) -> None:
            failed = [k for k in self.order if self.runs[k].status == "failed"]
            assert self.led.retry(failed=True) == failed
            for k in failed:
                self.runs[k].status = "planned"

        @precondition(
            lambda self: any(r.status == "planned" and r.attempts for r in self.runs.values())
        )
        @rule(data=st.data())
        def a_replanned_attempt_cannot_mark_its_run(self, data) -> None:  # noqa: ANN001
            some = [r for r in self.runs.values() if r.status == "planned" and r.attempts]
            run = data.draw(st.sampled_from(some))
            with pytest.raises(StaleAttempt, match="no longer holds the run"):
                self.led.done(run.key, attempt=run.attempts)

        @invariant()
        def statistics_read_exactly_the_live_results_of_done_runs(self) -> None:
            frame = read_study(self.led).results
            got = {
                (r.run, None if pd.isna(r.step) else int(r.step), r.value)
                for r in frame.itertuples()
            }
            want = {
                (k, step, value)
                for k, run in self.runs.items()
                if run.status == "done"
                for step, (value, _, _) in run.results.items()
            }
            assert got == want and len(frame) == len(want)
            assert set(frame["run_status"]) <= {"done"}
            finals = frame[frame["step"].isna()]
            assert sorted(finals["run"]) == sorted(
                k for k, r in self.runs.items() if r.status == "done"
            )  # every done run has exactly one final result

        @invariant()
        def statuses_agree(self) -> None:
            runs = self.led.runs().set_index("key")
            for k, run in self.runs.items():
                assert (runs.loc[k, "status"], runs.loc[k, "attempts"]) == (
                    run.status,
                    run.attempts,
                )

    return LedgerMachine


class _Fixed:
    """A stand-in for ``st.data()`` that always draws the same run."""

    def __init__(self, run: Run) -> None:
        self.run = run

    def draw(self, _strategy: object) -> Run:
        return self.run


class _nothing:
    def __enter__(self) -> None:
        return None

    def __exit__(self, *exc: object) -> None:
        return None


def test_statistics_read_only_the_live_results_of_done_runs(ledger_url: str):
    if ledger_url.startswith("postgresql"):

        def new_url(_folder: Path) -> str:
            reset_pg(ledger_url)
            return ledger_url

        examples = 5
    else:
        counter = itertools.count()

        def new_url(folder: Path) -> str:
            return str(folder / f"l{next(counter)}.sqlite")

        examples = 25
    machine = make_machine(new_url)
    machine.TestCase.settings = settings(
        max_examples=examples,
        stateful_step_count=30,
        deadline=None,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much],
    )
    from hypothesis.stateful import run_state_machine_as_test

    run_state_machine_as_test(machine, settings=machine.TestCase.settings)
