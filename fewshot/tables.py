"""Display forms of the statistics tables: cells as text, for the terminal, LaTeX and HTML.

One place decides how an estimate with its interval and its censoring reads, so the
terminal, a paper's LaTeX table and the report agree.
"""

from __future__ import annotations

import math

import pandas as pd

from fewshot.stats.curves import FEW_SEEDS

__all__ = [
    "number",
    "with_interval",
    "effective_cell",
    "threshold_cell",
    "transfer_rows",
    "bound",
    "flagged",
    "latex_table",
    "UNFINISHED_MARK",
    "UNFINISHED_COLUMN",
    "unfinished",
]

#: Marks a value that includes results of runs not yet done (read with ``include_running``);
#: :mod:`fewshot.analysis.qualify` counts those runs per row in :data:`UNFINISHED_COLUMN`.
UNFINISHED_MARK = "*"
UNFINISHED_COLUMN = "unfinished_runs"


def unfinished(row: pd.Series | dict) -> str:  # type: ignore[type-arg]
    """`` *`` when ``row``'s value includes results of runs not yet done, else nothing."""
    return f" {UNFINISHED_MARK}" if (row.get(UNFINISHED_COLUMN, 0) or 0) > 0 else ""


def number(x: float | None, digits: int = 3) -> str:
    """A number in ``digits`` significant figures; ``-`` for missing; ``inf`` spelled out."""
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    if abs(x) < 1e-12:  # floating-point residue of an exact zero (e.g. normalised floor)
        return "0"
    if abs(x) >= 1e15:  # never print a number's every digit: 3.4e+307 is as wide as it gets
        return f"{x:.{digits}g}"
    return f"{x:.{digits}g}" if abs(x) < 10**digits else f"{x:.0f}"


def with_interval(est: float, low: float, high: float) -> str:
    """``est [low, high]``, or ``est`` alone when there is no interval."""
    if low is None or (isinstance(low, float) and math.isnan(low)):
        return number(est)
    return f"{number(est)} [{number(low)}, {number(high)}]"


def effective_cell(row: pd.Series) -> str:
    """Effective data D_E with its multiplier and interval; ">=", "<=", "hurts" and "helps" only
    where the interval supports them (else "no clear difference")."""
    if pd.isna(row.get("effective")):
        return "-"
    mark = row.get("mark") or ""
    text = f"{mark}{number(row['effective'])} (x{number(row['multiplier'], 2)})"
    low, high = row.get("effective_low"), row.get("effective_high")
    if not pd.isna(low) and not pd.isna(high):
        text += f" [{bound(low)}, {bound(high)}]"
    if row.get("label"):
        text += f" {row['label']}"
    return text


def bound(x: float) -> str:
    """A bound on the size axis (effective data, episodes to a threshold): an infinite one (sizes
    beyond the largest that the data cannot rule out) reads "beyond ladder"."""
    return "beyond ladder" if math.isinf(x) and x > 0 else number(x)


def flagged(text: str, n_seeds: object) -> str:
    """``text`` with `` !`` when it rests on fewer than ``FEW_SEEDS`` (3) seeds."""
    try:
        few = int(n_seeds) < FEW_SEEDS  # type: ignore[call-overload]
    except (TypeError, ValueError):
        return text
    return f"{text} !" if few and text != "-" else text


def threshold_cell(row: pd.Series) -> str:
    """Episodes to the threshold with its interval; censoring said in words only where the
    interval supports it."""
    label = row.get("label") or ""
    if label == "zero-shot":
        return "0 (zero-shot)"
    if label == "not reached":
        return f"> {row['largest']} (not reached)"
    if label == "already there":
        return f"<= {row['smallest']} (already there)"
    c = row["censor"]
    est = (
        f"> {row['largest']}"
        if c == "not_reached"
        else f"<= {row['smallest']}"
        if c == "at_most"
        else "0"
        if c == "zero-shot"
        else number(row["episodes"])
    )
    low, high = row["low"], row["high"]
    if pd.isna(low) or pd.isna(high):
        return est
    return f"{est} [{bound(low)}, {bound(high)}]"


def transfer_rows(table: pd.DataFrame) -> list[dict[str, str]]:
    """The transfer table as text cells: arm, task, size, difference, P(improvement), effective data.

    Cells resting on fewer than ``FEW_SEEDS`` (3) seeds end in `` !``.
    """
    out = []
    mixed = "unit" in table and table["unit"].nunique() > 1  # say each row's unit when they differ
    for _, r in table.iterrows():
        n = r["n_seeds"]
        out.append(
            {
                "arm": str(r["arm"]),
                "task": str(r["task"]),
                "size": str(r["size"]),
                **({"unit": str(r["unit"])} if mixed else {}),
                "difference": flagged(with_interval(r["difference"], r["low"], r["high"]), n)
                + unfinished(r),
                "P(improvement)": flagged(
                    with_interval(r.get("probability"), r.get("p_low"), r.get("p_high")),
                    r.get("p_seeds", n),
                ),
                "effective data": flagged(effective_cell(r), n),
                "seeds": str(n),
            }
        )
    return out


_LATEX = {
    "&": r"\&",
    "%": r"\%",
    "$": r"\$",
    "#": r"\#",
    "_": r"\_",
    "{": r"\{",
    "}": r"\}",
    "~": r"\textasciitilde{}",
    "^": r"\textasciicircum{}",
    "\\": r"\textbackslash{}",
    "<": r"$<$",
    ">": r"$>$",
}


def _tex(text: str) -> str:
    return "".join(_LATEX.get(ch, ch) for ch in text)


def latex_table(rows: list[dict[str, str]], caption: str) -> str:
    """A booktabs LaTeX table of text rows (every cell escaped)."""
    if not rows:
        return "% no rows\n"
    cols = list(rows[0])
    lines = [
        r"\begin{table}[t]",
        r"\centering",
        r"\small",
        r"\begin{tabular}{" + "l" * 2 + "r" * (len(cols) - 2) + "}",
        r"\toprule",
        " & ".join(_tex(c) for c in cols) + r" \\",
        r"\midrule",
    ]
    lines += [" & ".join(_tex(r[c]) for c in cols) + r" \\" for r in rows]
    lines += [r"\bottomrule", r"\end{tabular}", r"\caption{" + _tex(caption) + "}", r"\end{table}"]
    return "\n".join(lines) + "\n"
