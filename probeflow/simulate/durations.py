"""Durations ("90s", "1h30m", "2d") and instants (RFC 3339) as the simulator reads them.

Durations are kept as whole milliseconds so sample times are exact: a sample
time is ``(start_ms + i * interval_ms) / 1000``, a correctly rounded float that
prints short in JSON.
"""

from __future__ import annotations

import math
import re
from datetime import UTC, datetime

__all__ = ["format_duration", "parse_duration_ms", "parse_instant"]

_UNIT_MS = {"ms": 1, "s": 1000, "m": 60_000, "min": 60_000, "h": 3_600_000, "d": 86_400_000}
_PART = re.compile(r"(\d+(?:\.\d+)?)\s*(ms|min|s|m|h|d)")


def parse_duration_ms(value: object) -> int:
    """A duration in whole milliseconds from ``"2h"``, ``"1h30m"``, ``"500ms"``, ``"1.5d"``
    or a plain number of seconds.

    >>> parse_duration_ms("1h30m")
    5400000
    >>> parse_duration_ms(2.5)
    2500

    Raises ValueError with a message for a technician.
    """
    if isinstance(value, bool):
        raise ValueError(f"expected a duration such as 90s, 15min, 2h or 1d, got {value!r}")  # noqa: TRY004 -- pydantic reports ValueError
    if isinstance(value, (int, float)):
        if not math.isfinite(value) or value < 0:
            raise ValueError(f"expected a duration of zero or more seconds, got {value!r}")
        return round(value * 1000)
    if not isinstance(value, str):
        raise ValueError(f"expected a duration such as 90s, 15min, 2h or 1d, got {value!r}")  # noqa: TRY004 -- pydantic reports ValueError
    text = value.strip().lower().replace(" ", "")
    pos = 0
    total = 0.0
    for match in _PART.finditer(text):
        if match.start() != pos:
            break
        total += float(match.group(1)) * _UNIT_MS[match.group(2)]
        pos = match.end()
    if pos != len(text) or not text:
        raise ValueError(
            f'expected a duration such as "90s", "15min", "2h", "1h30m" or "1d", got "{value}"'
        )
    return round(total)


def format_duration(ms: int) -> str:
    """Short text for a duration in milliseconds: ``5400000 -> "1h30m"``."""
    if ms == 0:
        return "0s"
    parts = []
    rest = ms
    for unit, size in (("d", 86_400_000), ("h", 3_600_000), ("m", 60_000), ("s", 1000)):
        if rest >= size:
            parts.append(f"{rest // size}{unit}")
            rest %= size
    if rest:
        parts.append(f"{rest}ms")
    return "".join(parts)


def parse_instant(value: object) -> float:
    """Epoch seconds (UTC) from an RFC 3339 string or a datetime; the zone is required.

    >>> parse_instant("2026-03-02T06:00:00Z")
    1772431200.0
    """
    if isinstance(value, datetime):
        moment = value
    elif isinstance(value, str):
        text = value.strip()
        if text.endswith(("Z", "z")):
            text = text[:-1] + "+00:00"
        try:
            moment = datetime.fromisoformat(text)
        except ValueError:
            raise ValueError(
                f'expected a time such as "2026-03-02T06:00:00Z", got "{value}"'
            ) from None
    else:
        raise ValueError(f'expected a time such as "2026-03-02T06:00:00Z", got {value!r}')  # noqa: TRY004
    if moment.tzinfo is None:
        raise ValueError(f'the time "{value}" has no zone: add "Z" for UTC or an offset like +01:00')
    return moment.astimezone(UTC).timestamp()
