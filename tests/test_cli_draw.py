"""The draw and verify commands: output, exit codes, and bad input that writes nothing."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
import typer
from typer.testing import CliRunner

from fewshot import __version__
from fewshot.cli import app

runner = CliRunner()


def run(*args: str):
    return runner.invoke(app, [str(a) for a in args])


def test_version_and_help():
    assert run("--version").output.strip() == f"fewshot {__version__}"
    for flag in ("-h", "--help"):
        result = run(flag)
        assert result.exit_code == 0 and "draw" in result.output and "verify" in result.output


def test_every_command_has_help():
    group = typer.main.get_command(app)
    for name in group.commands:  # type: ignore[attr-defined]
        result = run(name, "--help")
        assert result.exit_code == 0, name
        assert "Usage" in result.output


def test_draw_table_then_verify(tmp_path: Path, pool_csv: Path):
    out = tmp_path / "draws"
    result = run(
        "draw",
        pool_csv,
        "--task",
        "t1",
        "--id-column",
        "episode",
        "--sizes",
        "1,3,10",
        "--seeds",
        "0,1",
        "--keep-top",
        "90",
        "--rank-by",
        "return",
        "--stratify-by",
        "site",
        "--reserve",
        "4",
        "--out",
        out,
    )
    assert result.exit_code == 0, result.output
    assert "kept the highest 90 of 120 by return" in result.output
    assert "seed 0" in result.output and "seed 1" in result.output
    assert (out / "t1.manifest.json").exists()
    files = sorted(p.relative_to(out).as_posix() for p in out.rglob("*.txt"))
    assert files == [f"t1/s{s}/n{n}.txt" for s in (0, 1) for n in (1, 10, 3)]
    manifest = out / "t1.manifest.json"
    ok = run(
        "verify", manifest, out / "t1/s1/n10.txt", "--seed", "1", "--size", "10", "--pool", pool_csv
    )
    assert ok.exit_code == 0 and "matches" in ok.output and "recorded digest" in ok.output
    bad = run("verify", manifest, out / "t1/s1/n10.txt", "--seed", "1", "--size", "3")
    assert bad.exit_code == 1
    assert "7 extra" in bad.output


def test_draw_json_summary(tmp_path: Path, pool_csv: Path):
    result = run(
        "draw",
        pool_csv,
        "--task",
        "t1",
        "--id-column",
        "episode",
        "--sizes",
        "0,5",
        "--seeds",
        "3",
        "--out",
        tmp_path,
        "--format",
        "json",
    )
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    assert data["task"] == "t1" and data["eligible"] == 120
    assert [(r["seed"], r["size"]) for r in data["subsets"]] == [(3, 0), (3, 5)]
    ids = Path(data["subsets"][1]["file"]).read_text().split()
    assert len(ids) == 5


def test_verify_reports_a_changed_pool(tmp_path: Path, pool_csv: Path):
    run(
        "draw",
        pool_csv,
        "--task",
        "t1",
        "--id-column",
        "episode",
        "--sizes",
        "5",
        "--seeds",
        "0",
        "--out",
        tmp_path,
    )
    pool_csv.write_text(pool_csv.read_text().replace("ep005", "ep005b"))
    result = run(
        "verify",
        tmp_path / "t1.manifest.json",
        tmp_path / "t1/s0/n5.txt",
        "--seed",
        "0",
        "--size",
        "5",
        "--pool",
        pool_csv,
    )
    assert result.exit_code == 1 and "pool changed" in result.output


def _pool(tmp_path: Path, csv_file, rows: int = 20) -> Path:
    return csv_file(
        tmp_path / "p.csv",
        ["id", "score", "grp"],
        [[f"i{k}", k, "g" + str(k % 2)] for k in range(rows)],
    )


BAD_DRAWS = [
    (["--id-column", "episode"], "no id column 'episode'. Columns found: id, score, grp"),
    (["--sizes", "1,50"], "size 50 is larger than the eligible pool: 20 ids"),
    (["--sizes", "5", "--reserve", "18"], "2 after a reserve of 18"),
    (["--sizes", "1,-3"], "whole numbers of 0 or more"),
    (["--sizes", "1,2.5"], "whole numbers separated by commas"),
    (["--sizes", "3,3"], "must not repeat"),
    (["--seeds", "-1"], "seeds must be whole numbers from 0"),
    (["--seeds", str(2**64)], "seeds must be whole numbers from 0"),
    (["--seeds", "1,1"], "seeds must not repeat"),
    (["--keep-top", "5", "--rank-by", "nope"], "no column 'nope' (--rank-by)"),
    (["--keep-top", "5", "--rank-by", "grp"], "column 'grp' (--rank-by) must be numeric"),
    (["--keep-top", "50", "--rank-by", "score"], "--keep-top (50) is larger than the pool (20"),
    (["--keep-top", "5"], "--keep-top and --rank-by go together"),
    (["--stratify-by", "colour"], "no column 'colour' (--stratify-by)"),
    (["--task", "bad name"], "task name 'bad name' is not valid"),
    (["--task", "a/b"], "task name 'a/b' is not valid"),
    (["--exclude", "missing.txt"], "exclusion file not found"),
    (["--allocation", "equal"], "--allocation only applies with --stratify-by"),
]


@pytest.mark.parametrize(("extra", "fragment"), BAD_DRAWS)
def test_bad_draws_exit_2_with_a_message_and_write_nothing(
    tmp_path: Path, extra, fragment, snapshot, csv_file
):
    pool = _pool(tmp_path, csv_file)
    out = tmp_path / "out"
    args = ["draw", pool, "--task", "t", "--sizes", "1,3", "--seeds", "0", "--out", out]
    # later options win, so the table's options override the defaults above
    result = run(*args, *extra)
    assert result.exit_code == 2, result.output
    assert fragment in result.output
    assert "Traceback" not in result.output
    assert snapshot(out) == {}


@pytest.mark.parametrize(
    ("content", "fragment"),
    [
        (b"id,score\ni1,1\ni1,2\ni2,3\n", "appear more than once, e.g. 'i1'"),
        (b"id,score\ni1,1\n,2\n", "empty id"),
        (b"", "the file is empty"),
        (b"id,score\n", "no episodes"),
        (b"id,score\ni\xe91,1\n", "line 2: not valid UTF-8"),
    ],
)
def test_bad_pool_files_exit_2(tmp_path: Path, content, fragment, snapshot):
    pool = tmp_path / "p.csv"
    pool.write_bytes(content)
    out = tmp_path / "out"
    result = run("draw", pool, "--task", "t", "--sizes", "1", "--seeds", "0", "--out", out)
    assert result.exit_code == 2 and fragment in result.output and str(pool) in result.output
    assert snapshot(out) == {}


def test_redraw_with_other_reserve_is_refused_without_replace(tmp_path: Path, snapshot, csv_file):
    pool = _pool(tmp_path, csv_file)
    base = ["draw", pool, "--task", "t", "--sizes", "1,3", "--seeds", "0", "--out", tmp_path / "o"]
    assert run(*base).exit_code == 0
    before = snapshot(tmp_path / "o")
    refused = run(*base, "--reserve", "2")
    assert refused.exit_code == 2 and "different reserve" in refused.output
    assert snapshot(tmp_path / "o") == before
    assert run(*base, "--reserve", "2", "--replace").exit_code == 0


def test_debug_shows_the_traceback(tmp_path: Path, csv_file):
    pool = _pool(tmp_path, csv_file)
    result = run(
        "--debug",
        "draw",
        pool,
        "--task",
        "t",
        "--sizes",
        "99",
        "--seeds",
        "0",
        "--out",
        tmp_path / "o",
    )
    assert result.exit_code != 0
    assert result.exception is not None and "larger than the eligible pool" in str(result.exception)


@pytest.mark.parametrize(
    ("args", "fragment"),
    [
        (["--seed", "9", "--size", "1"], "seed 9 was not drawn"),
        (["--seed", "0", "--size", "7"], "size 7 was not drawn"),
    ],
)
def test_verify_bad_requests_exit_2(tmp_path: Path, args, fragment, csv_file):
    pool = _pool(tmp_path, csv_file)
    run("draw", pool, "--task", "t", "--sizes", "1,3", "--seeds", "0", "--out", tmp_path)
    result = run("verify", tmp_path / "t.manifest.json", tmp_path / "t/s0/n1.txt", *args)
    assert result.exit_code == 2 and fragment in result.output


def test_verify_missing_manifest_exit_2(tmp_path: Path):
    ids = tmp_path / "ids.txt"
    ids.write_text("a\n")
    result = run("verify", tmp_path / "none.json", ids, "--seed", "0", "--size", "1")
    assert result.exit_code == 2 and "manifest not found" in result.output


def test_demo_pool_in_studies_draws(tmp_path: Path, demo_pool: Path):
    result = run(
        "draw",
        demo_pool,
        "--task",
        "dock-east",
        "--id-column",
        "episode",
        "--sizes",
        "1,3,5,10,100",
        "--seeds",
        "0,1,2",
        "--keep-top",
        "300",
        "--rank-by",
        "return",
        "--stratify-by",
        "site",
        "--out",
        tmp_path,
    )
    assert result.exit_code == 0, result.output


def test_library_parameters_become_the_commands_flags():
    # The library names parameters; each command translates them to its flags.
    from fewshot.cli.common import as_flags

    flags = {"keep_top": "--keep-top", "rank_by": "--rank-by"}
    assert (
        as_flags("keep_top and rank_by go together", flags, bare=True)
        == "--keep-top and --rank-by go together"
    )
    # without ``bare`` (every command but draw) prose is left alone: only backticked names change
    assert as_flags("keep_top and rank_by go together", flags) == "keep_top and rank_by go together"
    assert as_flags("pick one with `study`.", {}) == "pick one with --study."
    assert as_flags("`max_runs` must be 1", {"max_runs": "--max-runs"}) == "--max-runs must be 1"
    # a flag already spelled, part of a longer word, or a name not mapped stays as it is
    assert (
        as_flags("--keep-top 5 and keep_tops, rank", flags, bare=True)
        == "--keep-top 5 and keep_tops, rank"
    )


def test_backticked_parameters_leave_the_prose_alone():
    from fewshot.cli.common import as_flags

    msg = "`template` is not a valid template (x)."
    assert as_flags(msg, {"template": "--template"}) == "--template is not a valid template (x)."
