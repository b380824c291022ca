"""Random streams of a run, spawned from one seed.

A run's seed feeds :class:`numpy.random.SeedSequence`; child sequences give independent streams for
the random walk (a 64-bit key of the counter-based generator in ``walkers.engine.kernels``), for
placing particles at release, and for each ensemble member's source draws. The same seed gives the
same numbers whatever the number of threads or workers.
"""

from __future__ import annotations

import numpy as np

WALK, RELEASE, SOURCE = 0, 1, 2


def _sequence(seed: int, member: int | None, purpose: int) -> np.random.SeedSequence:
    key = (purpose,) if member is None else (purpose, int(member))
    return np.random.SeedSequence(int(seed), spawn_key=key)


def run_streams(seed: int, member: int | None = None) -> tuple[int, np.random.Generator]:
    """(walk key, release generator) for a run, or for ensemble member ``member`` of a run."""
    walk_key = int(_sequence(seed, member, WALK).generate_state(1, dtype=np.uint64)[0])
    return walk_key, np.random.default_rng(_sequence(seed, member, RELEASE))


def source_generator(seed: int, member: int) -> np.random.Generator:
    """The generator from which ensemble member ``member`` draws its uncertain source."""
    return np.random.default_rng(_sequence(seed, member, SOURCE))
