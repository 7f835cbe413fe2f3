"""What the running service does with the watcher's answers (the wiring the service loop uses).

A new accepted calibration converts readings stamped from its applies_from on,
earlier readings keep the calibration valid then; maintenance tags readings.
Expected pH values come from Calibration.to_ph of the stored calibration.
"""

from __future__ import annotations

import numpy as np
import pytest

from probeflow.batch import QUALITY_NAMES, ReadingBatch
from probeflow.calibration.acceptance import Verdict
from probeflow.calibration.model import Calibration
from probeflow.calibration.store import CalibrationStore
from probeflow.calibration.watch import CalibrationWatcher
from probeflow.config import load_config
from probeflow.convert import Converter

PROBE = "basin-ph-1"
T1 = 1_790_000_000.0


def batch(ts: np.ndarray, mv: float = -40.0, temp_c: float = 17.0) -> ReadingBatch:
    n = ts.size
    return ReadingBatch(np.array([PROBE] * n, dtype=object), ts.astype(float), np.full(n, mv),
                        np.full(n, temp_c), np.full(n, np.nan))


def apply(watcher: CalibrationWatcher, converter: Converter) -> None:
    updates, maintenance = watcher.poll()
    for u in updates:
        converter.set_calibration(u.probe, u.offset_mv, u.slope_pct, u.zero_ph, valid_from=u.applies_from)
    for probe, on in maintenance.items():
        converter.set_maintenance(probe, on)


def test_new_calibration_applies_from_its_recorded_time(site):
    converter = Converter(load_config(site.config, sections=("stores",)).probes)
    watcher = CalibrationWatcher(site.db, clock=lambda: T1 + 100)
    old, new = Calibration(1.0, 98.0), Calibration(9.0, 94.0)
    with CalibrationStore(site.db) as store:
        store.record_calibration(PROBE, old, Verdict(True), ts=T1 - 1000, applies_from=T1 - 1000)
    apply(watcher, converter)
    with CalibrationStore(site.db) as store:
        store.record_calibration(PROBE, new, Verdict(True), ts=T1, applies_from=T1)
        store.record_calibration(PROBE, Calibration(30.0, 80.0), Verdict(False, ("slope",)),
                                 ts=T1 + 5, applies_from=T1 + 5)
    apply(watcher, converter)
    ts = T1 + np.array([-20.0, -0.5, 0.0, 10.0, 50.0])
    out = converter.convert(batch(ts))
    expected = np.where(ts < T1, old.to_ph(-40.0, 17.0), new.to_ph(-40.0, 17.0))
    assert out.ph == pytest.approx(expected, abs=1e-9)
    assert {QUALITY_NAMES[q] for q in out.quality} == {"good"}
    watcher.close()


def test_maintenance_tags_readings_while_on(site):
    now = [T1]
    converter = Converter(load_config(site.config, sections=("stores",)).probes)
    watcher = CalibrationWatcher(site.db, clock=lambda: now[0])
    with CalibrationStore(site.db) as store:
        store.record_calibration(PROBE, Calibration(0.0, 99.0), Verdict(True), ts=0.0)
        store.start_maintenance(PROBE, T1, until=T1 + 60)
    apply(watcher, converter)
    assert QUALITY_NAMES[converter.convert(batch(np.array([T1 + 1]))).quality[0]] == "maintenance"
    now[0] = T1 + 61   # expired
    apply(watcher, converter)
    assert QUALITY_NAMES[converter.convert(batch(np.array([T1 + 62]))).quality[0]] == "good"
    watcher.close()
