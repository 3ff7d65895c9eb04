"""Random streams keyed by name, drawn from numpy in blocks.

Every source of randomness in a run (the arrivals of a source, the day factor of a source's rates,
the holds of a place, the routing of a place, the patience of a place) has its own numpy Generator, seeded from
``SeedSequence(seed, spawn_key=(replication, stable_hash(kind + ":" + name)))``. A stream depends
only on the seed, the replication and its own kind and name, so adding an unrelated place changes
no other draw, and two staffing plans run with the same seed see the same arrivals, holds and
patience draws (common random numbers).
"""

from __future__ import annotations

import zlib
from itertools import chain
from typing import Callable, Iterator

import numpy as np

__all__ = ["STREAM_KINDS", "BLOCK", "stable_hash", "stream_rng", "block_draws", "uniform_draws"]

#: The kinds of randomness a run uses; each (kind, name) pair is its own stream.
STREAM_KINDS = ("arrivals", "hold", "route", "patience", "random_rate")

#: Draws taken from numpy per refill of a stream.
BLOCK = 1024


def stable_hash(text: str) -> int:
    """A 32-bit hash of ``text`` that is the same in every process and Python version
    (``hash()`` is salted per process, so it must never key a stream)."""
    return zlib.crc32(text.encode("utf-8"))


def stream_rng(seed: int, replication: int, kind: str, name: str) -> np.random.Generator:
    """The Generator of stream ``kind`` (one of :data:`STREAM_KINDS`) of node ``name`` in
    replication ``replication`` of a run with base ``seed``."""
    if kind not in STREAM_KINDS:
        raise ValueError(f"unknown stream kind {kind!r}; expected one of {STREAM_KINDS}")
    key = (int(replication), stable_hash(f"{kind}:{name}"))
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence(int(seed), spawn_key=key)))


def block_draws(sample: Callable[[np.random.Generator, int], np.ndarray],
                rng: np.random.Generator, block: int = BLOCK) -> Iterator[float]:
    """An endless iterator of Python floats, refilled ``block`` at a time by ``sample(rng, block)``.

    ``next()`` on it is the cheapest way to take one draw in the engine's hot path: a chain of
    lists of Python floats, no numpy scalar and no generator frame per draw."""
    return chain.from_iterable(iter(lambda: sample(rng, block).tolist(), None))


def uniform_draws(rng: np.random.Generator, block: int = BLOCK) -> Iterator[float]:
    """Uniform [0, 1) draws in blocks (for routing)."""
    return block_draws(lambda g, n: g.random(n), rng, block)
