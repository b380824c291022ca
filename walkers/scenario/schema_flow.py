"""The scenario keys of the [flow] table (part of :data:`walkers.scenario.schema.SCHEMA`): flow
files and how to read them (variables, units, CRS, layers, velocity axes of curvilinear grids,
open boundaries of meshes), or an analytic flow."""

from __future__ import annotations

from walkers.scenario.keys import FLOW_ROLES, Choice, Key, Section

FLOW = Section(
    "The velocity field: flow files (NetCDF) or an analytic flow.",
    {
        "files": Key(
            "paths",
            "Flow file, or list of files in time order; relative to the scenario file; "
            "wildcards (*, ?) are expanded and sorted.",
        ),
        "variables": Section(
            "Variable names in the flow files, per role, where the reader cannot find "
            "them from their CF standard names.",
            {
                role: Key("text", f"Name of the {role.replace('_', ' ')} variable.")
                for role in FLOW_ROLES
            },
            only_when="files",
        ),
        "units": Section(
            "Units of the flow-file variables, per role, where the file's units "
            "attribute is missing or wrong.",
            {
                role: Key("unit", f"Units of the {role.replace('_', ' ')} variable.", dim)
                for role, dim in FLOW_ROLES.items()
                if dim is not None
            },
            only_when="files",
        ),
        "crs": Key(
            "text",
            'Coordinate reference system of the flow grid, e.g. "EPSG:32631", where the '
            "files do not say.",
            only_when="files",
        ),
        "minimum_depth": Key(
            "quantity",
            "Cells shallower than this are dry (walls).",
            dimension="length",
            default="0.05 m",
            bound="nonnegative",
            only_when="files",
        ),
        "open_boundaries": Section(
            "On an unstructured mesh (a UGRID file): the open boundaries, one table "
            "[[flow.open_boundaries]] each, beside those the file marks; the rest of the "
            "mesh boundary is coast. Particles that cross an open boundary leave, and the "
            "budget books each by name.",
            {
                "name": Key("text", "The boundary's name in the budget.", required=True),
                "nodes": Key(
                    "integers",
                    "Mesh nodes (0-based) along the mesh boundary, neighbour after neighbour.",
                ),
                "polyline": Key(
                    "points",
                    "Points [[x, y], ...] in metres (the mesh's coordinates) along the "
                    "mesh boundary; the boundary edges within 'tolerance' of it open.",
                ),
                "tolerance": Key(
                    "quantity",
                    "How far a polyline may lie from the mesh boundary.",
                    dimension="length",
                    default="1 m",
                    bound="positive",
                ),
            },
            many=True,
            choices=(Choice((("nodes",), ("polyline",))),),
            only_when="files",
        ),
        "velocity_axes": Key(
            "choice",
            "On a curvilinear grid, how the files' velocity components are oriented: "
            "'auto' (from their standard names and a grid-angle variable), 'east_north' "
            "(eastward and northward, or along the projected x and y) or 'grid' (along "
            "the grid's own axes i and j).",
            default="auto",
            allowed=("auto", "east_north", "grid"),
            only_when="files",
        ),
        "depth": Key(
            "quantity",
            "A constant water depth, for flow files that hold no depth.",
            dimension="length",
            bound="positive",
            only_when="files",
        ),
        "layers": Section(
            "For flow files whose velocities are in layers (sigma, s or z coordinates): "
            "the part of the water column the particles move with. Each layer counts "
            "by its thickness; the depth used for concentrations stays the total water "
            "depth.",
            {
                "select": Key(
                    "choice",
                    "mean: the depth mean of the whole column; layer: one layer; band: "
                    "the mean over a depth band below the surface (e.g. the top 2 m for a "
                    "floating substance).",
                    default="mean",
                    allowed=("mean", "layer", "band"),
                ),
                "layer": Key(
                    "integer",
                    "The layer, counted from the surface (1 = top layer).",
                    default=1,
                    bound="positive",
                    only_when="select=layer",
                ),
                "band": Key(
                    "quantities",
                    'Top and bottom of the band as depths below the surface, e.g. ["0 m", "2 m"].',
                    dimension="length",
                    length=2,
                    bound="nonnegative",
                    only_when="select=band",
                ),
            },
            only_when="files",
        ),
        "analytic": Section(
            "An analytic flow on a regular grid in metres, for tests and demos. Its time "
            "0 is the run start.",
            {
                "kind": Key(
                    "choice",
                    "uniform: (u, v) everywhere; shear: u + shear * y; rotation: "
                    "solid-body rotation about (0, 0); tidal: u + amplitude * "
                    "cos(2 pi t / period).",
                    required=True,
                    allowed=("uniform", "shear", "rotation", "tidal"),
                ),
                "u": Key("quantity", "Velocity along x.", dimension="velocity", default="0 m/s"),
                "v": Key("quantity", "Velocity along y.", dimension="velocity", default="0 m/s"),
                "shear": Key("quantity", "Shear du/dy (shear flow).", dimension="rate", default=0),
                "angular_velocity": Key(
                    "quantity",
                    "Angular velocity, rad/s (rotation).",
                    dimension="rate",
                    default=0,
                ),
                "amplitude": Key(
                    "quantity",
                    "Amplitude of the tidal velocity (tidal).",
                    dimension="velocity",
                    default="0 m/s",
                ),
                "period": Key(
                    "quantity",
                    "Tidal period (tidal).",
                    dimension="time",
                    default="12.42 h",
                    bound="positive",
                ),
                "frame_interval": Key(
                    "quantity",
                    "Interval between flow frames (tidal).",
                    dimension="time",
                    default="10 min",
                    bound="positive",
                ),
                "depth": Key(
                    "quantity",
                    "Water depth (2-D flows).",
                    dimension="length",
                    default="10 m",
                    bound="positive",
                    only_when="dimensions=2",
                ),
                "area": Key(
                    "quantity",
                    "Wetted cross-section area of the channel (1-D flows).",
                    dimension="area",
                    bound="positive",
                    only_when="dimensions=1",
                ),
                "extent": Key(
                    "quantities",
                    "Cell-centre extent [west, east, south, north] of the grid.",
                    dimension="length",
                    default=["-5 km", "5 km", "-5 km", "5 km"],
                    length=4,
                ),
                "cells": Key(
                    "integers",
                    "Number of cells [along x, along y].",
                    default=[101, 101],
                    length=2,
                    bound="positive",
                ),
                "dimensions": Key(
                    "integer",
                    "2 for a depth-averaged flow, 1 for a channel along x.",
                    default=2,
                ),
            },
        ),
    },
    required=True,
    choices=(Choice((("files",), ("analytic",))),),
)
