"""The delayed limit latch: the exact band semantics, vectorised over many probes.

For a *high* limit ``L`` with deadband ``d``, on-delay ``Ton`` and off-delay ``Toff``:

* a reading is *beyond* when ``v > L`` (a value exactly at the limit is not);
* a reading is *returned* when ``v <= L - d`` (exactly ``L - d`` counts as returned);
* the alarm becomes active at the first reading ``i`` at which every reading
  since the start ``s`` of the current run of beyond readings was beyond and
  ``t[i] >= t[s] + Ton`` (with ``Ton = 0``: the first beyond reading);
* it returns at the first reading ``j`` at which every reading since the start
  ``r`` of the current run of returned readings was returned and
  ``t[j] >= t[r] + Toff``.

A low limit mirrors this (``v < L``, returned when ``v >= L + d``).

The start of a trailing returned run matters only while the alarm is active,
and the start of a trailing beyond run only while it is not, so a quiet
batch (nothing latched, nothing beyond) leaves a fresh carry.  The value is
taken to hold between readings, so a gap in time counts toward a delay; only a
reading on the other side breaks a run.  Rows handed to the latch are already
filtered to good quality and finite values (readings of other quality are
skipped entirely: they neither break nor extend a run).

Both "set" (delayed beyond) and "reset" (delayed returned) are properties of
the data alone, so the alarm state is a set/reset flip-flop over those two
sparse signals.  The kernel therefore touches every row only with two
comparisons and two ``flatnonzero`` calls; everything else runs over the
(usually few) rows near a limit.  Rows are grouped in segments (one per probe),
each sorted by time, and each segment carries its state in and out, so feeding
a recording in one piece or in any number of batches gives the same result.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["LatchCarry", "LatchResult", "run_latch"]


@dataclass(slots=True)
class LatchCarry:
    """Per-segment state between batches (arrays of the segment count).

    active       alarm condition latched on
    beyond_since start time of the trailing run of beyond readings (NaN: none)
    clear_since  start time of the trailing run of returned readings (NaN: none)
    """

    active: np.ndarray
    beyond_since: np.ndarray
    clear_since: np.ndarray

    @classmethod
    def fresh(cls, n: int) -> LatchCarry:
        return cls(np.zeros(n, dtype=bool), np.full(n, np.nan), np.full(n, np.nan))


@dataclass(slots=True)
class LatchResult:
    """Transitions (row indices, sorted) and the carry out per segment."""

    index: np.ndarray      # row index of each transition
    active: np.ndarray     # True: became active (raise); False: returned (clear)
    carry: LatchCarry


def _segment_of(idx: np.ndarray, seg_starts: np.ndarray) -> np.ndarray:
    return np.searchsorted(seg_starts, idx, side="right") - 1


def _first_at_or_after(t: np.ndarray, seg_starts: np.ndarray, seg_ends: np.ndarray,
                       run_seg: np.ndarray, target: np.ndarray) -> np.ndarray:
    """First row j of each run's segment with t[j] >= target (segment end if none).

    Runs are sorted by segment; ``t`` is sorted within each segment, so one
    C-level ``searchsorted`` per segment that has runs does the work.
    """
    if target.shape[0] == 0:
        return np.empty(0, dtype=np.int64)
    if seg_starts.shape[0] == 1:
        return np.searchsorted(t, target, side="left")
    out = np.empty(target.shape[0], dtype=np.int64)
    change = np.ones(target.shape[0] + 1, dtype=bool)
    np.not_equal(run_seg[1:], run_seg[:-1], out=change[1:-1])
    bounds = np.flatnonzero(change)
    for a, b in zip(bounds[:-1].tolist(), bounds[1:].tolist(), strict=True):
        k = int(run_seg[a])
        s0, s1 = int(seg_starts[k]), int(seg_ends[k])
        out[a:b] = np.searchsorted(t[s0:s1], target[a:b], side="left") + s0
    return out


def _pieces(mask: np.ndarray, seg_starts: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Maximal runs of equal ``mask`` values, split at segment starts: (start, end, value)."""
    change = mask[1:] != mask[:-1]
    if seg_starts.shape[0] > 1:
        change[seg_starts[1:] - 1] = True
    edges = np.flatnonzero(change) + 1
    starts = np.empty(edges.shape[0] + 1, dtype=np.int64)
    starts[0] = 0
    starts[1:] = edges
    ends = np.empty_like(starts)
    ends[:-1] = edges
    ends[-1] = n
    return starts, ends, mask[starts]


def run_latch(
    t: np.ndarray,
    v: np.ndarray,
    seg_starts: np.ndarray,
    carry: LatchCarry,
    *,
    limit: float,
    deadband: float,
    on_delay: float,
    off_delay: float,
    high: bool,
    seg_id: np.ndarray | None = None,
) -> LatchResult:
    """Run the delayed latch over rows grouped in non-empty, time-sorted segments.

    ``t`` [s] and ``v`` are float64 of equal length; ``seg_starts`` are the
    first row of each segment (ascending, first is 0).  ``carry`` holds the
    state before the first row of each segment.  ``seg_id`` (optional, the
    segment number of every row) saves binary searches when given.

    Every row is touched by two comparisons, two change scans and two
    ``flatnonzero`` calls; the rest works on runs, not rows.
    """
    n = t.shape[0]
    n_seg = seg_starts.shape[0]
    seg_ends = np.empty(n_seg, dtype=np.int64)
    seg_ends[:-1] = seg_starts[1:]
    seg_ends[-1] = n
    if n == 0:
        return LatchResult(np.empty(0, np.int64), np.empty(0, bool), carry)

    def seg_of(idx: np.ndarray) -> np.ndarray:
        if n_seg == 1:
            return np.zeros(idx.shape[0], dtype=np.int64)
        if seg_id is None:
            return _segment_of(idx, seg_starts)
        return seg_id[idx]

    beyond = v > limit if high else v < limit
    if not beyond.any() and not carry.active.any():
        # nothing latched and nothing beyond: no transition.  A trailing returned run
        # only matters while latched, so the carry is simply "quiet".
        return LatchResult(np.empty(0, np.int64), np.empty(0, bool), LatchCarry.fresh(n_seg))
    if deadband == 0:
        not_clear = beyond
    else:
        not_clear = v > limit - deadband if high else v < limit + deadband

    # --- set signal: runs of beyond rows, delayed by on_delay ---------------
    p_start, p_end, p_val = _pieces(beyond, seg_starts, n)
    run_start, run_end = p_start[p_val], p_end[p_val]
    run_seg = seg_of(run_start)
    run_t0 = t[run_start]
    carried = (run_start == seg_starts[run_seg]) & np.isfinite(carry.beyond_since[run_seg])
    if carried.any():
        run_t0 = np.where(carried, carry.beyond_since[run_seg], run_t0)
    if on_delay == 0:
        set_idx = run_start
    else:
        set_at = _first_at_or_after(t, seg_starts, seg_ends, run_seg, run_t0 + on_delay)
        set_idx = set_at[set_at < run_end]

    # --- reset signal: runs of returned rows, delayed by off_delay ----------
    if not_clear is beyond:
        q_start, q_end, q_val = p_start, p_end, p_val
    else:
        q_start, q_end, q_val = _pieces(not_clear, seg_starts, n)
    g_start, g_end = q_start[~q_val], q_end[~q_val]
    g_seg = seg_of(g_start)
    g_t = t[g_start]
    from_carry = (g_start == seg_starts[g_seg]) & np.isfinite(carry.clear_since[g_seg])
    if from_carry.any():
        g_t = np.where(from_carry, carry.clear_since[g_seg], g_t)
    if off_delay == 0:
        reset_idx = g_start
    else:
        reset_at = _first_at_or_after(t, seg_starts, seg_ends, g_seg, g_t + off_delay)
        reset_idx = reset_at[reset_at < g_end]

    # --- set/reset flip-flop with the carried state -------------------------
    ev_idx = np.concatenate((set_idx, reset_idx))
    ev_kind = np.zeros(ev_idx.shape[0], dtype=bool)
    ev_kind[: set_idx.shape[0]] = True
    order = np.argsort(ev_idx, kind="stable")
    ev_idx, ev_kind = ev_idx[order], ev_kind[order]
    ev_seg = seg_of(ev_idx)
    prev = np.empty(ev_idx.shape[0], dtype=bool)
    if ev_idx.shape[0]:
        prev[0] = carry.active[ev_seg[0]]
        prev[1:] = np.where(ev_seg[1:] == ev_seg[:-1], ev_kind[:-1], carry.active[ev_seg[1:]])
    change = ev_kind != prev
    trans_idx, trans_kind = ev_idx[change], ev_kind[change]

    # --- carry out ------------------------------------------------------------
    active_out = carry.active.copy()
    if ev_idx.shape[0]:
        last_ev = np.ones(ev_idx.shape[0], dtype=bool)
        np.not_equal(ev_seg[1:], ev_seg[:-1], out=last_ev[:-1])
        active_out[ev_seg[last_ev]] = ev_kind[last_ev]
    beyond_out = np.full(n_seg, np.nan)
    at_end = run_end == seg_ends[run_seg]
    beyond_out[run_seg[at_end]] = run_t0[at_end]
    clear_out = np.full(n_seg, np.nan)
    at_end = g_end == seg_ends[g_seg]
    clear_out[g_seg[at_end]] = g_t[at_end]
    return LatchResult(trans_idx, trans_kind, LatchCarry(active_out, beyond_out, clear_out))
