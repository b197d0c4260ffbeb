"""The ledger's ingest of results files: one transaction a file, a file ingested once."""

from __future__ import annotations

import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from pathlib import Path

from sqlalchemy import Connection, insert, select

from fewshot.ledger.connection import LedgerConnection
from fewshot.ledger.models import IngestedFileRow
from fewshot.ledger.results import (
    ResultFileError,
    file_digest_bytes,
    parse_result_file,
    store_results,
)
from fewshot.ledger.settle import settle_after_ingest
from fewshot.results_format import attempt_of_file

__all__ = ["IngestReport", "LedgerIngest", "expand_result_paths"]


@dataclass(frozen=True)
class IngestReport:
    """What ingesting one file did.

    Attributes
    ----------
    path : str
    lines : int
        Result lines in the file.
    skipped : bool
        True when a file with the same content was ingested before (nothing written).
    stored, unchanged, replaced, ignored : int
        ``ignored``: results of an attempt no longer current that were left out (see
        :func:`fewshot.ledger.results.store_results`).
    marked : str or None
        ``done`` or ``failed`` when ingesting the file ended the run of the attempt it carries
        (see :meth:`LedgerWrites.ingest`), else None.
    """

    path: str
    lines: int
    skipped: bool
    stored: int = 0
    unchanged: int = 0
    replaced: int = 0
    ignored: int = 0
    marked: str | None = None


class LedgerIngest(LedgerConnection):
    """The methods of :class:`fewshot.ledger.Ledger` that ingest results files."""

    def ingest(
        self,
        paths: Iterable[str | Path],
        *,
        replace: bool = False,
        progress: Callable[[int, int, IngestReport], None] | None = None,
        force: bool = False,
        new_metric: bool = False,
    ) -> list[IngestReport]:
        """Ingest JSONL or CSV results files (or folders of them), one transaction a file.

        A file whose content was ingested before is skipped, so re-running an ingest after a
        crash never doubles a result. A file carries its attempt in its name (the work loop's
        ``run.attempt2.jsonl``) or in its lines (``"attempt": 2``); its results count only while
        that attempt holds the run, and its ingest ends that run: done when the file holds the
        final result of the study's primary metric, failed when it does not and the claim's
        lease has run out. ``progress(done, total, report)`` is called after each file. A
        refused file raises; the files before it stay ingested (``progress`` has seen them).
        ``force`` and ``new_metric``: as for :meth:`record`.
        """
        files = expand_result_paths(paths)
        reports: list[IngestReport] = []
        for f in files:
            reports.append(
                self.ingest_file(
                    f,
                    replace=replace,
                    attempt=attempt_of_file(f),
                    force=force,
                    new_metric=new_metric,
                    settle=True,
                )
            )
            if progress is not None:
                progress(len(reports), len(files), reports[-1])
        return reports

    def ingest_file(
        self,
        path: str | Path,
        *,
        replace: bool = False,
        run: str | None = None,
        attempt: int | None = None,
        force: bool = False,
        new_metric: bool = False,
        settle: bool = False,
    ) -> IngestReport:
        """Ingest one results file: all of it or none of it.

        A file whose content was ingested before is skipped before it is parsed. With ``run``,
        every line must belong to that run (what ``exec`` asks of the file of the run it ran).
        With ``settle``, a file of an attempt that holds its run ends the run as :meth:`ingest`
        says.
        """
        p = Path(path)
        try:
            data = p.read_bytes()
        except OSError as exc:
            raise ResultFileError(f"{p}: cannot read the results file ({exc.strerror}).") from None
        digest = file_digest_bytes(data)

        def seen_rows(c: Connection) -> int | None:
            sid, _ = self._sid(c)
            return c.execute(
                select(IngestedFileRow.rows).where(
                    IngestedFileRow.study_id == sid, IngestedFileRow.digest == digest
                )
            ).scalar()

        known = self._tx(seen_rows)
        if known is not None:
            return IngestReport(str(p), int(known), True)
        lines = parse_result_file(p, data)
        if run is not None:
            for ln in lines:
                if ln.run != run:
                    raise ResultFileError(
                        f"{ln.where}: a result of run {ln.run!r}, but this file belongs to run "
                        f"{run!r}. A run's results file holds only that run's results; write "
                        "other runs' results to their own files."
                    )

        def go(c: Connection) -> IngestReport:
            sid, name = self._sid(c)
            seen = c.execute(
                select(IngestedFileRow.id).where(
                    IngestedFileRow.study_id == sid, IngestedFileRow.digest == digest
                )
            ).scalar()
            if seen is not None:
                return IngestReport(str(p), len(lines), True)
            rep = store_results(
                c,
                sid,
                name,
                lines,
                replace=replace,
                source=f"file:{digest[:16]}",
                attempt=attempt,
                force=force,
                new_metric=new_metric,
            )
            counts = (rep.stored, rep.unchanged, rep.replaced, rep.ignored)
            if rep.ignored:
                # an older attempt's lines were left out: the same content from the current
                # attempt must not be skipped as "ingested before"
                return IngestReport(str(p), len(lines), False, *counts)
            marked = settle_after_ingest(c, sid, name, lines, attempt) if settle else None
            c.execute(
                insert(IngestedFileRow).values(
                    study_id=sid,
                    digest=digest,
                    path=str(p),
                    rows=len(lines),
                    ingested_at=time.time(),
                )
            )
            return IngestReport(str(p), len(lines), False, *counts, marked)

        return self._tx(go)


def expand_result_paths(paths: Iterable[str | Path]) -> list[Path]:
    """Files as given, and every .jsonl/.csv file below each folder (sorted)."""
    out: list[Path] = []
    for raw in paths:
        p = Path(raw)
        if p.is_dir():
            found = sorted(
                q for q in p.rglob("*") if q.is_file() and q.suffix.lower() in (".jsonl", ".csv")
            )
            out.extend(found)
        elif p.exists():
            out.append(p)
        else:
            raise ResultFileError(f"{p}: no such results file or folder. Check the path.")
    return out
