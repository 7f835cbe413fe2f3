"""Per-key time series tails kept between batches for windowed rules."""

from __future__ import annotations

from typing import Any

import numpy as np

__all__ = ["SeriesTails"]


class SeriesTails:
    """Recent (t, v) of each key, trimmed to a time span; JSON-able state."""

    def __init__(self, span_s: float) -> None:
        self.span_s = span_s
        self._t: dict[str, np.ndarray] = {}
        self._v: dict[str, np.ndarray] = {}

    def joined(self, key: str, t: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray, int]:
        """Tail plus new rows; the int is how many of the rows are from the tail."""
        tt = self._t.get(key)
        if tt is None or tt.shape[0] == 0:
            return t, v, 0
        return np.concatenate([tt, t]), np.concatenate([self._v[key], v]), int(tt.shape[0])

    def keep(self, key: str, t: np.ndarray, v: np.ndarray) -> None:
        if t.shape[0] == 0:
            return
        cut = np.searchsorted(t, t[-1] - self.span_s, side="left")
        self._t[key] = t[cut:].copy()
        self._v[key] = v[cut:].copy()

    def state(self) -> dict[str, Any]:
        return {k: [self._t[k].tolist(), self._v[k].tolist()] for k in self._t}

    def restore(self, state: dict[str, Any]) -> None:
        self._t = {k: np.asarray(t, dtype=np.float64) for k, (t, _) in state.items()}
        self._v = {k: np.asarray(v, dtype=np.float64) for k, (_, v) in state.items()}
