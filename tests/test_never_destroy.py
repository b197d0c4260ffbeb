"""fewshot never deletes or overwrites a file it did not write.

Each case is one a red-team pass reproduced: a user folder named like a task, a study whose draws
folder holds its own pools, a demo pointed at a user's folder, a manifest path holding another file.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from fewshot import DrawSpec, ManifestError, draw_task, load_manifest, write_draw
from fewshot.cli import app
from fewshot.sampling.draw_folder import DRAWS_MARKER

runner = CliRunner()


def run(*args: object):
    return runner.invoke(app, [str(a) for a in args])


def spec(
    pool: Path, task: str = "t1", seeds: tuple[int, ...] = (0, 1), reserve: int = 0
) -> DrawSpec:
    return DrawSpec(
        task=task, pool=pool, sizes=(1, 3, 10), seeds=seeds, id_column="episode", reserve=reserve
    )


def test_draw_refuses_a_user_folder_named_like_the_task(tmp_path: Path, snapshot, studies_dir):
    # The reported repro: the user's pool and an eval list live in data/dock-east/.
    data = tmp_path / "data"
    (data / "dock-east").mkdir(parents=True)
    shutil.copy(studies_dir / "pools" / "dock-east.csv", data / "dock-east" / "pool.csv")
    (data / "dock-east" / "eval-ids.txt").write_text("x\n")
    before = snapshot(data)
    result = run(
        "draw",
        data / "dock-east" / "pool.csv",
        "--task",
        "dock-east",
        "--id-column",
        "episode",
        "--sizes",
        "1,3",
        "--seeds",
        "0",
        "--out",
        data,
    )
    assert result.exit_code == 2, result.output
    assert "did not write" in result.output and "eval-ids.txt" in result.output
    assert snapshot(data) == before
    assert sorted(p.name for p in data.iterdir()) == ["dock-east"]


def test_replace_does_not_delete_a_user_file_put_into_a_draws_folder(
    tmp_path: Path, pool_csv, snapshot
):
    out = tmp_path / "out"
    write_draw(out, draw_task(spec(pool_csv)))
    (out / "t1" / "notes.md").write_text("my notes\n")
    before = snapshot(out)
    with pytest.raises(ManifestError, match="notes.md"):
        write_draw(out, draw_task(spec(pool_csv, reserve=3)), replace=True)
    assert snapshot(out) == before


def test_a_file_at_the_manifest_path_that_is_not_a_manifest_is_kept(tmp_path: Path, pool_csv):
    out = tmp_path / "out"
    out.mkdir()
    (out / "t1.manifest.json").write_text('{"mine": true}\n')
    with pytest.raises(ManifestError, match="did not write|cannot prove"):
        write_draw(out, draw_task(spec(pool_csv)), replace=True)
    assert (out / "t1.manifest.json").read_text() == '{"mine": true}\n'
    assert not (out / "t1").exists()


def test_a_symlinked_task_folder_is_refused(tmp_path: Path, pool_csv):
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    (elsewhere / "keep.txt").write_text("k")
    out = tmp_path / "out"
    out.mkdir()
    (out / "t1").symlink_to(elsewhere)
    with pytest.raises(ManifestError, match="not one it made"):
        write_draw(out, draw_task(spec(pool_csv)), replace=True)
    assert (elsewhere / "keep.txt").read_text() == "k"


def test_study_with_draws_dir_dot_keeps_its_own_pool(tmp_path: Path, snapshot, study_file):
    # draws_dir = "." and the pool in a folder named like the task: init must refuse, not delete it.
    study = study_file(tmp_path, draws_dir=".", task={"pool": "reach/pool.csv"})
    (tmp_path / "reach").mkdir()
    (tmp_path / "pool.csv").rename(tmp_path / "reach" / "pool.csv")
    before = snapshot(tmp_path)
    ledger = tmp_path / "ledger.sqlite"
    result = run("init", study, "--ledger", ledger)
    assert result.exit_code == 2, result.output
    assert "reach" in result.output and "did not write" in result.output
    assert (tmp_path / "reach" / "pool.csv").read_bytes() == before["reach/pool.csv"]
    assert snapshot(tmp_path) == before  # the refusal comes before the ledger is created


def test_demo_refuses_a_folder_with_user_files(tmp_path: Path, snapshot):
    (tmp_path / "study.toml").write_text("mine\n")
    (tmp_path / "report.html").write_text("<p>mine</p>\n")
    before = snapshot(tmp_path)
    result = run("demo", "--out", tmp_path, "--quick")
    assert result.exit_code == 2, result.output
    assert "not a fewshot demo" in result.output
    assert snapshot(tmp_path) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report.html", "study.toml"]


def test_adding_seeds_leaves_existing_id_files_in_place(tmp_path: Path, pool_csv):
    # Trainers may be reading these files: a same-lineage redraw must not swap them away.
    out = tmp_path / "out"
    write_draw(out, draw_task(spec(pool_csv)))
    f = out / "t1" / "s0" / "n3.txt"
    inode, text = f.stat().st_ino, f.read_text()
    write_draw(out, draw_task(spec(pool_csv, seeds=(0, 1, 2))))
    assert f.stat().st_ino == inode and f.read_text() == text
    assert (out / "t1" / "s2" / "n10.txt").is_file()
    marker = json.loads((out / "t1" / DRAWS_MARKER).read_text())
    assert "s2/n10.txt" in marker["files"] and "s0/n3.txt" in marker["files"]
    assert load_manifest(out / "t1.manifest.json").seeds == (0, 1, 2)


def test_a_folder_written_before_the_marker_is_proved_by_its_manifest(tmp_path: Path, pool_csv):
    out = tmp_path / "out"
    write_draw(out, draw_task(spec(pool_csv)))
    (out / "t1" / DRAWS_MARKER).unlink()
    write_draw(out, draw_task(spec(pool_csv, reserve=2)), replace=True)
    assert load_manifest(out / "t1.manifest.json").data["reserve"] == 2
    assert (out / "t1" / DRAWS_MARKER).is_file()


def test_staging_left_by_a_killed_draw_is_cleaned_but_a_live_one_is_kept(tmp_path: Path, pool_csv):
    out = tmp_path / "out"
    write_draw(out, draw_task(spec(pool_csv)))
    from fewshot.sampling.draw_folder import STAGING, STAGING_MARK, host_name

    # A pid that has certainly exited: a child we started and waited for.
    dead = subprocess.run(
        [sys.executable, "-c", "import os; print(os.getpid())"],
        capture_output=True,
        text=True,
        check=True,
    )
    dead_pid = int(dead.stdout)
    stale = out / f".t1.{STAGING}-{host_name()}-{dead_pid}-abc"
    live = out / f".t1.{STAGING}-{host_name()}-{os.getppid()}-def"
    unmarked = out / f".t1.{STAGING}-{host_name()}-{dead_pid}-ghi"
    for d in (stale, live, unmarked):
        d.mkdir()
    (stale / STAGING_MARK).write_text("")
    (live / STAGING_MARK).write_text("")
    write_draw(out, draw_task(spec(pool_csv, seeds=(0, 1, 2))))
    assert not stale.exists()
    assert live.exists() and unmarked.exists()
