"""Typed, SI-unit descriptions of a run: what the scenario parser produces and the engine takes.

Everything here is already validated and in SI units (m, s, kg, m2 s-1, s-1); the checks at the door
live in ``walkers.scenario`` (for TOML files) and in the constructors' ``__post_init__`` for values
that would break the engine whatever their origin.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

import numpy as np

from walkers.errors import InputError

EDGE_NAMES = ("west", "east", "south", "north")
#: The edges of a curvilinear grid, named by index (the column i = 0, the last column, the row
#: j = 0, the last row), in the same order as EDGE_NAMES; `walkers inspect` says which way each
#: faces.
INDEX_EDGE_NAMES = ("first_i", "last_i", "first_j", "last_j")
#: Density of sea water (kg m-3) at about 15 °C and salinity 35 (common practice): the rho of the
#: bed shear stress tau = rho u*^2 and of Stokes' settling law.
SEA_WATER_DENSITY = 1026.0
#: Visser's Δt ≪ 1/max|K''| taken as Δt ≤ VISSER_FRACTION / max|K''| (the default of the key
#: vertical.substep_fraction): at 0.08 a well-mixed column of 20 000 particles lost 25 % of the
#: bottom and top twentieths, at 0.02 10 %, at 0.004 nothing detectable (tests/test_vertical.py,
#: measured); 0.01 keeps the loss below that test's 5-sigma resolution. With 200 000 particles
#: the loss shows at 0.01: a tenth of the depth at the surface or the bed holds about 3 % too
#: little, at 0.0025 about 1 % (docs/method.md).
VISSER_FRACTION = 0.01
#: The largest substep fraction a scenario may give (Visser's "≪ 1"; at 0.08 the end fortieths
#: of a well-mixed column lost 18 % of their mass, docs/method.md).
MAX_VISSER_FRACTION = 0.1


@dataclass(frozen=True)
class Dispersion:
    """Horizontal dispersion coefficients (m2 s-1).

    ``mode``:
      - ``"axes"``: ``k1`` along x, ``k2`` along y (isotropic when equal);
      - ``"aligned"``: ``k1`` longitudinal (along the local flow), ``k2`` transverse.

    ``k1``/``k2`` are constants, or gridded fields (ny, nx) on the flow's cell grid given in
    ``k1_field``/``k2_field`` (then ``k1``/``k2`` are ignored). ``multiplier`` scales both (used by
    ensembles for an uncertain coefficient). In 1-D only ``k1`` is used.
    """

    k1: float = 1.0
    k2: float = 1.0
    mode: Literal["axes", "aligned"] = "axes"
    k1_field: np.ndarray | None = None
    k2_field: np.ndarray | None = None
    multiplier: float = 1.0

    def __post_init__(self) -> None:
        for name in ("k1", "k2", "multiplier"):
            value = getattr(self, name)
            if not np.isfinite(value) or value < 0:
                raise InputError(
                    f"dispersion {name} = {value!r}: must be a finite number >= 0 (m2/s)"
                )
        for name in ("k1_field", "k2_field"):
            arr = getattr(self, name)
            if arr is not None and (not np.all(np.isfinite(arr)) or np.any(arr < 0)):
                raise InputError(f"dispersion {name}: every value must be finite and >= 0 (m2/s)")
        if self.mode not in ("axes", "aligned"):
            raise InputError(f"dispersion mode {self.mode!r}: expected 'axes' or 'aligned'")


@dataclass(frozen=True)
class Vertical:
    """The vertical step of a three-dimensional run (``walkers.engine.vertical``), SI units.

    diffusivity : vertical diffusivity K_z: ``"parabolic"`` (K_z = κ u* z (1 − z/h), u* from the
        bed roughness ``manning_n`` (s m^-1/3) or ``drag_coefficient``, as
        :func:`walkers.engine.coefficients.shear_velocity`), ``"constant"`` (``coefficient``,
        m2 s-1) or ``"file"`` (K_z read from the flow file).
    deposition_velocity : w_d (m s-1) of a depositing bed; 0 is a reflecting bed.
    critical_shear_stress : tau_c (Pa) above which particles on the bed go back into the water;
        None: no resuspension. erosion_rate : the rate of resuspension (s-1) per unit excess
        stress tau / tau_c − 1. water_density : rho (kg m-3) of tau = rho u*^2. u* (of a
        parabolic K_z and of tau) comes from ``manning_n`` or ``drag_coefficient``, and so does
        z0 of the law of the wall below the lowest layer centre of a layered velocity
        (``walkers.engine.vertical.bed_log_law``).
    substep_fraction : the longest vertical substep as a fraction of 1/max|d²K_z/dz²| (Visser
        1997's Δt ≪ 1/max|K''|), in (0, MAX_VISSER_FRACTION]; smaller is more accurate near the
        surface and the bed, and slower.
    """

    diffusivity: Literal["parabolic", "constant", "file"] = "parabolic"
    coefficient: float = 0.0
    manning_n: float | None = None
    drag_coefficient: float | None = None
    deposition_velocity: float = 0.0
    critical_shear_stress: float | None = None
    erosion_rate: float = 0.0
    water_density: float = SEA_WATER_DENSITY
    substep_fraction: float = VISSER_FRACTION

    def __post_init__(self) -> None:
        if self.diffusivity not in ("parabolic", "constant", "file"):
            raise InputError(
                f"vertical.diffusivity = {self.diffusivity!r}: expected 'parabolic', 'constant' "
                "or 'file'"
            )
        for name in ("coefficient", "deposition_velocity", "erosion_rate"):
            value = getattr(self, name)
            if not (np.isfinite(value) and value >= 0):
                raise InputError(f"vertical.{name} = {value!r}: must be a finite number >= 0")
        if self.uses_shear_velocity and (self.manning_n is None) == (self.drag_coefficient is None):
            raise InputError(
                "vertical: a parabolic K_z or resuspension needs the bed roughness for u*: give "
                "one of vertical.manning_n or vertical.drag_coefficient (or estimate the "
                "horizontal dispersion with one, [dispersion] method = 'estimated')"
            )
        tau = self.critical_shear_stress
        if tau is not None and not (np.isfinite(tau) and tau > 0):
            raise InputError(f"vertical.critical_shear_stress = {tau!r}: must be > 0 Pa")
        f = self.substep_fraction
        if not (np.isfinite(f) and 0.0 < f <= MAX_VISSER_FRACTION):
            raise InputError(
                f"vertical.substep_fraction = {f!r}: must be > 0 and at most "
                f"{MAX_VISSER_FRACTION:g} (Visser's criterion asks a substep much shorter than "
                f"1/max|d2K_z/dz2|; the default is {VISSER_FRACTION:g})"
            )

    @property
    def uses_shear_velocity(self) -> bool:
        """Whether the bed shear velocity u* is needed: by a parabolic K_z, or by resuspension
        (tau = rho u*^2)."""
        return self.diffusivity == "parabolic" or self.critical_shear_stress is not None

    @property
    def kz_mode(self) -> int:
        """The K_z mode of ``walkers.engine.vertical``: KZ_CONSTANT 1, KZ_PARABOLIC 2 or
        KZ_FILE 3."""
        return {"constant": 1, "parabolic": 2, "file": 3}[self.diffusivity]

    def describe(self) -> str:
        """K_z and the bed in words, for the run summary and ``walkers inspect``."""
        if self.diffusivity == "constant":
            kz = f"constant K_z = {self.coefficient:.4g} m2/s"
        elif self.diffusivity == "file":
            kz = "K_z from the flow file"
        else:
            rough = (
                f"Manning n = {self.manning_n:g} s m^-1/3"
                if self.manning_n is not None
                else f"drag coefficient {self.drag_coefficient:g}"
            )
            kz = f"parabolic K_z = 0.41 u* z (1 - z/h), u* from {rough}"
        if self.deposition_velocity > 0:
            bed = f"depositing bed, w_d = {self.deposition_velocity * 1e3:.4g} mm/s"
            if self.critical_shear_stress is not None:
                bed += (
                    f", resuspension above {self.critical_shear_stress:g} Pa at "
                    f"{self.erosion_rate:g} 1/s per unit excess stress"
                )
        else:
            bed = "reflecting bed"
        return f"{kz}; {bed}"


@dataclass(frozen=True)
class Transport:
    """How particles move: time step, scheme, dispersion, decay and edge behaviour.

    dt : time step (s).
    scheme : ``"euler"`` or ``"rk4"`` for the advective (deterministic) part.
    decay_rate : first-order decay rate k (s-1); mass m <- m exp(-k dt) each step.
    edges : behaviour of the domain edges named (west, east, south, north on rectilinear grids;
        first_i, last_i, first_j, last_j on curvilinear ones); edges not named are absorbing.
    substeps : sub-steps per step (1 = none); set by the time-step check when asked to sub-step.
    bridge : correct absorbing edges for crossings inside a step (Brownian-bridge probability).
    max_reflections : reflections of one step's path at coasts and reflecting edges before the
        step is refused and the particle kept in place (never reached at sensible steps).
    drift_correction : include the drift (1/h)∇·(hK). Always on in practice; switching it off
        exists only to show what goes wrong without it (the well-mixed verification's twin).
    vertical : the vertical step of a three-dimensional run; None: depth-averaged.
    """

    dt: float
    dispersion: Dispersion = field(default_factory=Dispersion)
    scheme: str = "euler"
    decay_rate: float = 0.0
    edges: dict[str, str] = field(default_factory=dict)
    substeps: int = 1
    bridge: bool = True
    max_reflections: int = 100
    drift_correction: bool = True
    vertical: Vertical | None = None

    def __post_init__(self) -> None:
        if not (np.isfinite(self.dt) and self.dt > 0):
            raise InputError(f"time step {self.dt!r} s: must be a finite number > 0")
        if not (np.isfinite(self.decay_rate) and self.decay_rate >= 0):
            raise InputError(f"decay rate {self.decay_rate!r} 1/s: must be finite and >= 0")
        if self.scheme not in ("euler", "rk4"):
            raise InputError(f"scheme {self.scheme!r}: expected 'euler' or 'rk4'")
        named = set(self.edges)
        if not (named <= set(EDGE_NAMES) or named <= set(INDEX_EDGE_NAMES)):
            raise InputError(
                f"edges {', '.join(sorted(named))}: name the edges of a rectilinear grid "
                f"{', '.join(EDGE_NAMES)}, or those of a curvilinear grid "
                f"{', '.join(INDEX_EDGE_NAMES)} (by grid index), not a mix or other names"
            )
        for name, mode in self.edges.items():
            if mode not in ("reflecting", "absorbing"):
                raise InputError(f"edge {name} = {mode!r}: expected 'reflecting' or 'absorbing'")
        if int(self.substeps) < 1:
            raise InputError(f"substeps {self.substeps!r}: must be a whole number >= 1")


@dataclass(frozen=True)
class Release:
    """One release of mass into the water.

    shape : ``"point"``, ``"line"``, ``"circle"`` or ``"polygon"``.
    coords : (n, 2) vertices in grid coordinates: one point; line ends; circle centre; polygon ring.
    radius : circle radius (m).
    start : release start time (s, in the run's time frame).
    duration : 0 for an instantaneous release (s).
    mass : total mass released (kg), for instantaneous or constant-rate releases.
    rate_times, rates : a time-series rate (s, kg s-1) for continuous releases; mass follows from
        integrating it (trapezoidal) over [start, start + duration].
    particles : number of particles this release uses.
    name : label for outputs.
    behaviour : in three dimensions, ``"neutral"``, ``"settling"`` or ``"rising"``.
    settling, settling_fractions : the settling velocities (m s-1, > 0 down, < 0 rising) of the
        release's particles and the share of the particles that has each (sum 1).
    start_height : where in the column the particles start: ``"surface"``, ``"bed"``,
        ``"column"`` (uniform over the depth) or ``"above_bed"`` (``height_above_bed`` m above the
        bed, at most the depth).
    """

    shape: Literal["point", "line", "circle", "polygon"]
    coords: np.ndarray
    particles: int
    start: float = 0.0
    duration: float = 0.0
    mass: float = 1.0
    radius: float = 0.0
    rate_times: np.ndarray | None = None
    rates: np.ndarray | None = None
    name: str = "release"
    behaviour: Literal["neutral", "settling", "rising"] = "neutral"
    settling: tuple[float, ...] = (0.0,)
    settling_fractions: tuple[float, ...] = (1.0,)
    start_height: Literal["surface", "bed", "column", "above_bed"] = "column"
    height_above_bed: float = 0.0

    def __post_init__(self) -> None:
        if self.shape not in ("point", "line", "circle", "polygon"):
            raise InputError(
                f"release {self.name!r}: shape {self.shape!r}; expected point, line, circle "
                "or polygon"
            )
        if int(self.particles) < 1:
            raise InputError(f"release {self.name!r}: particles must be >= 1")
        if not (np.isfinite(self.duration) and self.duration >= 0):
            raise InputError(f"release {self.name!r}: duration must be >= 0 s")
        if self.rates is None and not (np.isfinite(self.mass) and self.mass > 0):
            raise InputError(f"release {self.name!r}: mass must be > 0 kg")
        if self.shape == "circle" and not self.radius > 0:
            raise InputError(f"release {self.name!r}: a circle needs a radius > 0 m")
        self._check_column()

    def _check_column(self) -> None:
        """The vertical behaviour's values (InputError naming the release)."""
        w = np.asarray(self.settling, dtype=np.float64)
        f = np.asarray(self.settling_fractions, dtype=np.float64)
        if w.size < 1 or w.shape != f.shape or not np.all(np.isfinite(w)):
            raise InputError(
                f"release {self.name!r}: give one finite settling velocity per fraction"
            )
        if not (np.all(f > 0) and abs(f.sum() - 1.0) <= 1e-9):
            raise InputError(
                f"release {self.name!r}: the fractions of the settling velocities must be > 0 "
                f"and add up to 1 (they add up to {f.sum():.6g})"
            )
        if self.start_height not in ("surface", "bed", "column", "above_bed"):
            raise InputError(
                f"release {self.name!r}: start_height {self.start_height!r}; expected surface, "
                "bed, column or above_bed"
            )
        if not (np.isfinite(self.height_above_bed) and self.height_above_bed >= 0):
            raise InputError(f"release {self.name!r}: height_above_bed must be >= 0 m")


@dataclass(frozen=True)
class OutputGrid:
    """A regular output grid, independent of the flow grid (grid coordinates: m or degrees).

    x0, y0 : centre of the first cell; dx, dy : cell size; nx, ny : number of cells.
    bandwidth : Gaussian kernel bandwidth (m) for a smoothed estimate; 0 = box counting only.
    """

    x0: float
    dx: float
    nx: int
    y0: float = 0.0
    dy: float = 1.0
    ny: int = 1
    bandwidth: float = 0.0

    def __post_init__(self) -> None:
        if not (self.dx > 0 and self.dy > 0 and self.nx >= 1 and self.ny >= 1):
            raise InputError("output grid: cell sizes must be > 0 and cell counts >= 1")

    @property
    def x(self) -> np.ndarray:
        return float(self.x0) + float(self.dx) * np.arange(self.nx, dtype=np.float64)

    @property
    def y(self) -> np.ndarray:
        return float(self.y0) + float(self.dy) * np.arange(self.ny, dtype=np.float64)


@dataclass(frozen=True)
class Receptor:
    """A place where concentration is recorded over time.

    x, y : position (grid coordinates); radius : averaging radius (m), 0 = the output-grid cell that
    holds the point; thresholds : concentrations of concern (kg m-3).
    """

    name: str
    x: float
    y: float = 0.0
    radius: float = 0.0
    thresholds: tuple[float, ...] = ()
