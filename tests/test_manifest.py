"""Manifests: lineage, digests checked with coreutils, atomic writes, refusals."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
from dataclasses import replace
from pathlib import Path

import pytest

from fewshot import DrawSpec, ManifestError, draw_task, load_manifest, verify_subset, write_draw
from fewshot.sampling.manifest import pool_matches, subset_path


def spec_for(pool: Path, **kw) -> DrawSpec:
    base = dict(task="t1", pool=pool, sizes=(1, 3, 10, 30), seeds=(0, 1, 2), id_column="episode")
    base.update(kw)
    return DrawSpec(**base)


def test_manifest_holds_the_lineage(tmp_path: Path, pool_csv: Path):
    excl = tmp_path / "excl.txt"
    excl.write_text("ep000\nep001\nnot-there\n", encoding="utf-8")
    spec = spec_for(
        pool_csv, keep_top=100, rank_by="return", stratify_by="site", reserve=5, exclude=excl
    )
    target = write_draw(tmp_path / "out", draw_task(spec))
    data = json.loads(target.read_text())
    assert data["format"] == "fewshot-manifest" and data["format_version"] == 1
    assert data["rule"] == "fewshot-draw/1"
    assert data["pool"]["rows"] == 120 and data["pool"]["file"] == "pool.csv"
    assert data["exclusions"] == {
        "file": "excl.txt",
        "sha256": data["exclusions"]["sha256"],
        "listed": 3,
        "removed": 2,
    }
    assert data["filter"] == {
        "column": "return",
        "order": "highest",
        "keep_top": 100,
        "before": 118,
        "after": 100,
    }
    assert sum(data["strata"]["pool_counts"].values()) == 100
    assert data["eligible"] == 100 and data["reserve"] == 5
    for seed in ("0", "1", "2"):
        entry = data["seeds"][seed]
        assert len(entry["order"]) == 30 and len(entry["reserve"]) == 5
        assert not {"ep000", "ep001"} & set(entry["order"] + entry["reserve"])
        for n in ("1", "3", "10", "30"):
            assert sum(entry["subsets"][n]["strata"].values()) == int(n)


@pytest.mark.skipif(shutil.which("sha256sum") is None, reason="coreutils sha256sum not installed")
def test_digests_equal_coreutils_sort_and_sha256sum(tmp_path: Path, pool_csv: Path):
    # Outside reference: GNU coreutils `LC_ALL=C sort | sha256sum` over the id file.
    result = draw_task(spec_for(pool_csv))
    write_draw(tmp_path, result)
    env = {**os.environ, "LC_ALL": "C"}
    for d in result.draws:
        for n in d.sizes:
            path = subset_path(tmp_path, "t1", d.seed, n)
            sorted_ids = subprocess.run(
                ["sort", str(path)], capture_output=True, env=env, check=True
            ).stdout
            digest = (
                subprocess.run(["sha256sum"], input=sorted_ids, capture_output=True, check=True)
                .stdout.split()[0]
                .decode()
            )
            assert digest == d.digest(n)


@pytest.mark.skipif(shutil.which("sha256sum") is None, reason="coreutils sha256sum not installed")
def test_unicode_ids_sort_like_the_c_locale(tmp_path: Path, csv_file):
    # Byte order (C locale) vs code point order agree for UTF-8: checked with coreutils.
    ids = ["b", "B", "é", "z", "Ω", "a-1", "a_1", "😀", "ä"]
    pool = csv_file(tmp_path / "u.csv", ["id"], [[i] for i in ids])
    result = draw_task(DrawSpec("u", pool, (len(ids),), (7,)))
    write_draw(tmp_path, result)
    path = subset_path(tmp_path, "u", 7, len(ids))
    env = {**os.environ, "LC_ALL": "C"}
    out = (
        subprocess.run(
            f"sort {path} | sha256sum", shell=True, capture_output=True, env=env, check=True
        )
        .stdout.split()[0]
        .decode()
    )
    assert out == result.draws[0].digest(len(ids))


def test_identical_draws_write_identical_bytes(tmp_path: Path, pool_csv: Path):
    a = write_draw(tmp_path / "a", draw_task(spec_for(pool_csv)))
    b = write_draw(tmp_path / "b", draw_task(spec_for(pool_csv)))
    assert a.read_bytes() == b.read_bytes()


def test_shuffled_pool_rows_and_changed_columns_give_the_same_subsets(tmp_path: Path, pool_csv):
    lines = pool_csv.read_text().splitlines()
    header, rows = lines[0], lines[1:]
    other = tmp_path / "shuffled.csv"
    # Reverse the rows and change the site column: the unstratified subsets must not move.
    other.write_text(header + "\n" + "\n".join(r.replace("north", "N") for r in rows[::-1]) + "\n")
    a = draw_task(spec_for(pool_csv))
    b = draw_task(spec_for(other))
    assert a.draws == b.draws
    assert a.lineage.pool_digest != b.lineage.pool_digest


def test_redraw_with_other_lineage_is_refused_and_nothing_changes(
    tmp_path: Path, pool_csv, snapshot
):
    out = tmp_path / "out"
    write_draw(out, draw_task(spec_for(pool_csv)))
    before = snapshot(out)
    with pytest.raises(ManifestError, match="different reserve"):
        write_draw(out, draw_task(spec_for(pool_csv, reserve=3)))
    assert snapshot(out) == before
    write_draw(out, draw_task(spec_for(pool_csv, reserve=3)), replace=True)
    assert load_manifest(out / "t1.manifest.json").data["reserve"] == 3


def test_a_failed_write_leaves_nothing_behind(tmp_path: Path, pool_csv, monkeypatch):
    out = tmp_path / "out"
    out.mkdir()
    calls = {"n": 0}
    real = Path.write_text

    def flaky(self, *a, **k):
        calls["n"] += 1
        if calls["n"] == 5:
            raise OSError(28, "No space left on device")
        return real(self, *a, **k)

    monkeypatch.setattr(Path, "write_text", flaky)
    with pytest.raises(OSError):
        write_draw(out, draw_task(spec_for(pool_csv)))
    assert list(out.iterdir()) == []


def test_a_failed_rewrite_keeps_the_old_draw(tmp_path: Path, pool_csv, monkeypatch, snapshot):
    out = tmp_path / "out"
    write_draw(out, draw_task(spec_for(pool_csv)))
    before = snapshot(out)
    import fewshot.sampling.draw_folder as m

    def broken(src, dst):
        raise OSError(5, "I/O error")

    monkeypatch.setattr(m.os, "replace", broken)
    with pytest.raises(OSError):
        write_draw(out, draw_task(spec_for(pool_csv, seeds=(0, 1, 2, 3))))
    monkeypatch.undo()
    assert snapshot(out) == before


def test_verify_any_order_and_differences(tmp_path: Path, pool_csv):
    result = draw_task(spec_for(pool_csv))
    m = load_manifest(write_draw(tmp_path, result))
    ids = list(result.draw(1).subset(10))
    assert verify_subset(m, reversed(ids), 1, 10).matches
    v = verify_subset(m, ids[:8] + ["intruder", ids[0]], 1, 10)
    assert not v.matches
    assert v.missing == tuple(sorted(ids[8:])) and v.extra == ("intruder",)
    assert v.repeated == (ids[0],)


def test_pool_digest_check(tmp_path: Path, pool_csv):
    m = load_manifest(write_draw(tmp_path / "o", draw_task(spec_for(pool_csv))))
    assert pool_matches(m, pool_csv)[0]
    pool_csv.write_text(pool_csv.read_text() + "ep999,1,north\n")
    assert not pool_matches(m, pool_csv)[0]


@pytest.mark.parametrize(
    ("edit", "fragment"),
    [
        (lambda d: "not json", "not valid JSON"),
        (lambda d: json.dumps({"format": "other"}), "not a fewshot manifest"),
        (lambda d: json.dumps({**d, "format_version": 99}), "newer than this fewshot"),
        (lambda d: json.dumps({k: v for k, v in d.items() if k != "sizes"}), "incomplete"),
        (lambda d: json.dumps(_tamper(d)), "does not match the recorded order"),
    ],
)
def test_damaged_manifests_are_refused(tmp_path: Path, pool_csv, edit, fragment):
    target = write_draw(tmp_path, draw_task(spec_for(pool_csv)))
    target.write_text(edit(json.loads(target.read_text())))
    with pytest.raises(ManifestError, match=fragment):
        load_manifest(target)


def _tamper(d: dict) -> dict:
    d["seeds"]["0"]["order"][0] = "ep119x"
    return d


def test_task_name_must_be_valid(pool_csv):
    from fewshot import InvalidName

    with pytest.raises(InvalidName, match="not valid"):
        draw_task(replace(spec_for(pool_csv), task="../escape"))
