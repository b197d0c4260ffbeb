"""Words printed beside effective data and episodes to a threshold, only where the interval
supports them; otherwise "no clear difference" (or nothing).

All take the interval that is printed ([low, high] in episodes; 0 = at or below the smallest
size, inf = beyond the ladder), so a label can never claim more than its interval.
"""

from __future__ import annotations

import math

__all__ = ["NO_CLEAR", "effective_label", "effective_mark", "threshold_label"]

NO_CLEAR = "no clear difference"


def _known(*values: float) -> bool:
    return all(v is not None and not (isinstance(v, float) and math.isnan(v)) for v in values)


def effective_label(size: float, low: float, high: float) -> str:
    """ "helps" when the whole interval of D_E lies above n (D_T > 0), "hurts" when it lies below
    (D_T < 0), else "no clear difference"; "" without an interval."""
    if not _known(low, high):
        return ""
    if low > size:
        return "helps"
    if high < size:
        return "hurts"
    return NO_CLEAR


def effective_mark(censor: str, low: float, high: float, smallest: float, largest: float) -> str:
    """ ">=" for a D_E beyond the baseline's ladder only when the interval lies there too (the arm
    is clearly above the baseline's largest size), "<=" likewise below the smallest; else ""."""
    if not _known(low, high):
        return ""
    if censor == "lower_bound" and low >= largest:
        return ">="
    if censor == "upper_bound" and high <= smallest:
        return "<="
    return ""


def threshold_label(low: float, high: float, smallest: float, largest: float) -> str:
    """ "zero-shot" when the interval is {0}, "already there" when it lies at or below the smallest
    size, "not reached" when it lies beyond the largest, else ""."""
    if not _known(low, high):
        return ""
    if high == 0:
        return "zero-shot"
    if high <= smallest:
        return "already there"
    if low >= largest and math.isinf(high):
        return "not reached"
    return ""
