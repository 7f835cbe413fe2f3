"""Independent random streams keyed by name.

Each random source (a stream's disturbance, a probe's electrode noise ...) gets
its own ``numpy.random.Generator`` from a child ``SeedSequence`` of the run's
seed.  The child's spawn key is derived from the *names* (stream or probe id and
the purpose) rather than a position, the same mechanism ``SeedSequence.spawn``
uses with running numbers: adding, removing or reordering probes leaves every
other probe's numbers unchanged.  Each purpose has its own generator, so draws
never depend on how the run is cut into chunks.
"""

from __future__ import annotations

import hashlib

import numpy as np

__all__ = ["named_generator"]


def _name_words(name: str) -> tuple[int, int]:
    digest = hashlib.blake2b(name.encode("utf-8"), digest_size=8).digest()
    return int.from_bytes(digest[:4], "little"), int.from_bytes(digest[4:], "little")


def named_generator(seed: int, *names: str) -> np.random.Generator:
    """A PCG64 generator for ``seed`` and a path of names, e.g. ``(seed, "probe", "bt-1", "mv")``.

    >>> float(named_generator(5, "a").random()) == float(named_generator(5, "a").random())
    True
    """
    key: list[int] = []
    for name in names:
        key.extend(_name_words(name))
    seq = np.random.SeedSequence(entropy=int(seed), spawn_key=tuple(key))
    return np.random.Generator(np.random.PCG64(seq))
