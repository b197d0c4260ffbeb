"""``fewshot draw`` and ``fewshot verify``: nested subsets from a pool file, and checks of them."""

from __future__ import annotations

from enum import StrEnum
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any, cast

import typer
from rich.table import Table

from fewshot.cli.common import (
    TableOrJson,
    err,
    int_list,
    out,
    print_json,
    progress,
    reporting,
    styled,
)
from fewshot.errors import RedrawRefused

if TYPE_CHECKING:  # the draw code loads numpy: imported where a command runs, not for --help
    from fewshot.sampling.task import TaskDraw

# The library's parameter names that `fewshot draw` spells as flags, for its messages.
DRAW_FLAGS = {
    "id_column": "--id-column",
    "keep_top": "--keep-top",
    "rank_by": "--rank-by",
    "lowest_first": "--lowest-first",
    "stratify_by": "--stratify-by",
    "allocation": "--allocation",
}


class AllocationChoice(StrEnum):
    proportional = "proportional"
    equal = "equal"


def draw(
    pool: Annotated[
        Path, typer.Argument(help="Pool file: .csv, .jsonl or .parquet, one episode a row.")
    ],
    *,
    task: Annotated[
        str, typer.Option("--task", help="Task name; names the manifest and id folder.")
    ],
    out_dir: Annotated[
        Path, typer.Option("--out", help="Folder to write the manifest and id files to.")
    ],
    sizes: Annotated[
        str, typer.Option("--sizes", help="Subset sizes, comma-separated (0 = zero-shot).")
    ] = "1,3,5,10,100,1000",
    seeds: Annotated[str, typer.Option("--seeds", help="Seeds, comma-separated.")] = "0,1,2",
    id_column: Annotated[
        str, typer.Option("--id-column", help="Column holding episode ids.")
    ] = "id",
    keep_top: Annotated[
        int | None,
        typer.Option("--keep-top", help="Keep only the best K episodes (needs --rank-by)."),
    ] = None,
    rank_by: Annotated[
        str | None,
        typer.Option("--rank-by", help="Numeric column that ranks episodes for --keep-top."),
    ] = None,
    lowest_first: Annotated[
        bool,
        typer.Option("--lowest-first", help="With --keep-top: keep the lowest values instead."),
    ] = False,
    stratify_by: Annotated[
        str | None, typer.Option("--stratify-by", help="Column whose values are strata.")
    ] = None,
    allocation: Annotated[
        AllocationChoice,
        typer.Option("--allocation", help="Stratum shares: by pool count, or equal."),
    ] = AllocationChoice.proportional,
    reserve: Annotated[
        int, typer.Option("--reserve", help="Ids held out at the end of each seed's order.")
    ] = 0,
    exclude: Annotated[
        Path | None, typer.Option("--exclude", help="File of ids never to draw, one a line.")
    ] = None,
    replace: Annotated[
        bool,
        typer.Option(
            "--replace", help="Overwrite an earlier draw of this task with other lineage."
        ),
    ] = False,
    fmt: Annotated[TableOrJson, typer.Option("--format", help="Summary as a table or JSON.")] = (
        TableOrJson.table
    ),
) -> None:
    """Draw nested subsets of a pool for every seed and write a manifest and id files."""
    from fewshot.sampling.draw_folder import write_draw
    from fewshot.sampling.task import DrawSpec, draw_task

    with reporting(DRAW_FLAGS, bare=True):
        spec = DrawSpec(
            task=task,
            pool=pool,
            sizes=int_list(sizes, option="--sizes"),
            seeds=int_list(seeds, option="--seeds"),
            id_column=id_column,
            keep_top=keep_top,
            rank_by=rank_by,
            lowest_first=lowest_first,
            stratify_by=stratify_by,
            allocation=allocation.value,
            reserve=reserve,
            exclude=exclude,
        )
        with progress() as bar:
            job = bar.add_task(f"drawing {task}", total=len(spec.seeds))
            result = draw_task(spec, on_seed=lambda _s: bar.advance(job))
        try:
            target = write_draw(out_dir, result, replace=replace)
        except RedrawRefused as exc:
            raise RedrawRefused(f"{exc} Pass --replace to do so.") from None
    summary = _summary(result, out_dir, target)
    if fmt is TableOrJson.json:
        print_json(summary)
    else:
        _print_summary(result, summary)


def _summary(result: TaskDraw, out_dir: Path, target: Path) -> dict[str, Any]:
    from fewshot.sampling.manifest import subset_path

    rows = []
    for d in result.draws:
        for n in d.sizes:
            rows.append(
                {
                    "seed": d.seed,
                    "size": n,
                    "sha256": d.digest(n),
                    "file": str(subset_path(out_dir, result.task, d.seed, n)),
                    "strata": dict(d.strata_counts[n]) if d.strata_counts else None,
                }
            )
    return {
        "task": result.task,
        "manifest": str(target),
        **result.lineage.as_dict(),
        "subsets": rows,
    }


def _print_summary(result: TaskDraw, summary: dict[str, Any]) -> None:
    lin = result.lineage
    out.print(styled("[bold]{}[/]: {} episodes in {}", result.task, lin.pool_rows, lin.pool_file))
    if lin.exclusions:
        out.print(f"  excluded {lin.exclusions['removed']} listed in {lin.exclusions['file']}")
    if lin.filter:
        f = lin.filter
        out.print(f"  kept the {f['order']} {f['after']} of {f['before']} by {f['column']}")
    if lin.strata:
        pool_counts = cast(dict[str, int], lin.strata["pool_counts"])
        counts = ", ".join(f"{k} {v}" for k, v in pool_counts.items())
        out.print(f"  strata by {lin.strata['column']} ({lin.strata['allocation']}): {counts}")
    line = f"  {lin.eligible} eligible"
    if lin.reserve:
        line += f", {lin.reserve} reserved per seed"
    out.print(line)
    table = Table(title="subset digests (first 12 hex digits)", title_justify="left")
    table.add_column("size", justify="right")
    for d in result.draws:
        table.add_column(f"seed {d.seed}", style="cyan")
    for n in result.sizes:
        table.add_row(str(n), *[d.digest(n)[:12] for d in result.draws])
    out.print(table)
    n_files = len(summary["subsets"])
    out.print(f"wrote {summary['manifest']} and {n_files} id files")


def verify(
    manifest: Annotated[Path, typer.Argument(help="A manifest written by `fewshot draw`.")],
    ids_file: Annotated[Path, typer.Argument(help="File of ids, one a line, any order.")],
    *,
    seed: Annotated[int, typer.Option("--seed", help="The seed of the subset.")],
    size: Annotated[int, typer.Option("--size", help="The size of the subset.")],
    pool: Annotated[
        Path | None, typer.Option("--pool", help="Also check the pool file's digest.")
    ] = None,
) -> None:
    """Check that an id file holds exactly one recorded subset (exit 0), or show how it differs (exit 1)."""
    from fewshot.sampling.manifest import load_manifest, pool_matches, verify_subset
    from fewshot.sampling.pools import read_id_list

    with reporting():
        m = load_manifest(manifest)
        result = verify_subset(m, read_id_list(ids_file, what="id file"), seed, size)
        pool_ok = None
        if pool is not None:
            pool_ok, actual = pool_matches(m, pool)
    ok = result.matches and pool_ok is not False
    if result.matches:
        out.print(
            f"matches: {ids_file} holds the {result.expected} ids of seed {seed}, size {size}"
        )
    else:
        err.print(
            f"does not match: seed {seed}, size {size} has {result.expected} ids; "
            f"{ids_file} lists {result.found}"
        )
        for label, items in (
            ("missing", result.missing),
            ("extra", result.extra),
            ("listed twice or more", result.repeated),
        ):
            if items:
                shown = ", ".join(items[:5]) + (", ..." if len(items) > 5 else "")
                err.print(f"  {len(items)} {label}: {shown}")
    if pool_ok is True:
        out.print(f"pool {pool} has the recorded digest {m.pool_digest[:12]}")
    elif pool_ok is False:
        err.print(
            f"pool changed: {pool} has digest {actual[:12]}, the manifest recorded "
            f"{m.pool_digest[:12]}; subsets drawn from it now may differ"
        )
    if not ok:
        raise typer.Exit(1)


__all__ = ["draw", "verify"]
