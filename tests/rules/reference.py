"""A slow, obviously-correct reading-by-reading latch: the reference the fast kernel is checked against.

It follows the rule text word by word (common practice, no source: the
semantics are the ones written in the rules issue).
"""

from __future__ import annotations

import math


def naive_latch(ts, values, *, limit, deadband, on_delay, off_delay, high, good=None):
    """Return [(index, "raise"|"clear")] for one probe's readings in time order."""
    active = False
    beyond_since = None
    clear_since = None
    out = []
    for i, (t, v) in enumerate(zip(ts, values)):
        if (good is not None and not good[i]) or not math.isfinite(v):
            continue  # non-good readings are skipped entirely
        beyond = v > limit if high else v < limit
        returned = v <= limit - deadband if high else v >= limit + deadband
        beyond_since = (beyond_since if beyond_since is not None else t) if beyond else None
        clear_since = (clear_since if clear_since is not None else t) if returned else None
        if not active and beyond and t >= beyond_since + on_delay:
            active = True
            out.append((i, "raise"))
        elif active and returned and t >= clear_since + off_delay:
            active = False
            out.append((i, "clear"))
    return out
