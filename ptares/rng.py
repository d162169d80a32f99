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


def _word(name: str) -> int:
    """A stable 32-bit integer for a name (Python's ``hash`` is salted per process)."""
    return int.from_bytes(hashlib.blake2b(name.encode("utf-8"), digest_size=4).digest(), "little")


def stream(seed: int, *names: str) -> np.random.Generator:
    """Random generator for the stream ``names`` under run ``seed``."""
    key = tuple(_word(name) for name in names)
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=key))


def fresh_seed() -> int:
    """A new seed from operating-system entropy, for runs whose config names none."""
    return int(np.random.SeedSequence().entropy % 2**63)
