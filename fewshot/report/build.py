"""Assemble the study report from its report objects: study, completion, figures, tables, methods,
warnings. Nothing here reads a ledger or computes a statistic again: every section is drawn from
the :class:`~fewshot.analysis.StudyReports` that :func:`fewshot.analysis.analyse_study` computed."""

from __future__ import annotations

from collections.abc import Callable
from html import escape
from pathlib import Path
from typing import Any

import pandas as pd

from fewshot.analysis import (
    StudyData,
    StudyReports,
    compare_figure,
    curve_figure,
    study_findings,
)
from fewshot.analysis.figures import figure_pages
from fewshot.errors import InvalidInput
from fewshot.files import write_text_atomic
from fewshot.report.html import bullet_list, figure_html, figure_uri, page, paragraph, table_html
from fewshot.report.long_tables import collapsed, curve_section, transfer_section
from fewshot.report.methods import methods_sentences
from fewshot.stats.progress import advance
from fewshot.tables import number

__all__ = ["build_report", "write_report", "check_report_path", "DEFAULT_CAUTION", "caution"]

DEFAULT_CAUTION = (
    "These scores come from the evaluations the trainers ran, often in simulation or on logged "
    "data. However good they are, they do not show that a model works, or is safe, where it is "
    "deployed: that needs its own testing there, with safeguards."
)


def caution(study: dict[str, Any]) -> str:
    """The caution a report opens with: the study's own (its ``caution``) when it gives one,
    else :data:`DEFAULT_CAUTION`."""
    own = study.get("caution")
    return own.strip() if isinstance(own, str) and own.strip() else DEFAULT_CAUTION


def _study_section(data: StudyData) -> str:
    study = data.study
    arms = data.arms
    tasks = data.tasks
    runs = data.runs
    arm_rows = [
        {
            "arm": r["arm"],
            "role": r["role"],
            "checkpoint": r["checkpoint"] if isinstance(r.get("checkpoint"), str) else "-",
            "zero-shot": "yes" if r["zero_shot"] else "no",
            "attributes": ", ".join(
                f"{k}={number(r[k])}"
                for k in arms.columns
                if k not in ("arm", "role", "checkpoint", "zero_shot") and pd.notna(r[k])
            )
            or "-",
        }
        for _, r in arms.iterrows()
    ]
    task_rows = [
        {
            "task": r["task"],
            "group": r["group"] if isinstance(r["group"], str) else "-",
            "pool": Path(r["pool_file"]).name,
            "pool digest": r["pool_digest"][:12],
            "floor": number(r["floor"]),
            "expert": number(r["expert"]),
        }
        for _, r in tasks.iterrows()
    ]
    sizes = sorted(set(runs["size"]))
    seeds = sorted(set(runs["seed"]))
    text = (
        f"Study {study['name']}: metric {study['metric']} ({'higher' if study['higher_is_better'] else 'lower'} "
        f"is better), baseline {study['baseline']}, sizes {', '.join(map(str, sizes))}, seeds "
        f"{', '.join(map(str, seeds))}, {study['replicates']} replicate(s) per subset, {len(runs)} runs."
    )
    groups = tasks["group"].dropna()
    task_summary = paragraph(
        f"{len(tasks)} tasks"
        + (
            " in groups: "
            + ", ".join(f"{g} ({n})" for g, n in groups.value_counts(sort=False).items())
            if len(groups)
            else ""
        )
        + "."
    )
    return (
        paragraph(text)
        + "<h3>Arms</h3>"
        + table_html(arm_rows)
        + "<h3>Tasks</h3>"
        + collapsed(task_rows, what="Tasks", summary=task_summary)
    )


def _completion_section(data: StudyData) -> tuple[str, list[str]]:
    st = data.status
    t = st.totals
    warnings = []
    sizes = sorted(set(st.cells["size"]))
    cells = []
    for arm, g in st.cells.groupby("arm", sort=False):
        by = {int(r.size): r for r in g.itertuples()}
        row = {"arm": str(arm)}
        for n in sizes:
            c = by.get(n)
            row[f"n{n}"] = (
                "-"
                if c is None
                else f"{c.done}/{c.total}" + (f", {c.failed} failed" if c.failed else "")
            )
        cells.append(row)
    body = paragraph(
        f"{t['done']} of {t['total']} runs done, {t['running']} running, {t['failed']} failed, "
        f"{t['planned']} not started. Cells: runs done / planned per arm and size."
    ) + table_html(cells, numeric=[f"n{n}" for n in sizes])
    history = []
    if st.voided:
        history.append(
            f"{st.voided} result(s) voided: kept in the ledger with who voided them, when and why "
            "(fewshot export shows them), and left out of every statistic here."
        )
    attempts = st.attempts_line()
    if attempts:
        history.append(attempts + ".")
    if history:
        body += paragraph(" ".join(history))
    if len(st.failed):
        body += "<h3>Failed runs</h3>" + collapsed(
            [
                {
                    "run": r.key,
                    "attempts": str(r.attempts),
                    "message": (r.message or "").strip()[-300:],
                }
                for r in st.failed.itertuples()
            ],
            what="Failed runs",
            summary=paragraph(f"{len(st.failed)} runs failed; each with its last message."),
        )
        warnings.append(
            f"{len(st.failed)} run(s) failed: their cells rest on fewer seeds than planned."
        )
    missing = t["planned"] + t["running"]
    if missing:
        warnings.append(
            f"{missing} run(s) have no final status yet (not started or still running): the results "
            "below are incomplete."
        )
    return body, warnings


def _figure(draw: Callable[[], Any], kind: str, caption: str) -> str:
    """One figure, or pages of one (``draw`` returns a figure or ``(label, figure)`` pages)."""
    try:
        drawn = draw()
        pages = drawn if isinstance(drawn, list) else [("", drawn)]
        return "".join(
            figure_html(figure_uri(fig), f"{caption} ({label})." if label else f"{caption}.")
            for label, fig in pages
        )
    except InvalidInput as exc:
        return paragraph(f"No {kind} figure: {exc}")


def _figures(rep: StudyReports) -> str:
    """Every figure, drawn from the reports already computed; figures with one panel per task in
    pages of at most twelve panels (by task group)."""
    data, cmp = rep.data, rep.compare
    jobs: list[tuple[Callable[[], Any], str, str]] = [
        (
            lambda: figure_pages("curves", rep.figure_curves, data),
            "curves",
            "Score against episodes per task; intervals over seeds",
        )
    ]
    if rep.aggregate is not None:
        aggregate = rep.aggregate
        jobs.append(
            (
                lambda: curve_figure(aggregate, data),
                "aggregate",
                "Interquartile mean of normalised scores over tasks",
            )
        )
    if cmp is not None:
        jobs.append(
            (
                lambda: figure_pages("difference", cmp, data),
                "difference",
                f"Each arm minus {cmp.baseline}, paired by seed",
            )
        )
        shown = [("summary", "Summary of arms by task")]
        if rep.normalised:
            shown.append(("profile", "Performance profile at the largest size"))
        if len(cmp.scaling):
            shown.append(("scaling", "Aggregate score against the arms' attribute"))
        for kind, caption in shown:
            jobs.append((lambda k=kind: compare_figure(k, cmp, data), kind, caption))  # type: ignore[misc]
    figs = ""
    advance("report figures", 0, len(jobs))
    for done, (draw, kind, caption) in enumerate(jobs, start=1):
        figs += _figure(draw, kind, caption)
        advance("report figures", done, len(jobs))
    return figs


def build_report(rep: StudyReports, *, title: str | None = None) -> str:
    """The report as one HTML string, drawn from the reports of :func:`analyse_study`."""
    data, curves, cmp = rep.data, rep.curves, rep.compare
    study = data.study
    sections: list[tuple[str, str]] = [
        ("Caution", f'<div class="caution">{paragraph(caution(study))}</div>')
    ]
    if cmp is not None:
        sections.append(("Findings", _findings_section(rep)))
    sections.append(("The study", _study_section(data)))
    completion, warnings = _completion_section(data)
    sections.append(("Completion", completion))
    if rep.compare_error is not None:
        warnings.append(f"no comparison with the baseline: {rep.compare_error}")
    sections.append(("Figures", _figures(rep)))
    sections.append(("Curves", curve_section(rep)))
    if cmp is not None:
        sections.append((f"Transfer against {cmp.baseline}", transfer_section(cmp)))
        warnings.extend(cmp.notes)
    sections.append(("Methods", _methods(rep)))
    warnings = curves.notes + warnings
    if curves.scores.rule != "final":
        warnings.append(
            f"run scores were chosen by a validation metric ({curves.scores.rule}); the same rule was "
            "applied to every arm"
        )
    if cmp is not None and len(cmp.thresholds) and (cmp.thresholds["censor"] != "").any():
        warnings.append(
            "some episodes-to-threshold values are censored (not reached, already there, or zero-shot)"
        )
    sections.append(("Warnings", bullet_list(dict.fromkeys(warnings), cls="warn")))
    heading = title or f"Study {study['name']}"
    return page(heading, sections, subtitle=f"Study {study['name']}, ledger {data.url}.")


def _findings_section(rep: StudyReports) -> str:
    """The findings summary, read off the reports (no statistic computed here)."""
    found = study_findings(rep)
    body = "".join(paragraph(p) for p in found.preamble)
    arm = None
    items: list[str] = []
    for f in found.statements:
        if f.arm != arm:
            if items:
                body += bullet_list(items, cls="findings")
            items = []
            arm = f.arm
            body += f"<h3>{escape('Across arms' if f.arm == 'across arms' else f.arm)}</h3>"
        items.append(f.text)
    if items:
        body += bullet_list(items, cls="findings")
    return body


def _methods(rep: StudyReports) -> str:
    """The methods text, one paragraph a topic (:func:`fewshot.report.methods.methods_sentences`)."""
    return "".join(paragraph(p) for p in methods_sentences(rep).values())


def check_report_path(path: str | Path) -> Path:
    """``path`` as a report file: an .html name in a folder that exists."""
    p = Path(path)
    if p.suffix.lower() not in (".html", ".htm"):
        raise InvalidInput(f"{p}: the report is an HTML file: `path` must end in .html.")
    if not p.parent.is_dir():
        raise InvalidInput(
            f"{p.parent}: no such folder for the report. Create it first or pick another path."
        )
    return p


def write_report(path: str | Path, rep: StudyReports, *, title: str | None = None) -> Path:
    """Write the report of ``rep`` (from :func:`analyse_study`) atomically to ``path`` (.html)."""
    p = check_report_path(path)
    return write_text_atomic(p, build_report(rep, title=title), what="report")
