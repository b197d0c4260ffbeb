"""One child work loop of ``fewshot work --parallel`` (see :mod:`fewshot.cluster.parallel`).

Started as ``python -m fewshot.cluster.loop_child SPEC`` with a JSON spec; it reports each run's
start and end as JSON lines on the pipe whose descriptor the spec names, and exits 0 (all runs
done), 1 (some failed), 2 (an error, reported on the pipe) or 128 + the stop signal.
"""

from __future__ import annotations

import json
import os
import signal
import sys
import time
from pathlib import Path


def main(argv: list[str]) -> int:
    spec = json.loads(argv[0])
    pipe = os.fdopen(int(spec["fd"]), "w", buffering=1)

    def send(**event: object) -> None:
        pipe.write(json.dumps({**event, "at": time.time()}) + "\n")

    from fewshot.errors import FewshotError
    from fewshot.ledger import Ledger
    from fewshot.worker.loop import run_claims

    try:
        led = Ledger.open(None, study=spec["study"])  # FEWSHOT_LEDGER
    except FewshotError as exc:
        send(event="error", message=str(exc))
        return 2
    failed = 0
    try:
        outcomes = run_claims(
            led,
            spec["worker"],
            spec["command"],
            max_runs=spec["max_runs"],
            lease=float(spec["lease"]),
            results_dir=None if spec["results"] is None else Path(spec["results"]),
            ledger_url=led.connect_url,
            on_start=lambda c: send(event="start", run=c.key, attempt=c.attempt),
            on_end=lambda o: send(
                event="end",
                run=o.key,
                status=o.status,
                returncode=o.returncode,
                seconds=o.seconds,
                ingested=o.ingested,
            ),
        )
        failed = sum(1 for o in outcomes if o.status not in ("done", "superseded"))
    except KeyboardInterrupt as exc:  # Stopped: the run went back to the plan
        return 128 + int(getattr(exc, "signum", signal.SIGINT))
    except FewshotError as exc:
        send(event="error", message=str(exc))
        return 2
    finally:
        led.close()
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
