"""Independent, reproducible random streams.

Every random draw in ptares comes from a stream identified by the run seed and a
tuple of names, e.g. ``(seed, "white", "PSR-A")``.  The names are hashed into a
numpy ``SeedSequence`` spawn key, so a stream depends only on its own names:
adding a pulsar or a signal leaves every other stream, and so every other
pulsar's noise, unchanged.
"""

from __future__ import annotations

import hashlib

import numpy as np

__all__ = ["stream", "fresh_seed"]


def _words(name: str) -> tuple:
    """Four stable 32-bit words for a name (a 128-bit digest: collisions are out of reach;
    Python's ``hash`` would be salted per process)."""
    digest = hashlib.blake2b(name.encode("utf-8"), digest_size=16).digest()
    return tuple(int.from_bytes(digest[i : i + 4], "little") for i in range(0, 16, 4))


def stream(seed: int, *names: str) -> np.random.Generator:
    """Random generator for the stream ``names`` under run ``seed``."""
    key = tuple(word for name in names for word in _words(name))
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=key))


def fresh_seed() -> int:
    """A new seed from operating-system entropy, for runs whose config names none."""
    return int(np.random.SeedSequence().entropy % 2**63)
