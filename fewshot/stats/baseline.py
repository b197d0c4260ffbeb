"""The arms a comparison with a baseline covers, checked once for every transfer measure."""

from __future__ import annotations

import pandas as pd

from fewshot.errors import InvalidInput

__all__ = ["check_baseline"]


def check_baseline(scores: pd.DataFrame, baseline: str, arms: list[str] | None = None) -> list[str]:
    """The arms to compare with ``baseline``; unknown names are errors that list the known arms."""
    known = list(dict.fromkeys(scores["arm"]))
    if baseline not in known:
        raise InvalidInput(
            f"baseline {baseline!r} has no scores. Arms with scores: {', '.join(known)}."
        )
    chosen = [a for a in known if a != baseline] if arms is None else arms
    for a in chosen:
        if a not in known:
            raise InvalidInput(f"arm {a!r} has no scores. Arms with scores: {', '.join(known)}.")
        if a == baseline:
            raise InvalidInput(f"arm {a!r} is the baseline; compare other arms with it.")
    return chosen
