"""The report's summary figures on hand-made sequences, checked against values worked out by hand.

The definitions are in probeflow/views/summary.py; the 60 s chattering window
and the 300 s hold are common practice, no source.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from probeflow.views.summary import (
    alarm_counts_by_rule,
    alarm_spans,
    chattering_by_rule,
    hold_durations,
    time_in_band_pct,
)

TS = np.array([0.0, 10.0, 20.0, 30.0, 1000.0])
PH = np.array([7.0, 9.0, 8.5, 6.0, 7.0])


def test_hold_durations_cap_long_gaps() -> None:
    # by hand: 10, 10, 10, min(970, 300), min(1010 - 1000, 300)
    assert hold_durations(TS, 1010.0, 300.0).tolist() == [10.0, 10.0, 10.0, 300.0, 10.0]


def test_time_in_band_weights_by_held_time_and_counts_the_limit_as_inside() -> None:
    good = np.ones(5, dtype=bool)
    # inside 6.5..8.5: 7.0 (10 s), 8.5 exactly at the limit (10 s), 7.0 (10 s) of 340 s held
    pct = time_in_band_pct(TS, PH, good, 1010.0, 6.5, 8.5, 300.0)
    assert pct == pytest.approx(100.0 * 30.0 / 340.0, abs=1e-12)


def test_time_in_band_leaves_out_readings_that_are_not_good() -> None:
    good = np.array([True, True, True, False, True])
    # the 6.0 reading (300 s held) is not counted at all: 30 s inside of 40 s
    assert time_in_band_pct(TS, PH, good, 1010.0, 6.5, 8.5, 300.0) == pytest.approx(75.0)


def test_time_in_band_one_sided_and_without_data() -> None:
    good = np.ones(5, dtype=bool)
    # only a high limit of 8.0: everything but the 9.0 and 8.5 readings, 320 of 340 s
    assert time_in_band_pct(TS, PH, good, 1010.0, None, 8.0, 300.0) == pytest.approx(100 * 320 / 340)
    assert math.isnan(time_in_band_pct(TS, PH, np.zeros(5, dtype=bool), 1010.0, 6.5, 8.5, 300.0))


def events(rows: list[tuple[str, str, str, float]]) -> pd.DataFrame:
    frame = pd.DataFrame(rows, columns=["alarm_id", "rule", "event", "ts"])
    frame["id"] = range(len(frame))
    frame["limit_name"] = frame["alarm_id"].str.split("/").str[-1]
    frame["severity"] = "medium"
    return frame


EVENTS = events([
    ("r1/p/high", "r1", "raise", 0.0),
    ("r1/p/high", "r1", "clear", 100.0),     # before the period [140, 400]
    ("r1/p/high", "r1", "raise", 150.0),     # 50 s after the clear: chattering
    ("r1/p/high", "r1", "clear", 200.0),
    ("r1/p/high", "r1", "raise", 261.0),     # 61 s: not chattering
    ("r1/p/high", "r1", "clear", 300.0),
    ("r1/p/high", "r1", "raise", 360.0),     # exactly 60 s: chattering
    ("r2/p/low", "r2", "raise", 170.0),      # first activation, no previous clear
    ("r2/p/low", "r2", "ack", 180.0),
])


def test_alarm_counts_and_chattering_by_rule() -> None:
    assert alarm_counts_by_rule(EVENTS, 140.0, 400.0) == {"r1": 3, "r2": 1}
    assert chattering_by_rule(EVENTS, 140.0, 400.0, 60.0) == {"r1": 2}


def test_alarm_spans_are_clipped_to_the_period() -> None:
    spans = alarm_spans(EVENTS, 120.0, 400.0)
    got = [(s.alarm_id, s.start, s.end, s.open_end) for s in spans]
    assert got == [
        ("r1/p/high", 150.0, 200.0, False),
        ("r2/p/low", 170.0, 400.0, True),       # never cleared: runs to the period's end
        ("r1/p/high", 261.0, 300.0, False),
        ("r1/p/high", 360.0, 400.0, True),
    ]
    # a span that started before the period begins at the period's start
    assert alarm_spans(EVENTS, 50.0, 120.0)[0].start == 50.0
