"""Field types for config models whose errors read well to a technician.

``number(50, 120)`` accepts an int or float (not a bool, not a quoted string,
not NaN or infinity) inside the closed range and otherwise fails with
``expected a number between 50 and 120, got "98%"``.
"""

from __future__ import annotations

import math
from typing import Annotated, Any

from pydantic import BeforeValidator
from pydantic_core import PydanticCustomError

__all__ = ["describe_value", "number", "whole_number"]


def describe_value(value: Any) -> str:
    """Show a config value the way the user wrote it (strings in double quotes)."""
    if isinstance(value, str):
        text = value if len(value) <= 60 else value[:57] + "..."
        return '"' + text.replace('"', '\\"') + '"'
    if value is None:
        return "nothing (an empty value)"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    return repr(value)


def _range_text(lo: float | None, hi: float | None) -> str:
    if lo is not None and hi is not None:
        return f"between {lo:g} and {hi:g}"
    if lo is not None:
        return f"of at least {lo:g}"
    if hi is not None:
        return f"of at most {hi:g}"
    return ""


def _number_check(lo: float | None, hi: float | None, whole: bool) -> Any:
    kind = "a whole number" if whole else "a number"
    expected = f"expected {kind} {_range_text(lo, hi)}".rstrip()

    def check(value: Any) -> Any:
        ok = isinstance(value, (int, float)) and not isinstance(value, bool)
        if ok and whole and isinstance(value, float):
            ok = value.is_integer()
        if ok and not math.isfinite(value):
            ok = False
        if ok and ((lo is not None and value < lo) or (hi is not None and value > hi)):
            ok = False
        if not ok:
            raise PydanticCustomError(
                "number_range", "{expected}, got {got}",
                {"expected": expected, "got": describe_value(value)},
            )
        return int(value) if whole else float(value)

    return check


def number(lo: float | None = None, hi: float | None = None) -> Any:
    """A float field limited to ``lo <= x <= hi`` (either bound may be None)."""
    return Annotated[float, BeforeValidator(_number_check(lo, hi, whole=False))]


def whole_number(lo: int | None = None, hi: int | None = None) -> Any:
    """An int field limited to ``lo <= x <= hi``."""
    return Annotated[int, BeforeValidator(_number_check(lo, hi, whole=True))]
