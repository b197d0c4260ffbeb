"""Several work loops on one machine: ``fewshot work --parallel N`` and ``--gpus 0,1,3``.

Each loop is a child process running the ordinary work loop
(:func:`fewshot.worker.loop.run_claims`) with its own worker name and, with ``gpus``, its own
``CUDA_VISIBLE_DEVICES``, so that a trainer sees exactly one device. Children sit in their own
process groups: a stop signal reaches this process, which hands it to every child once; each
child then stops its trainer and hands its claimed run back to the plan.

Children report each run's start and end as JSON lines on a pipe of their own; the parent shows
one combined display on a terminal (quiet when piped) and returns a summary.
"""

from __future__ import annotations

import json
import os
import selectors
import signal
import subprocess
import sys
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

from fewshot.errors import InvalidInput

__all__ = ["LoopState", "ParallelSummary", "check_gpus", "loop_plan", "run_parallel"]

_STOPS = tuple(s for s in (signal.SIGINT, signal.SIGTERM, getattr(signal, "SIGHUP", None)) if s)


@dataclass
class LoopState:
    """What one loop has done so far (updated from its events)."""

    name: str
    device: int | None
    done: int = 0
    failed: int = 0
    running: str | None = None
    exit_code: int | None = None
    error: str | None = None


@dataclass
class ParallelSummary:
    """The loops at the end, and the stop signal that ended them (None when they ran out)."""

    loops: list[LoopState]
    stopped_by: int | None = None
    outcomes: list[dict[str, object]] = field(default_factory=list)


def check_gpus(gpus: Sequence[int], *, option: str = "--gpus") -> tuple[int, ...]:
    """Device ids: each 0 or more, none repeated."""
    seen: set[int] = set()
    for g in gpus:
        if g < 0:
            raise InvalidInput(f"{option}: device ids are 0 or more. Got {g}.")
        if g in seen:
            raise InvalidInput(f"{option}: device {g} is listed twice; list each device once.")
        seen.add(g)
    if not gpus:
        raise InvalidInput(f"{option} needs at least one device id, e.g. 0,1.")
    return tuple(gpus)


def loop_plan(
    worker: str, parallel: int | None, gpus: Sequence[int] | None
) -> list[tuple[str, int | None]]:
    """(worker name, device) of each loop: ``worker.1`` ... or ``worker.gpu3`` ..."""
    if gpus is not None:
        if parallel is not None and parallel != len(gpus):
            raise InvalidInput(
                f"--parallel {parallel} and --gpus with {len(gpus)} devices disagree: --gpus runs "
                "one loop per device; drop --parallel."
            )
        return [(f"{worker}.gpu{g}", g) for g in check_gpus(gpus)]
    n = 1 if parallel is None else parallel
    if n < 1:
        raise InvalidInput(f"--parallel must be 1 or more. Got {n}.")
    return [(f"{worker}.{k + 1}", None) for k in range(n)]


def run_parallel(
    *,
    ledger: str,
    study: str | None,
    loops: list[tuple[str, int | None]],
    command: Sequence[str],
    max_runs: int | None,
    lease: float,
    results_dir: Path | None,
    on_change: Callable[[list[LoopState]], None] | None = None,
) -> ParallelSummary:
    """Run one child work loop per entry of ``loops`` until every child has ended.

    ``ledger`` is the full URL (children open it themselves). ``max_runs`` holds per loop.
    """
    states = [LoopState(name, device) for name, device in loops]
    summary = ParallelSummary(states)
    procs: list[subprocess.Popen[bytes]] = []
    sel = selectors.DefaultSelector()
    previous: dict[int, object] = {}

    def forward(signum: int, _frame: object) -> None:
        if summary.stopped_by is None:
            summary.stopped_by = signum
            for p in procs:
                if p.poll() is None:
                    try:
                        p.send_signal(signum)
                    except ProcessLookupError:
                        pass
        else:  # a second signal: stop the children at once (each still stops its trainer)
            for p in procs:
                if p.poll() is None:
                    p.send_signal(signal.SIGTERM)

    for s in _STOPS:
        previous[s] = signal.signal(s, forward)
    try:
        for k, (name, device) in enumerate(loops):
            r, w = os.pipe()
            spec = {
                "study": study,
                "worker": name,
                "command": list(command),
                "max_runs": max_runs,
                "lease": lease,
                "results": None if results_dir is None else str(results_dir),
                "fd": w,
            }
            env = dict(os.environ)
            env["FEWSHOT_LEDGER"] = ledger  # in the environment: a password never shows in ps
            if device is not None:
                env["CUDA_VISIBLE_DEVICES"] = str(device)
            procs.append(
                subprocess.Popen(
                    [sys.executable, "-m", "fewshot.cluster.loop_child", json.dumps(spec)],
                    env=env,
                    pass_fds=(w,),
                    process_group=0,
                )
            )
            os.close(w)
            sel.register(os.fdopen(r, "rb", buffering=0), selectors.EVENT_READ, (k, bytearray()))
            if summary.stopped_by is not None:
                break
        if on_change is not None:
            on_change(states)
        while sel.get_map():
            for key, _ in sel.select(timeout=1.0):
                k, buf = key.data
                chunk = key.fileobj.read(65536)  # type: ignore[union-attr]
                if not chunk:
                    sel.unregister(key.fileobj)
                    key.fileobj.close()  # type: ignore[union-attr]
                    continue
                buf.extend(chunk)
                while b"\n" in buf:
                    line, _, rest = bytes(buf).partition(b"\n")
                    buf[:] = rest
                    _apply(states[k], json.loads(line), summary)
                if on_change is not None:
                    on_change(states)
        for st, p in zip(states, procs, strict=False):
            st.exit_code = p.wait()
            st.running = None
        if on_change is not None:
            on_change(states)
    finally:
        for p in procs:
            if p.poll() is None:  # an error here: never leave a loop behind
                p.send_signal(signal.SIGTERM)
                p.wait()
        for s, h in previous.items():
            signal.signal(s, h)  # type: ignore[arg-type]
    return summary


def _apply(st: LoopState, event: dict[str, object], summary: ParallelSummary) -> None:
    kind = event.get("event")
    if kind == "start":
        st.running = str(event["run"])
    elif kind == "end":
        st.running = None
        if event["status"] == "done":
            st.done += 1
        elif event["status"] != "superseded":
            st.failed += 1
        summary.outcomes.append({**event, "worker": st.name, "device": st.device})
    elif kind == "error":
        st.error = str(event["message"])
