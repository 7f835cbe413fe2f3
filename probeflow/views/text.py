"""Small text helpers shared by the status table and the report: ages, times, numbers, states."""

from __future__ import annotations

import math
from datetime import UTC, datetime

__all__ = [
    "CAUTION",
    "STATE_LABELS",
    "fixed",
    "format_age",
    "signed",
    "state_label",
    "utc_text",
]

CAUTION = ("Caution: probeflow alerts support operators; they are not a safety system. Dosing, "
           "discharge and sampling on hot or pressurised lines follow local codes, the site's "
           "procedures and licensed practice.")

STATE_LABELS: dict[str, str] = {
    "unack_active": "ACTIVE unacknowledged",
    "ack_active": "ACTIVE acknowledged",
    "unack_returned": "RETURNED unacknowledged",
    "shelved": "SHELVED",
    "suppressed": "SUPPRESSED (maintenance)",
    "normal": "normal",
}
"""ISA-18.2 alarm states as an operator reads them."""


def state_label(state: str) -> str:
    return STATE_LABELS.get(state, state)


def utc_text(ts: float, seconds: bool = True) -> str:
    """Epoch seconds as ``2026-03-02 07:14:05 UTC``."""
    fmt = "%Y-%m-%d %H:%M:%S UTC" if seconds else "%Y-%m-%d %H:%M UTC"
    return datetime.fromtimestamp(ts, UTC).strftime(fmt)


def format_age(seconds: float) -> str:
    """A duration as a technician reads it: ``45 s``, ``12 min``, ``5.5 h``, ``19 d``."""
    if not math.isfinite(seconds):
        return "-"
    if seconds < 0:
        return "in the future"
    if seconds < 90:
        return f"{seconds:.0f} s"
    if seconds < 90 * 60:
        return f"{seconds / 60:.0f} min"
    if seconds < 48 * 3600:
        return f"{seconds / 3600:.1f} h"
    return f"{seconds / 86400:.0f} d"


def fixed(value: float | None, digits: int) -> str:
    """``value`` with ``digits`` decimals, or ``-`` when missing."""
    if value is None or not math.isfinite(float(value)):
        return "-"
    return f"{float(value):.{digits}f}"


def signed(value: float | None, digits: int) -> str:
    """``value`` with an explicit sign, or ``-`` when missing."""
    if value is None or not math.isfinite(float(value)):
        return "-"
    return f"{float(value):+.{digits}f}"
