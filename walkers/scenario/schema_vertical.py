"""The scenario keys of a three-dimensional run (part of :data:`walkers.scenario.schema.SCHEMA`):
the [vertical] table (vertical diffusivity and the bed) and each release's behaviour in the water
column (neutral, settling, rising) and start height."""

from __future__ import annotations

from walkers.scenario.config import MAX_VISSER_FRACTION, VISSER_FRACTION
from walkers.scenario.keys import Choice, Key, Section

VERTICAL = Section(
    "Turns the run three-dimensional: each particle also has a height in its water column, mixed "
    "by a vertical diffusivity K_z with the drift dK_z/dz (Visser 1997), settling or rising as its "
    "release says, reflected at the surface, and reflected or deposited at the bed. Needs a flow "
    "with a water depth.",
    {
        "diffusivity": Key(
            "choice",
            "K_z: 'parabolic' (K_z = 0.41 u* z (1 - z/h), u* from the bed roughness), "
            "'constant' (give coefficient) or 'file' (the flow file's vertical diffusivity, "
            "CF standard name ocean_vertical_tracer_diffusivity or ocean_vertical_diffusivity, "
            "on layers of a grid or a mesh).",
            default="parabolic",
            allowed=("parabolic", "constant", "file"),
        ),
        "coefficient": Key(
            "quantity",
            "The constant K_z.",
            dimension="diffusivity",
            bound="positive",
            only_when="diffusivity=constant",
        ),
        "manning_n": Key(
            "number",
            "Manning roughness n (s m^-1/3) of u* = n |U| sqrt(g) / h^(1/6); default: that of "
            "[dispersion] when it is estimated. For a parabolic K_z, for resuspension, and for "
            "the law of the wall below the lowest layer of a layered velocity.",
            bound="positive",
        ),
        "drag_coefficient": Key(
            "number",
            "Bed drag coefficient C_d of u* = sqrt(C_d) |U|; default: that of [dispersion] when "
            "it is estimated. For a parabolic K_z, for resuspension, and for the law of the wall "
            "below the lowest layer of a layered velocity.",
            bound="positive",
        ),
        "substep_fraction": Key(
            "number",
            "The longest vertical substep as a fraction of 1/max|d2K_z/dz2| (Visser 1997: a "
            f"substep much shorter than that; at most {MAX_VISSER_FRACTION:g}). The walk loses a "
            "little mass at the "
            "surface and the bed, where K_z = 0: at 0.01 a tenth of the depth there holds about "
            "3 % too little in a well-mixed column, at 0.0025 about 1 %, with four times the "
            "substeps (docs/method.md).",
            default=VISSER_FRACTION,
            bound="positive",
        ),
        "bed": Key(
            "choice",
            "'reflecting' (particles bounce off the bed) or 'depositing' (a particle that reaches "
            "the bed stays there with a probability set by deposition_velocity, and is then "
            "booked 'on the bed' in the budget).",
            default="reflecting",
            allowed=("reflecting", "depositing"),
        ),
        "deposition_velocity": Key(
            "quantity",
            "Deposition velocity w_d of a depositing bed: the flux to the bed is w_d times the "
            'concentration there, e.g. "0.1 mm/s".',
            dimension="velocity",
            bound="positive",
            only_when="bed=depositing",
        ),
        "critical_shear_stress": Key(
            "quantity",
            "Bed shear stress tau_c above which deposited particles go back into the water "
            "(tau = rho u*^2); without it nothing is resuspended.",
            dimension="stress",
            bound="positive",
            only_when="bed=depositing",
        ),
        "erosion_rate": Key(
            "quantity",
            "Rate at which deposited particles go back into the water per unit excess stress "
            "tau / tau_c - 1.",
            dimension="rate",
            bound="positive",
            only_when="bed=depositing",
        ),
    },
    choices=(
        Choice((("manning_n",), ("drag_coefficient",)), required=False),
        Choice((("deposition_velocity",),), only_when="bed=depositing"),
        Choice((("critical_shear_stress", "erosion_rate"),), required=False),
    ),
)

#: The keys of a [[releases]] table for its particles' place and motion in the water column.
RELEASE_COLUMN_KEYS: dict[str, Key | Section] = {
    "behaviour": Key(
        "choice",
        "In a three-dimensional run: 'neutral' (moves with the water), 'settling' (sinks at a "
        "settling velocity) or 'rising' (buoyant, rises at a rise velocity).",
        default="neutral",
        allowed=("neutral", "settling", "rising"),
    ),
    "settling_velocity": Key(
        "quantity",
        'One settling velocity for every particle, e.g. "0.5 mm/s".',
        dimension="velocity",
        bound="positive",
        only_when="behaviour=settling",
    ),
    "settling_velocities": Key(
        "quantities",
        "A mix of settling velocities, with the share of the particles of each in fractions.",
        dimension="velocity",
        bound="positive",
        only_when="behaviour=settling",
    ),
    "grain_sizes": Key(
        "quantities",
        "A mix of grain diameters (silt and clay: each must settle in Stokes' regime, grain "
        "Reynolds number below 1), with the share of each in fractions; the settling velocity "
        "is Stokes' law w_s = (rho_s - rho) g d^2 / (18 mu) (Stokes 1851).",
        dimension="length",
        bound="positive",
        only_when="behaviour=settling",
    ),
    "fractions": Key(
        "numbers",
        "Shares of the particles (each > 0, adding up to 1) that have each of the "
        "settling_velocities or grain_sizes.",
        bound="positive",
        only_when="behaviour=settling",
    ),
    "grain_density": Key(
        "quantity",
        "Density rho_s of the grains of grain_sizes (quartz and most mineral silt: 2650 kg/m3).",
        dimension="density",
        default="2650 kg/m3",
        bound="positive",
        only_when="grain_sizes",
    ),
    "rise_velocity": Key(
        "quantity",
        'Rise velocity of a buoyant release, e.g. "2 mm/s".',
        dimension="velocity",
        bound="positive",
        only_when="behaviour=rising",
    ),
    "start_height": Key(
        "choice",
        "Where in the water column the particles start: 'surface', 'bed', 'column' (spread "
        "evenly over the depth) or 'above_bed' (at height_above_bed, or at the surface where the "
        "water is shallower).",
        default="column",
        allowed=("surface", "bed", "column", "above_bed"),
    ),
    "height_above_bed": Key(
        "quantity",
        "Start height above the bed for start_height = 'above_bed'.",
        dimension="length",
        bound="nonnegative",
        only_when="start_height=above_bed",
    ),
}

#: Choices among RELEASE_COLUMN_KEYS.
RELEASE_COLUMN_CHOICES = (
    Choice(
        (("settling_velocity",), ("settling_velocities",), ("grain_sizes",)),
        only_when="behaviour=settling",
    ),
    Choice((("rise_velocity",),), only_when="behaviour=rising"),
    Choice((("height_above_bed",),), only_when="start_height=above_bed"),
)
