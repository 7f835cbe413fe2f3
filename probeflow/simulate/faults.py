"""Scheduled faults as time windows over a probe's samples, and the hashed dice they use.

Electrode and sensor faults change the values; transport faults (drop-outs,
garbled lines, duplicates, late deliveries) change what is delivered.  The
random choices of transport faults come from a counter-based hash of
(seed, probe, fault, sample number), so they never depend on chunking.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass

import numpy as np

from probeflow.simulate.scenario import FAULT_KINDS, FaultSpec, ProbeSpec

__all__ = ["FAULT_BITS", "FaultWindow", "fault_names", "hashed_uniform", "splitmix64", "windows_for"]

FAULT_BITS: dict[str, int] = {kind: 1 << i for i, kind in enumerate(FAULT_KINDS)}
"""Bit of each fault in the truth's ``fault_mask``."""


@dataclass(frozen=True, slots=True)
class FaultWindow:
    """One scheduled fault of one probe, in ms after the start; ``end`` may be None."""

    index: int
    spec: FaultSpec
    start_ms: int
    end_ms: int | None
    key: int              # hash key for its dice

    @property
    def kind(self) -> str:
        return str(self.spec.kind)

    def span(self, t_ms: np.ndarray) -> slice:
        """The slice of sorted sample times that fall in this window."""
        hi = np.iinfo(np.int64).max if self.end_ms is None else self.end_ms
        i, j = np.searchsorted(t_ms, (self.start_ms, hi), side="left")
        return slice(int(i), int(j))


def windows_for(probe: ProbeSpec, seed: int) -> list[FaultWindow]:
    out = []
    for i, f in enumerate(probe.faults):
        digest = hashlib.blake2b(f"{seed}/{probe.id}/{i}".encode(), digest_size=8).digest()
        end = None if f.duration is None else f.at + f.duration
        out.append(FaultWindow(i, f, f.at, end, int.from_bytes(digest, "little")))
    return out


_GOLDEN = np.uint64(0x9E3779B97F4A7C15)
_MIX1 = np.uint64(0xBF58476D1CE4E5B9)
_MIX2 = np.uint64(0x94D049BB133111EB)


def splitmix64(x: np.ndarray) -> np.ndarray:
    """The SplitMix64 output function on uint64 words (wrapping arithmetic).

    Steele, Lea and Flood, "Fast splittable pseudorandom number generators",
    OOPSLA 2014; constants as in S. Vigna's reference splitmix64.c.
    """
    z = x.astype(np.uint64) + _GOLDEN
    z = (z ^ (z >> np.uint64(30))) * _MIX1
    z = (z ^ (z >> np.uint64(27))) * _MIX2
    return z ^ (z >> np.uint64(31))


def hashed_uniform(key: int, sample_index: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Uniform numbers in [0, 1) and nonzero 64-bit words for each sample number under ``key``."""
    words = splitmix64(sample_index.astype(np.uint64) ^ np.uint64(key))
    words = splitmix64(words)
    uniform = (words >> np.uint64(11)).astype(np.float64) * (1.0 / 9007199254740992.0)
    return uniform, words | np.uint64(1)


def fault_names(mask: int) -> str:
    """Comma-separated fault names of a truth ``fault_mask`` ('' when none)."""
    return ",".join(k for k, bit in FAULT_BITS.items() if mask & bit)
