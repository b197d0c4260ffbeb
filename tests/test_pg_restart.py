"""A PostgreSQL ledger whose server restarts under 4 work loops: no traceback, no worker dies,
every run done once. The test starts a throwaway server of its own (initdb into a temporary
folder, run as the postgres user), so that restarting it disturbs nobody else."""

from __future__ import annotations

import glob
import os
import pwd
import shutil
import socket
import subprocess
import sys
import tempfile
from collections.abc import Iterator
from pathlib import Path

import pytest

from fewshot.ledger import Ledger, LedgerError
from fewshot.study import load_study

ROOT = Path(__file__).resolve().parent.parent


def _pg_bin() -> Path | None:
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"))
    return Path(found[-1]).parent if found else None


class Server:
    def __init__(self, bindir: Path, data: Path, port: int) -> None:
        self.bindir, self.data, self.port = bindir, data, port

    def ctl(self, *args: str) -> None:
        opts = f"-k {self.data} -c listen_addresses=127.0.0.1 -p {self.port}"
        cmd = f"{self.bindir}/pg_ctl -D {self.data} -o '{opts}' -l {self.data}/log -w {' '.join(args)}"
        subprocess.run(["su", "postgres", "-c", cmd], check=True, capture_output=True, timeout=120)

    @property
    def url(self) -> str:
        return f"postgresql://postgres@127.0.0.1:{self.port}/postgres"


@pytest.fixture
def server() -> Iterator[Server]:
    bindir = _pg_bin()
    if bindir is None:
        pytest.skip("PostgreSQL's initdb is not installed, so no throwaway server can be started")
    if os.geteuid() != 0 or shutil.which("su") is None:
        pytest.skip("starting a throwaway PostgreSQL server needs root (to run it as postgres)")
    pytest.importorskip("psycopg", reason="the PostgreSQL driver is not installed")
    try:
        pwd.getpwnam("postgres")
    except KeyError:
        pytest.skip("there is no postgres user to run a throwaway PostgreSQL server as")
    # its own folder under the system's temporary folder: the postgres user cannot enter
    # pytest's (private) temporary folders
    data = Path(tempfile.mkdtemp(prefix="fewshot-pg-test."))
    shutil.chown(data, "postgres")
    data.chmod(0o700)
    subprocess.run(
        ["su", "postgres", "-c", f"{bindir}/initdb -D {data} -A trust -U postgres"],
        check=True,
        capture_output=True,
        timeout=300,
    )
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    srv = Server(bindir, data, port)
    srv.ctl("start")
    try:
        yield srv
    finally:
        subprocess.run(
            ["su", "postgres", "-c", f"{bindir}/pg_ctl -D {data} -m immediate stop"],
            capture_output=True,
            check=False,
        )
        shutil.rmtree(data, ignore_errors=True)


TRAINER = r"""
import json, os, time
time.sleep(0.2)
with open(os.environ["FEWSHOT_RESULTS"], "a", encoding="utf-8") as f:
    line = {"run": os.environ["FEWSHOT_RUN"], "metric": "return", "value": 1.5, "final": True}
    f.write(json.dumps(line) + "\n")
"""


def test_a_server_restart_under_four_work_loops(
    tmp_path: Path, server: Server, study_file, wait_until
):
    led = Ledger.open(server.url)
    total = led.plan(load_study(study_file(tmp_path, seeds=[0, 1, 2, 3]))).total_runs  # 28 runs
    trainer = tmp_path / "trainer.py"
    trainer.write_text(TRAINER, encoding="utf-8")
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    procs = [
        subprocess.Popen(
            [
                *(sys.executable, "-m", "fewshot.cli", "exec", "--worker", f"w{k}"),
                *("--lease", "60s", "--ledger", server.url, "--results", str(tmp_path / "r")),
                *("--", sys.executable, str(trainer)),
            ],
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
            env=env,
        )
        for k in range(4)
    ]
    wait_until(lambda: led.counts()["done"] >= 4, "the workers to finish 4 runs", timeout=120)
    led.close()
    server.ctl("-m", "fast", "restart")  # every connection is cut; the server comes back
    outs = [p.communicate(timeout=300) for p in procs]
    errs = "".join(e for _, e in outs)
    for p, (out, err) in zip(procs, outs, strict=True):
        assert p.returncode == 0, (out + err)[-3000:]
    assert "Traceback" not in errs and "error" not in errs.lower(), errs[-3000:]
    done_lines = [ln.split()[1] for ln in errs.splitlines() if ln.startswith("done ")]
    with Ledger.open(server.url) as after:
        runs = after.runs()
        assert (runs["status"] == "done").all() and len(runs) == total
        assert sorted(done_lines) == sorted(runs["key"]), "every run done exactly once"
        res = after.results()
        assert len(res) == total and not res.duplicated(["run", "metric", "step"]).any()


def test_a_server_that_stays_away_gives_a_message_not_a_traceback(
    tmp_path: Path, server: Server, study_file
):
    led = Ledger.open(server.url)
    led.plan(load_study(study_file(tmp_path)))
    led.reconnect_seconds = 1.0
    server.ctl("-m", "fast", "stop")
    try:
        with pytest.raises(LedgerError, match="could not reconnect within 1 s"):
            led.counts()
    finally:
        server.ctl("start")
    assert led.counts()["planned"] == 21  # and it works again once the server is back
    led.close()
