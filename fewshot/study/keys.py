"""Every key a study file may hold, with its type, default and meaning: the one table the loader
takes its known keys and type words from, and the README's key reference is printed from
(``python -m fewshot.study.keys``; a test checks the README and the loader against it)."""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["COMPUTED", "KEYS", "KIND_WORDS", "REQUIRED", "StudyKey", "keys_of", "markdown"]

#: The loader's kinds of value and how its messages (and the README) name them.
KIND_WORDS = {
    "str": "a string",
    "bool": "true or false",
    "int": "a whole number",
    "num": "a number",
    "intlist": "a list of whole numbers",
    "numlist": "a list of numbers",
    "strlist": "a list of strings",
    "table": "a table",
    "tables": "an array of tables",
}

REQUIRED = "required"
COMPUTED = "computed"  # a default that depends on other keys (its text says how)


@dataclass(frozen=True)
class StudyKey:
    """One key of a study file.

    Attributes
    ----------
    table : str
        ``"study"`` (top level), ``"arms"`` or ``"tasks"`` (each ``[[arms]]``/``[[tasks]]``).
    name : str
    kind : str or None
        The loader's kind of value (a key of :data:`KIND_WORDS`); None for free text it does not
        read.
    default : object
        :data:`REQUIRED`, :data:`COMPUTED` (see ``shown``), or the value the loaded study holds
        when the key is left out.
    shown : str
        The default as the README shows it.
    about : str
        What the key means.
    """

    table: str
    name: str
    kind: str | None
    default: object
    shown: str
    about: str


def _k(
    table: str, name: str, kind: str | None, default: object, shown: str, about: str
) -> StudyKey:
    return StudyKey(table, name, kind, default, shown, about)


# fmt: off
KEYS: tuple[StudyKey, ...] = (
    _k("study", "name", "str", REQUIRED, "", "the study's name: 1 to 64 letters, digits, `_`, `.` or `-`"),
    _k("study", "metric", "str", REQUIRED, "", "the primary metric; a run is done once its final value is in"),
    _k("study", "higher_is_better", "bool", True, "true", "whether a higher metric is better"),
    _k("study", "sizes", "intlist", REQUIRED, "", "training sizes in episodes; 0 is the zero-shot size"),
    _k("study", "seeds", "intlist", REQUIRED, "", "the seeds of every cell (3 or more to trust an interval)"),
    _k("study", "replicates", "int", 1, "1", "runs per seed (1 to 10000)"),
    _k("study", "baseline", "str", REQUIRED, "", "the arm the others are compared with"),
    _k("study", "arms", "tables", REQUIRED, "", "the arms, one `[[arms]]` table each (below)"),
    _k("study", "tasks", "tables", REQUIRED, "", "the tasks, one `[[tasks]]` table each (below)"),
    _k("study", "metrics", "strlist", COMPUTED, "the primary metric only", "the other metrics runs may report"),
    _k("study", "bounds", "numlist", None, "none", "the metric's range, e.g. `[0, 1]`; intervals are clipped to it (`inf` leaves a side open)"),
    _k("study", "caution", "str", None, "a domain-neutral caution", "the report's caution, in the study's own words"),
    _k("study", "draws_dir", "str", COMPUTED, "`draws/<name>` next to the study file", "where the subsets' id files are written (relative to the study file)"),
    _k("study", "description", None, None, "none", "free text for readers (not read)"),
    _k("arms", "name", "str", REQUIRED, "", "the arm's name (the same rule as the study's)"),
    _k("arms", "role", "str", REQUIRED, "", "`pretrained` or `baseline`"),
    _k("arms", "checkpoint", "str", None, "none", "the arm's starting weights, given to the trainer as `FEWSHOT_CHECKPOINT`"),
    _k("arms", "zero_shot", "bool", COMPUTED, "true for `pretrained`, false for `baseline`", "whether size 0 is planned for the arm"),
    _k("arms", "attributes", "table", {}, "{}", "numbers or text, e.g. `{ params = 1e6, recipe = \"mixed\" }`; given to the trainer as `FEWSHOT_ATTRIBUTES`; not named arm, role, checkpoint or zero_shot"),
    _k("tasks", "name", "str", REQUIRED, "", "the task's name (the same rule as the study's)"),
    _k("tasks", "pool", "str", REQUIRED, "", "the pool file (CSV, JSONL or Parquet; relative to the study file)"),
    _k("tasks", "id_column", "str", "id", "`id`", "the pool column holding episode ids"),
    _k("tasks", "keep_top", "int", None, "none", "keep only the best this many episodes (with `rank_by`)"),
    _k("tasks", "rank_by", "str", None, "none", "the pool column `keep_top` ranks by"),
    _k("tasks", "lowest_first", "bool", False, "false", "rank lowest first"),
    _k("tasks", "stratify_by", "str", None, "none", "a pool column to stratify draws by"),
    _k("tasks", "allocation", "str", "proportional", "`proportional`", "`proportional` or `equal` across strata"),
    _k("tasks", "reserve", "int", 0, "0", "ids held out at the end of each seed's order"),
    _k("tasks", "exclude", "str", None, "none", "a file of ids never to draw, one a line (relative to the study file)"),
    _k("tasks", "floor", "num", None, "none", "the score of no skill, for normalised scores"),
    _k("tasks", "expert", "num", None, "none", "the score of an expert, for normalised scores"),
    _k("tasks", "group", "str", None, "none", "a task group, for aggregates"),
)
# fmt: on


def keys_of(table: str) -> frozenset[str]:
    """The keys a ``table`` (``"study"``, ``"arms"`` or ``"tasks"``) may hold."""
    return frozenset(k.name for k in KEYS if k.table == table)


_HEADINGS = {
    "study": "Top level",
    "arms": "Each `[[arms]]` table",
    "tasks": "Each `[[tasks]]` table",
}


def markdown() -> str:
    """The key reference as Markdown tables (what the README holds)."""
    out: list[str] = []
    for table, heading in _HEADINGS.items():
        out += [f"{heading}:", "", "| Key | Type | Default | Meaning |", "|---|---|---|---|"]
        for k in KEYS:
            if k.table != table:
                continue
            kind = KIND_WORDS[k.kind] if k.kind else "any value"
            default = k.shown or "required"
            out.append(f"| `{k.name}` | {kind} | {default} | {k.about} |")
        out.append("")
    return "\n".join(out).rstrip("\n") + "\n"


if __name__ == "__main__":
    print(markdown(), end="")
