"""The network-filesystem check: a SQLite ledger on NFS, Lustre, ... is refused for many writers.

The reason is SQLite's own documentation (https://www.sqlite.org/wal.html: "WAL does not work
over a network filesystem"; https://www.sqlite.org/useovernet.html). The mount-table lines below
follow the format of proc(5) (/proc/[pid]/mounts: device, mount point, type, options, 0, 0).
"""

from __future__ import annotations

import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from fewshot.cli import app
from fewshot.cluster import netfs
from fewshot.errors import InvalidInput

runner = CliRunner()

REFUSED = [
    ("server:/export/home", "nfs"),
    ("server:/export/home", "nfs4"),
    ("//server/share", "cifs"),
    ("//server/share", "smb3"),
    ("10.0.0.1@tcp:/scratch", "lustre"),
    ("gpfs0", "gpfs"),
    ("beegfs_nodev", "beegfs"),
    ("10.0.0.2:6789:/", "ceph"),
    ("server:/vol", "glusterfs"),
    ("sshfs#me@host:", "fuse"),
    ("me@host:/data", "fuse.sshfs"),
]
ACCEPTED = ["ext4", "xfs", "btrfs", "tmpfs", "overlay"]


def _table(tmp_path: Path, point: Path, source: str, fstype: str) -> Path:
    # the root and /proc are always there; the ledger's folder is mounted last
    text = (
        "/dev/sda1 / ext4 rw,relatime 0 0\n"
        "proc /proc proc rw,nosuid,nodev,noexec,relatime 0 0\n"
        f"{source} {str(point).replace(' ', chr(92) + '040')} {fstype} rw,relatime 0 0\n"
    )
    table = tmp_path / "mounts"
    table.write_text(text)
    return table


@pytest.mark.parametrize(("source", "fstype"), REFUSED)
def test_each_network_type_is_refused(tmp_path: Path, source: str, fstype: str):
    folder = tmp_path / "shared folder"  # a space, written \040 in the table
    folder.mkdir()
    mounts = netfs.read_mounts(_table(tmp_path, folder, source, fstype))
    url = f"sqlite:///{folder / 'deep' / 'l.sqlite'}"
    with pytest.raises(InvalidInput, match=f"network filesystem \\({fstype} mounted at"):
        netfs.check_ledger_filesystem(url, mounts=mounts)
    warning = netfs.check_ledger_filesystem(url, allow_network_fs=True, mounts=mounts)
    assert warning is not None and "--allow-network-fs" in warning
    assert netfs.network_fs_warning(url, mounts=mounts) is not None


@pytest.mark.parametrize("fstype", ACCEPTED)
def test_local_types_are_accepted(tmp_path: Path, fstype: str):
    mounts = netfs.read_mounts(_table(tmp_path, tmp_path, "/dev/x", fstype))
    url = f"sqlite:///{tmp_path / 'l.sqlite'}"
    assert netfs.check_ledger_filesystem(url, mounts=mounts) is None
    assert netfs.network_fs_warning(url, mounts=mounts) is None


def test_the_deepest_mount_decides_and_postgresql_is_never_refused(tmp_path: Path):
    # a local scratch disk mounted inside an NFS home is local
    table = tmp_path / "mounts"
    table.write_text(
        f"server:/home {tmp_path} nfs4 rw 0 0\n/dev/nvme0n1 {tmp_path / 'scratch'} xfs rw 0 0\n"
    )
    mounts = netfs.read_mounts(table)
    assert (
        netfs.check_ledger_filesystem(f"sqlite:///{tmp_path / 'scratch/l.sqlite'}", mounts=mounts)
        is None
    )
    with pytest.raises(InvalidInput):
        netfs.check_ledger_filesystem(f"sqlite:///{tmp_path / 'l.sqlite'}", mounts=mounts)
    assert netfs.check_ledger_filesystem("postgresql+psycopg://u@h/db", mounts=mounts) is None


def test_work_and_slurm_refuse_a_ledger_on_nfs_and_change_nothing(
    tmp_path: Path, monkeypatch, dump, study_file
):
    study = study_file(tmp_path)
    ledger = str(tmp_path / "l.sqlite")
    assert runner.invoke(app, ["init", str(study), "--ledger", ledger]).exit_code == 0
    monkeypatch.setattr(netfs, "MOUNTS_FILE", _table(tmp_path, tmp_path, "srv:/x", "nfs4"))
    before = dump(ledger)
    for args in (
        ["work", "--worker", "w", "--ledger", ledger, "--", "true"],
        ["work", "--worker", "w", "--parallel", "2", "--ledger", ledger, "--", "true"],
        ["exec", "--worker", "w", "--ledger", ledger, "--", "true"],
        ["slurm", "--workers", "2", "--script-only", "--ledger", ledger, "--", "true"],
    ):
        res = runner.invoke(app, args)
        assert res.exit_code == 2, (args, res.output)
        assert "network filesystem (nfs4" in res.output
        assert "PostgreSQL" in res.output and "--pinned" in res.output
        assert "Traceback" not in res.output
    assert dump(ledger) == before
    assert not (tmp_path / "slurm").exists()
    # pinned mode never lets nodes open the ledger: allowed
    res = runner.invoke(
        app, ["slurm", "--pinned", "--script-only", "--ledger", ledger, "--", "true"]
    )
    assert res.exit_code == 0, res.output
    # --allow-network-fs goes on, with a warning
    res = runner.invoke(
        app,
        [
            "work",
            "--worker",
            "w",
            "--allow-network-fs",
            "--max-runs",
            "1",
            "--ledger",
            ledger,
            "--",
            sys.executable,
            "-c",
            "from fewshot.writer import ResultWriter; "
            "ResultWriter.from_env().write('return', 1.0, final=True)",
        ],
    )
    assert res.exit_code == 0, res.output
    assert "warning:" in res.output and "1 runs: 1 done" in res.output


def test_single_process_commands_only_warn(tmp_path: Path, monkeypatch, study_file):
    study = study_file(tmp_path)
    ledger = str(tmp_path / "l.sqlite")
    assert runner.invoke(app, ["init", str(study), "--ledger", ledger]).exit_code == 0
    monkeypatch.setattr(netfs, "MOUNTS_FILE", _table(tmp_path, tmp_path, "srv:/x", "lustre"))
    res = runner.invoke(app, ["status", "--ledger", ledger])
    assert res.exit_code == 0, res.output
    assert "warning:" in res.output and "network filesystem (lustre)" in res.output
