"""Particle state: a handful of flat arrays, 49 bytes a particle (65 in three dimensions).

Status codes (int8):

====  =========================================================
 0    waiting: not yet released
 1    in water
 2    held dry: held in a cell that has dried; moves again when it wets
 3    decayed: mass below 1e-15 of its initial mass; no longer moved
 4+e  went out of the domain through open edge e (0 west, 1 east, 2 south, 3 north)
-1    on the bed: deposited (three-dimensional runs with a depositing bed); no longer moved
====  =========================================================
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from walkers.errors import InputError

WAITING = 0
IN_WATER = 1
HELD_DRY = 2
DECAYED = 3
EXITED = 4  # EXITED + edge index
ON_BED = -1

BYTES_PER_PARTICLE = 6 * 8 + 1


@dataclass
class ParticleState:
    """Positions, masses, times and status of every particle of a run.

    x, y : position in grid coordinates (m, or degrees on geographic grids); y is 0 in 1-D.
    mass : current mass (kg); initial_mass : mass at release (kg).
    release_time : when the particle enters the water (s, flow time frame).
    exit_time : when it went out through an open edge (s), NaN otherwise.
    status : int8 code, see the module docstring.
    dispersion_multiplier : factor on the dispersion coefficients and their drift for each
        particle (1), for the members of an ensemble moved as one population; None (the
        default, a single run) means 1 for every particle.
    """

    x: np.ndarray
    y: np.ndarray
    mass: np.ndarray
    initial_mass: np.ndarray
    release_time: np.ndarray
    exit_time: np.ndarray
    status: np.ndarray
    #: on a mesh, each particle's last face (-1 unknown): where the face walk starts; not part of
    #: the state proper (a resumed run finds the faces again)
    face: np.ndarray | None = None
    dispersion_multiplier: np.ndarray | None = None
    #: in three dimensions, each particle's height above the bed as a fraction of the local
    #: water depth (0 bed, 1 surface; see ``walkers.engine.vertical``), None in depth-averaged runs
    sigma: np.ndarray | None = None
    #: in three dimensions, each particle's settling velocity (m s-1; > 0 down, < 0 rising)
    settling: np.ndarray | None = None

    @classmethod
    def from_arrays(
        cls, x: np.ndarray, y: np.ndarray, mass: np.ndarray, release_time: np.ndarray
    ) -> ParticleState:
        n = len(x)
        mass = np.ascontiguousarray(mass, dtype=np.float64)
        return cls(
            x=np.ascontiguousarray(x, dtype=np.float64),
            y=np.ascontiguousarray(y, dtype=np.float64),
            mass=mass.copy(),
            initial_mass=mass.copy(),
            release_time=np.ascontiguousarray(release_time, dtype=np.float64),
            exit_time=np.full(n, np.nan),
            status=np.zeros(n, dtype=np.int8),
        )

    def __len__(self) -> int:
        return len(self.x)

    def copy(self) -> ParticleState:
        out = ParticleState(**{k: v.copy() for k, v in self.arrays().items()})
        out.face = None if self.face is None else self.face.copy()
        return out

    def in_column(
        self, sigma: np.ndarray | float, settling: np.ndarray | float = 0.0
    ) -> ParticleState:
        """The same particles placed in their water columns (three dimensions): ``sigma`` their
        heights above the bed as fractions of the depth, ``settling`` their settling velocities
        (m s-1, > 0 down); returns self."""
        n = len(self)
        if not np.all((np.asarray(sigma) >= 0.0) & (np.asarray(sigma) <= 1.0)):
            raise InputError(
                "particle heights in the column: give fractions of the depth from 0 (bed) to 1 "
                "(surface)"
            )
        if not np.all(np.isfinite(settling)):
            raise InputError("settling velocities: give finite numbers in m s-1 (> 0 down)")
        self.sigma = np.ascontiguousarray(np.broadcast_to(sigma, (n,)), dtype=np.float64).copy()
        self.settling = np.ascontiguousarray(
            np.broadcast_to(settling, (n,)), dtype=np.float64
        ).copy()
        return self

    def arrays(self) -> dict[str, np.ndarray]:
        out = {
            "x": self.x,
            "y": self.y,
            "mass": self.mass,
            "initial_mass": self.initial_mass,
            "release_time": self.release_time,
            "exit_time": self.exit_time,
            "status": self.status,
        }
        if self.dispersion_multiplier is not None:
            out["dispersion_multiplier"] = self.dispersion_multiplier
        if self.sigma is not None and self.settling is not None:
            out["sigma"], out["settling"] = self.sigma, self.settling
        return out

    @property
    def nbytes(self) -> int:
        return sum(a.nbytes for a in self.arrays().values())
