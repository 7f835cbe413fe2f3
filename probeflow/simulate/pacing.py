"""Release readings on the wall clock: real time, accelerated, or as fast as possible."""

from __future__ import annotations

import threading
import time
from collections.abc import Callable, Iterator
from itertools import pairwise

import numpy as np

from probeflow.simulate.generator import Readings

__all__ = ["Pacer"]

WALL_STEP_S = 0.05          # readings due within one step are released together


class Pacer:
    """Maps simulated time to wall time: a reading stamped ``ts`` is released at
    wall ``w0 + (ts - t0) / speed``; ``speed == 0`` releases at once."""

    def __init__(self, speed: float, t0: float, stop: threading.Event | None = None, *,
                 clock: Callable[[], float] = time.monotonic,
                 sleep: Callable[[float], bool] | None = None) -> None:
        """``clock`` gives wall seconds; ``sleep(seconds)`` waits and returns True when
        told to stop (default: waiting on ``stop``).  Both can be replaced in tests."""
        if speed < 0:
            raise ValueError("speed must be 0 (as fast as possible) or more")
        self.speed = float(speed)
        self.t0 = float(t0)
        self.stop = stop or threading.Event()
        self.clock = clock
        self.sleep = sleep or self.stop.wait
        self.wall0: float | None = None

    def wait_until(self, ts: float) -> bool:
        """Sleep until simulated time ``ts`` is due; False when asked to stop."""
        if self.stop.is_set():
            return False
        if self.speed == 0:
            return True
        if self.wall0 is None:
            self.wall0 = self.clock()
        due = self.wall0 + (ts - self.t0) / self.speed
        delay = due - self.clock()
        if delay > 0:
            return not self.sleep(delay)
        return True

    def pieces(self, readings: Readings) -> Iterator[Readings]:
        """Slices of ``readings`` (in delivery order), each yielded when it is due."""
        n = len(readings)
        if n == 0:
            return
        if self.speed == 0:
            if not self.stop.is_set():
                yield readings
            return
        release = np.maximum.accumulate(readings.ts)   # a late reading goes out with newer ones
        step = WALL_STEP_S * self.speed
        bins = np.floor((release - self.t0) / step).astype(np.int64)
        cuts = [0, *(np.flatnonzero(bins[1:] != bins[:-1]) + 1).tolist(), n]
        for i, j in pairwise(cuts):
            if not self.wait_until(float(release[j - 1])):
                return
            yield readings.select(slice(i, j))
