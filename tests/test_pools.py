"""Reading pool files: formats, text ids, and errors that say what and where."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import pandas as pd
import pytest

from fewshot import PoolError, read_pool
from fewshot.sampling.pools import read_id_list


def test_csv_ids_stay_text(tmp_path: Path):
    p = tmp_path / "p.csv"
    p.write_text("id,score\n007,1\nNA,2\n1e3,3\n", encoding="utf-8")
    pool = read_pool(p)
    assert pool.ids == ("007", "NA", "1e3")
    assert pool.rows == 3
    assert pool.digest == hashlib.sha256(p.read_bytes()).hexdigest()  # hashlib: reference SHA-256
    assert pool.numeric("score").tolist() == [1.0, 2.0, 3.0]


def test_jsonl_and_parquet_give_the_same_ids_as_csv(tmp_path: Path, pool_csv: Path):
    frame = pd.read_csv(pool_csv, dtype=str)
    jl = tmp_path / "p.jsonl"
    jl.write_text("".join(json.dumps(r) + "\n" for r in frame.to_dict("records")), encoding="utf-8")
    pq = tmp_path / "p.parquet"
    frame.to_parquet(pq)
    ids = read_pool(pool_csv, "episode").ids
    assert read_pool(jl, "episode").ids == ids
    assert read_pool(pq, "episode").ids == ids
    assert (
        read_pool(jl, "episode").numeric("return").tolist()
        == read_pool(pool_csv, "episode").numeric("return").tolist()
    )


def test_jsonl_integer_ids_become_their_text(tmp_path: Path):
    p = tmp_path / "p.jsonl"
    p.write_text('{"id": 5, "r": 1}\n\n{"id": "x", "r": 2}\n', encoding="utf-8")
    assert read_pool(p).ids == ("5", "x")


def test_utf8_bom_is_ignored(tmp_path: Path):
    p = tmp_path / "p.csv"
    p.write_bytes("\ufeffid\na\nb\n".encode())
    assert read_pool(p).ids == ("a", "b")


@pytest.mark.parametrize(
    ("name", "content", "kwargs", "fragment"),
    [
        ("p.csv", b"episode,r\na,1\n", {}, "no id column 'id'. Columns found: episode, r"),
        ("p.csv", b"id,r\na,1\na,2\nb,3\n", {}, "appear more than once, e.g. 'a'"),
        ("p.csv", b"id,r\na,1\n,2\n", {}, "empty id in column 'id', first at line 3"),
        ("p.csv", b"", {}, "the file is empty"),
        ("p.csv", b"id,r\n", {}, "no episodes"),
        ("p.csv", b"id,r\na,1\n\xff\xfe,2\n", {}, "line 3: not valid UTF-8"),
        ("p.jsonl", b'{"id": "a"}\n{"id": "b"\n', {}, "line 2 is not valid JSON"),
        ("p.jsonl", b'{"id": "a"}\n[1, 2]\n', {}, "line 2 must be a JSON object"),
        ("p.jsonl", b'{"id": "a"}\n{"r": 1}\n', {}, "empty id"),
        ("p.txt", b"id\na\n", {}, "unknown pool format '.txt'"),
        ("p.parquet", b"not parquet", {}, "not a readable Parquet file"),
    ],
)
def test_bad_pool_files(tmp_path: Path, name, content, kwargs, fragment):
    p = tmp_path / name
    p.write_bytes(content)
    with pytest.raises(PoolError, match=fragment.replace("(", r"\(").replace(")", r"\)")) as info:
        read_pool(p, **kwargs)
    assert str(p) in str(info.value)


def test_missing_pool_file(tmp_path: Path):
    with pytest.raises(PoolError, match="not found"):
        read_pool(tmp_path / "nope.csv")


def test_non_numeric_rank_column_names_the_line(tmp_path: Path):
    p = tmp_path / "p.csv"
    p.write_text("id,r\na,1\nb,high\nc,3\n", encoding="utf-8")
    with pytest.raises(PoolError, match=r"line 3 holds 'high'"):
        read_pool(p).numeric("r")
    with pytest.raises(PoolError, match=r"no column 'q' \(rank_by\). Columns found: id, r"):
        read_pool(p).numeric("q")


def test_id_list_skips_blank_lines_and_crlf(tmp_path: Path):
    p = tmp_path / "ids.txt"
    p.write_bytes(b"a\r\n\r\nb\n  \nc")
    assert read_id_list(p) == ["a", "b", "c"]
