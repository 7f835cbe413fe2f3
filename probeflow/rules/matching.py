"""Which probes a rule applies to: shell-style globs on probe ids (``out-*``, ``tank-[12]``)."""

from __future__ import annotations

from collections.abc import Sequence
from fnmatch import fnmatchcase

import numpy as np

__all__ = ["ProbeMatcher"]


class ProbeMatcher:
    """Case-sensitive glob matcher with a per-probe cache."""

    def __init__(self, globs: Sequence[str]) -> None:
        self.globs = tuple(globs)
        self._cache: dict[str, bool] = {}

    def __call__(self, probe: str) -> bool:
        hit = self._cache.get(probe)
        if hit is None:
            hit = any(fnmatchcase(probe, g) for g in self.globs)
            self._cache[probe] = hit
        return hit

    def mask(self, probes: Sequence[str]) -> np.ndarray:
        return np.fromiter((self(p) for p in probes), dtype=bool, count=len(probes))
