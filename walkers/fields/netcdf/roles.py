"""What each variable role of a flow file is called and measured in: CF standard names, name
hints, accepted units and their SI factors, coordinate and flag words.
"""

from __future__ import annotations

STANDARD_NAMES: dict[str, tuple[str, ...]] = {
    "u": (
        "eastward_sea_water_velocity",
        "sea_water_x_velocity",
        "x_sea_water_velocity",
        "barotropic_eastward_sea_water_velocity",
        "barotropic_sea_water_x_velocity",
    ),
    "v": (
        "northward_sea_water_velocity",
        "sea_water_y_velocity",
        "y_sea_water_velocity",
        "barotropic_northward_sea_water_velocity",
        "barotropic_sea_water_y_velocity",
    ),
    "depth": ("sea_floor_depth_below_sea_surface", "sea_floor_depth"),
    "water_level": (
        "sea_surface_height",
        "sea_surface_height_above_geoid",
        "sea_surface_height_above_mean_sea_level",
        "sea_surface_height_above_reference_ellipsoid",
        "sea_surface_height_above_geopotential_datum",
        "water_surface_height_above_reference_datum",
    ),
    "bed_level": (
        "sea_floor_depth_below_geoid",
        "sea_floor_depth_below_mean_sea_level",
        "sea_floor_depth_below_reference_ellipsoid",
        "sea_floor_depth_below_geopotential_datum",
    ),
    "mask": ("sea_binary_mask", "land_binary_mask"),
    "area": (),
}

_ROLE_WORDS = {
    "u": "eastward (x) velocity",
    "v": "northward (y) velocity",
    "depth": "water depth",
    "water_level": "water level",
    "bed_level": "bed level",
    "mask": "land/water mask",
    "area": "cross-section area",
}
_NAME_HINTS = {
    "u": (
        {"u", "ua", "ubar", "uo", "ucur", "u_velocity", "velocity_x", "vel_x"},
        ("eastward", "x velocity", "x-velocity", "x component", "x-component", "velocity in x"),
    ),
    "v": (
        {"v", "va", "vbar", "vo", "vcur", "v_velocity", "velocity_y", "vel_y"},
        ("northward", "y velocity", "y-velocity", "y component", "y-component", "velocity in y"),
    ),
    "depth": (
        {"depth", "water_depth", "total_depth", "h"},
        ("water depth", "depth of water", "total depth", "total water depth"),
    ),
    "area": (set(), ("cross-section", "cross section", "cross_section")),
    "water_level": (
        {"zeta", "eta", "ssh", "water_level", "waterlevel", "wl", "elev"},
        ("water level", "surface elevation", "water surface"),
    ),
    "bed_level": (
        {"bed", "bed_level", "bedlevel", "zb", "bathymetry", "bottom"},
        ("bed level", "bed elevation", "bottom elevation", "bathymetry"),
    ),
}
_LENGTH_UNITS = {
    "m": 1.0,
    "meter": 1.0,
    "meters": 1.0,
    "metre": 1.0,
    "metres": 1.0,
    "cm": 0.01,
    "km": 1000.0,
}
_VELOCITY_UNITS = {
    "m s-1": 1.0,
    "m/s": 1.0,
    "m s^-1": 1.0,
    "m.s-1": 1.0,
    "m s**-1": 1.0,
    "meter second-1": 1.0,
    "metre second-1": 1.0,
    "meters per second": 1.0,
    "metres per second": 1.0,
    "cm s-1": 0.01,
    "cm/s": 0.01,
    "cm s^-1": 0.01,
    "cm.s-1": 0.01,
    "cm s**-1": 0.01,
    "centimeters per second": 0.01,
}
_AREA_UNITS = {"m2": 1.0, "m^2": 1.0, "m**2": 1.0, "square meters": 1.0, "square metres": 1.0}
_ROLE_UNITS = {
    "u": _VELOCITY_UNITS,
    "v": _VELOCITY_UNITS,
    "depth": _LENGTH_UNITS,
    "water_level": _LENGTH_UNITS,
    "bed_level": _LENGTH_UNITS,
    "area": _AREA_UNITS,
}
_ROLE_SI = {
    "u": "m s-1",
    "v": "m s-1",
    "depth": "m",
    "water_level": "m",
    "bed_level": "m",
    "area": "m2",
}
_ROLE_DIMENSION = {
    "u": "velocity",
    "v": "velocity",
    "depth": "length",
    "water_level": "length",
    "bed_level": "length",
    "area": "area",
}
_X_NAMES = {"projection_x_coordinate", "longitude", "grid_longitude"}
_Y_NAMES = {"projection_y_coordinate", "latitude", "grid_latitude"}
_DEG_EAST = {"degrees_east", "degree_east", "degrees_e", "degree_e", "degreese", "degreee"}
_DEG_NORTH = {"degrees_north", "degree_north", "degrees_n", "degree_n", "degreesn", "degreen"}
_WATER_WORDS = ("water", "sea", "wet", "ocean", "river", "lake")
_LAND_WORDS = ("land", "dry", "island", "shore")


def _scenario_hint(role: str) -> str:
    return f'name it explicitly in the scenario: [flow.variables] {role} = "NAME"'


def _norm_units(text: str) -> str:
    return " ".join(str(text).strip().lower().split())
