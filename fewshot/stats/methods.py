"""The names of the interval methods and the default (defined once, in :mod:`fewshot.schema`)."""

from __future__ import annotations

from fewshot.schema import DEFAULT_INTERVAL_METHOD as DEFAULT_METHOD
from fewshot.schema import INTERVAL_METHODS as METHODS

__all__ = ["METHODS", "DEFAULT_METHOD"]
