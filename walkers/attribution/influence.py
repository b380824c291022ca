"""Particles moved backward from one detection: the influence of every place and time on it.

A detection D sampled over the window [t1, t2] starts N backward particles spread uniformly over
that window (a continuous release of unit mass in backward time), moved through
:func:`walkers.attribution.reverse.reversed_flow` by the ordinary driver
(:func:`walkers.run.simulate.simulate`). With volume conserved (∂h/∂t + ∇·(hu) = 0), the
density of backward particles at S after a backward time τ is h(S) G(D | S) / h(D), G the
forward transition density (per m2) from S at t' = t − τ to D at t (substitute into the
Fokker–Planck equation; Marchuk 1995, *Adjoint Equations and Analysis of Complex Systems*, ch. 1;
Keats, Yee & Lien 2007, *Atmos. Environ.* 41 — from memory). The box-counted "concentration" of
the backward particles, Σ m_p / (A h(S)) with Σ m_p = 1, is therefore

    I(S, t') = (1/(t2 − t1)) ∫ G(D, t | S, t') / h(D) dt        (m-3)

the window-mean concentration at D (kg m-3) per kg released at S at time t'. A release at rate
Q(S, t') (kg s-1) gives the window-mean concentration c̄(D) = ∫ I(S, t') Q(S, t') dt'; a mass M
released at a constant rate over [a, b] gives c̄(D) = M · mean of I(S, ·) over [a, b].

Coasts reflect in both directions; an open edge ends a backward path: that water came from
outside the domain (``from_outside``, by edge, as a fraction of the particles started so far).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from typing import Literal

import numpy as np
import xarray as xr

from walkers.attribution.reverse import reversed_flow
from walkers.fields.base import FlowField
from walkers.run import reduce
from walkers.run.simulate import RunState, simulate
from walkers.scenario.config import EDGE_NAMES, OutputGrid, Receptor, Release, Transport
from walkers.scenario.sources import Candidate, Detection

INFLUENCE_UNITS = "m-3"
INFLUENCE_MEANING = (
    "window-mean concentration at the detection (kg m-3) per kg released in this cell at this "
    "time; a release rate Q (kg s-1) over a time span contributes the integral of influence x Q "
    "over that span"
)


def detection_release(detection: Detection, t_ref: float, particles: int) -> Release:
    """The backward release of a detection: unit mass spread evenly over its window, placed in
    backward time τ = t_ref − t (s)."""
    coords = np.array([[detection.x, detection.y]], dtype=np.float64)
    return Release(
        shape="circle" if detection.radius > 0 else "point",
        coords=coords,
        particles=int(particles),
        start=float(t_ref - detection.end),
        duration=float(detection.end - detection.start),
        mass=1.0,
        radius=float(detection.radius),
        name=detection.name,
    )


class PlaceCounts:
    """Particles within each place's circle (or output cell) at every output time: the sampling
    error of a place's influence is about influence/√count (a multinomial count; common
    practice)."""

    def __init__(self, places: Sequence[Receptor], grid: OutputGrid, flow: FlowField, nt: int):
        self.places = list(places)
        self.grid = grid
        self.flow = flow
        self.counts = np.zeros((len(self.places), nt))
        self.size = np.array(
            [np.pi * p.radius**2 if flow.ndim == 2 else 2.0 * p.radius for p in self.places]
        )

    def __call__(self, state: RunState) -> None:
        if not self.places:
            return
        k = state.next_output - 1
        p = state.particles
        unit = dataclasses.replace(p, mass=np.ones(len(p)))
        ones = np.ones(len(p))
        cells, _ = reduce.concentration(unit, ones, self.grid, np.ones((1, 1)))
        per_area = reduce.receptor_values(
            unit, ones, self.places, cells, self.grid, self.flow.geographic, self.flow.ndim
        )
        self.counts[:, k] = np.where(self.size > 0, per_area * self.size, per_area)


def backward_run(
    flow: FlowField,
    transport: Transport,
    detection: Detection,
    places: Sequence[Candidate] = (),
    *,
    start: float,
    end: float,
    output_interval: float,
    output_grid: OutputGrid,
    particles: int,
    seed: int = 0,
    member: int | None = None,
    stepper: Literal["fast", "reference"] = "fast",
    time_step_check: Literal["fail", "substep", "warn", "off"] = "fail",
) -> xr.Dataset:
    """Move ``particles`` backward particles from ``detection`` from ``end`` back to ``start``
    (s, flow frame) and return its influence (see the module docstring).

    places : candidate places whose influence (mean over their circle) is recorded at every
        output time, with the particle counts behind it.

    Returns a Dataset on forward times ``t'`` (ascending, s in the flow frame): ``influence``
    and ``particle_count`` (time, y, x), ``place_influence`` and ``place_count`` (place, time),
    ``from_outside`` (edge, time).
    """
    backward = reversed_flow(flow, end)
    release = detection_release(detection, end, particles)
    receptors = [Receptor(name=c.name, x=c.x, y=c.y, radius=c.radius) for c in places]
    nt = int(round((end - start) / output_interval)) + 1
    counter = PlaceCounts(receptors, output_grid, backward, nt)
    ds = simulate(
        backward,
        transport,
        [release],
        start=0.0,
        end=end - start,
        output_interval=output_interval,
        output_grid=output_grid,
        receptors=receptors,
        seed=seed,
        member=member,
        time_step_check=time_step_check,
        stepper=stepper,
        on_output=counter,
    )
    return _forward_times(ds, end, counter.counts, detection, particles)


def _forward_times(
    ds: xr.Dataset, t_ref: float, counts: np.ndarray, detection: Detection, particles: int
) -> xr.Dataset:
    """The backward result on ascending forward times t' = t_ref − τ, in influence terms."""
    order = slice(None, None, -1)
    tau = ds["time"].values
    released = ds["budget_released"].values
    with np.errstate(invalid="ignore", divide="ignore"):
        outside = np.where(released > 0, ds["budget_outflow"].values / released, 0.0)
    data = {
        "influence": (
            ("time", "y", "x"),
            np.asarray(ds["concentration"].values)[order],
            {"units": INFLUENCE_UNITS, "long_name": "influence on the detection"},
        ),
        "particle_count": (
            ("time", "y", "x"),
            np.asarray(ds["particle_count"].values)[order],
            {"units": "1", "long_name": "backward particles in the cell"},
        ),
        "from_outside": (
            ("edge", "time"),
            outside[:, order],
            {
                "units": "1",
                "long_name": "fraction of the detection's water that came in through this "
                "open edge after this time",
            },
        ),
    }
    if "receptor" in ds.dims:
        data["place_influence"] = (
            ("place", "time"),
            ds["receptor_concentration"].values[:, order],
            {"units": INFLUENCE_UNITS, "long_name": "influence of the place on the detection"},
        )
        data["place_count"] = (
            ("place", "time"),
            counts[:, order],
            {"units": "1", "long_name": "backward particles within the place"},
        )
    coords = {
        "time": ("time", t_ref - tau[order], {"units": "s", "long_name": "release time"}),
        "x": ds["x"],
        "y": ds["y"],
        "edge": ("edge", list(EDGE_NAMES)),
    }
    if "receptor" in ds.dims:
        coords["place"] = ("place", list(ds["receptor"].values))
    attrs = dict(ds.attrs)
    attrs.update(
        detection=detection.name, backward_particles=int(particles), influence=INFLUENCE_MEANING
    )
    return xr.Dataset(data, coords=coords, attrs=attrs)
