"""Display forms of the statistics tables: cells as text, for the terminal, LaTeX and HTML.

One place decides how an estimate with its interval and its censoring reads, so the
terminal, a paper's LaTeX table and the report agree.
"""

from __future__ import annotations

import math

import pandas as pd

__all__ = [
    "number",
    "with_interval",
    "effective_cell",
    "threshold_cell",
    "transfer_rows",
    "latex_table",
]


def number(x: float | None, digits: int = 3) -> str:
    """A number in ``digits`` significant figures; ``-`` for missing; ``inf`` spelled out."""
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    if abs(x) < 1e-12:  # floating-point residue of an exact zero (e.g. normalised floor)
        return "0"
    return f"{x:.{digits}g}" if abs(x) < 10**digits else f"{x:.0f}"


def with_interval(est: float, low: float, high: float) -> str:
    """``est [low, high]``, or ``est`` alone when there is no interval."""
    if low is None or (isinstance(low, float) and math.isnan(low)):
        return number(est)
    return f"{number(est)} [{number(low)}, {number(high)}]"


def effective_cell(row: pd.Series) -> str:
    """Effective data D_E with its multiplier, marking censoring and harm."""
    if pd.isna(row.get("effective")):
        return "-"
    mark = (
        ">=" if row["censor"] == "lower_bound" else ("<=" if row["censor"] == "upper_bound" else "")
    )
    text = f"{mark}{number(row['effective'])} (x{number(row['multiplier'], 2)})"
    low = row.get("effective_low")
    if not pd.isna(low) and not math.isinf(low):
        high = row["effective_high"]
        text += f" [{number(row['effective_low'])}, {'beyond ladder' if math.isinf(high) else number(high)}]"
    if row.get("hurts") and not row["censor"]:
        text += " hurts"
    return text


def threshold_cell(row: pd.Series) -> str:
    """Episodes to the threshold, with censoring said in words."""
    c = row["censor"]
    if c == "zero-shot":
        return "0 (zero-shot)"
    if c == "not_reached":
        return f"> {row['largest']} (not reached)"
    if c == "at_most":
        return f"<= {row['smallest']} (already there)"
    return with_interval(row["episodes"], row["low"], row["high"])


def transfer_rows(table: pd.DataFrame) -> list[dict[str, str]]:
    """The transfer table as text cells: arm, task, size, difference, P(improvement), effective data."""
    out = []
    for _, r in table.iterrows():
        out.append(
            {
                "arm": str(r["arm"]),
                "task": str(r["task"]),
                "size": str(r["size"]),
                "difference": with_interval(r["difference"], r["low"], r["high"]),
                "P(improvement)": with_interval(
                    r.get("probability"), r.get("p_low"), r.get("p_high")
                ),
                "effective data": effective_cell(r),
                "seeds": str(r["n_seeds"]),
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
