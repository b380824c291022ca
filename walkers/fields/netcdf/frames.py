"""Frames of a flow read from disk on demand: SI arrays ordered (time, y, x), depth from levels,
wet cells from the mask or the velocities.
"""

from __future__ import annotations

from collections import OrderedDict
from typing import Any

import netCDF4
import numpy as np

from walkers.errors import InputError, RunFailure
from walkers.fields.netcdf.column import common_levels, on_levels
from walkers.fields.netcdf.discovery import _Layout
from walkers.fields.netcdf.layers import (
    VerticalCoordinate,
    layer_faces,
    layer_points,
    layer_weights,
    thickness_mean,
)
from walkers.fields.netcdf.roles import _LAND_WORDS, _WATER_WORDS
from walkers.fields.times import _seconds_iso
from walkers.scenario.specs import LayerSelection

FRAME_CACHE_BYTES = 4 * 2**20  # HDF5 chunk cache of each variable of an open flow file


# ----------------------------------------------------------------------------------------------
# Lazy reading of frames
# ----------------------------------------------------------------------------------------------


def _bracket(src: np.ndarray, tgt: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Indices (lo, hi) of the points of ``src`` (ascending) around each value of ``tgt``.

    A target on a source point (to 1e-6 of the spacing) gets lo == hi; targets beyond the ends
    get the end point.
    """
    n = src.size
    if n == 1:
        zero = np.zeros(tgt.size, dtype=np.intp)
        return zero, zero
    tol = 1e-6 * float(np.min(np.diff(src)))
    j = np.searchsorted(src, tgt)
    jc = np.clip(j, 0, n - 1)
    jm = np.clip(j - 1, 0, n - 1)
    on_hi = np.abs(src[jc] - tgt) <= tol
    on_lo = np.abs(src[jm] - tgt) <= tol
    lo = np.where(on_hi, jc, jm)
    hi = np.where(on_lo & ~on_hi, jm, jc)
    return lo, hi


def _corners(a: np.ndarray, ly, hy, lx, hx) -> list[np.ndarray]:
    return [a[:, ly][:, :, lx], a[:, ly][:, :, hx], a[:, hy][:, :, lx], a[:, hy][:, :, hx]]


def _mask_to_water(values: np.ndarray, attrs: dict[str, Any]) -> np.ndarray:
    """Water (True) / land from a mask variable, by its standard_name or flag meanings (CF 3.5)."""
    finite = np.isfinite(values)
    if attrs.get("standard_name") == "land_binary_mask":
        return finite & (values < 0.5)
    if "flag_values" in attrs and "flag_meanings" in attrs:
        flags = np.atleast_1d(np.asarray(attrs["flag_values"], dtype=np.float64))
        meanings = str(attrs["flag_meanings"]).lower().split()
        water = [
            f for f, m in zip(flags, meanings, strict=False) if any(w in m for w in _WATER_WORDS)
        ]
        if water:
            return finite & np.isin(values, water)
        land = [
            f for f, m in zip(flags, meanings, strict=False) if any(w in m for w in _LAND_WORDS)
        ]
        if land:
            return finite & ~np.isin(values, land)
    return finite & (values > 0.5)


def _wet_mean(eta: np.ndarray, bed: np.ndarray, brackets) -> tuple[np.ndarray, np.ndarray]:
    """Surface height and bed depth at velocity points: the mean over the cells around each point
    whose bed and surface are known (NaN where none is)."""
    if all(np.array_equal(lo, hi) for lo, hi in (brackets[:2], brackets[2:])):
        return _corners(eta, *brackets)[0], _corners(bed, *brackets)[0]  # collocated
    known = np.isfinite(eta) & np.isfinite(bed)
    e = np.where(known, eta, 0.0)
    b = np.where(known, bed, 0.0)
    count = sum(_corners(known.astype(np.float64), *brackets))
    with np.errstate(divide="ignore", invalid="ignore"):
        eta_v = np.where(count > 0, sum(_corners(e, *brackets)) / count, np.nan)
        bed_v = np.where(count > 0, sum(_corners(b, *brackets)) / count, np.nan)
    return eta_v, bed_v


def depth_from_levels(level: np.ndarray, bed: np.ndarray, attrs: dict[str, Any]) -> np.ndarray:
    """Water depth (m) from the water level and a bed level given positive down (a depth below
    the datum: positive = 'down' or a sea_floor_depth standard name) or up (a height); ``attrs``
    are the bed variable's attributes."""
    positive = str(attrs.get("positive", "")).lower()
    std = str(attrs.get("standard_name", ""))
    down = positive == "down" or (positive != "up" and std.startswith("sea_floor_depth"))
    return level + bed if down else level - bed


def _readable(variable: netCDF4.Variable, index: Any) -> bool:
    """True if ``variable[index]`` can be read."""
    try:
        variable[index]
    except (RuntimeError, OSError):
        return False
    return True


#: blocks of frames a flow source always keeps: the window being stepped through and the one
#: before (the frames of a window serve the depth at its output time without a read)
BLOCKS_KEPT = 2

#: bytes of derived frames a flow source keeps beyond its newest BLOCKS_KEPT blocks (the oldest
#: go first): a flow that fits is read from its files once, although a run goes through it three
#: times (the dispersion estimate, the ever-wet cells, the step)
KEPT_BYTES = 32 * 2**20


class _FlowSource:
    """Reads frames of every role from one or more files and derives depth and wet per frame.

    Static (time-less) variables are read once when the source is built; time-varying ones are
    read a block of frames at a time, and the last BLOCKS_KEPT blocks are kept, with older ones
    up to KEPT_BYTES, so that u, v, depth and wet of one window cost one read, a frame of a
    window just read (the depth at an output time) costs none, and frames kept from an earlier
    pass over the flow are not read again. ``frames_read`` counts frames read from disk (for
    tests and logs).
    """

    def __init__(
        self,
        paths: list[str],
        layouts: dict[str, _Layout],
        frame_file: np.ndarray,
        frame_local: np.ndarray,
        times: np.ndarray,
        time_units: str,
        calendar: str,
        cell: tuple[np.ndarray, np.ndarray],
        ndim: int,
        min_depth: float,
        constant_depth: float | None,
        vertical: VerticalCoordinate | None = None,
        selection: LayerSelection | None = None,
        column: dict[str, tuple[_Layout, VerticalCoordinate]] | None = None,
    ) -> None:
        self.paths = paths
        self.vertical = vertical
        #: three-dimensional runs: the layered velocities are kept (with w and K_z, roles "w"
        #: and "kz", and their vertical coordinates) besides their depth mean
        self.keep_column = column is not None and vertical is not None
        self.column_vertical = {r: vc for r, (_, vc) in (column or {}).items()}
        if self.keep_column:
            layouts = {**layouts, **{r: lay for r, (lay, _) in (column or {}).items()}}
        #: per role, the common levels of its points (None: equal layers), fixed on first read
        self.column_levels: dict[str, Any] = {}
        self.selection = selection or LayerSelection()
        self.layouts = layouts
        self.frame_file = frame_file
        self.frame_local = frame_local
        self.times = times
        self.time_units = time_units
        self.calendar = calendar
        self.cell_x, self.cell_y = cell
        self.ndim = ndim
        self.min_depth = min_depth
        self.constant_depth = constant_depth
        self.frames_read = 0
        #: turns velocities into index-space components on a curvilinear grid (else None)
        self.index_velocity: Any = None
        #: the last blocks derived, newest last: (i0, i1) -> variables (``block``)
        self._blocks: OrderedDict[tuple[int, int], dict[str, np.ndarray]] = OrderedDict()
        self._handles: dict[int, netCDF4.Dataset] = {}
        self.static: dict[str, np.ndarray] = {}
        path = paths[int(frame_file[0]) if frame_file.size else 0]
        with netCDF4.Dataset(path) as ds:
            for role, lay in layouts.items():
                if lay.time_axis is None:
                    try:
                        self.static[role] = lay.arrange(ds.variables[lay.name][lay.index()])
                    except (RuntimeError, OSError) as exc:
                        raise InputError(
                            f"flow file {path!r}: variable {lay.name!r} cannot be read ({exc}); "
                            "the file may be damaged or incomplete: copy or write it again"
                        ) from exc
        self.varying = [r for r, lay in layouts.items() if lay.time_axis is not None]
        depth_roles = {"depth", "water_level", "bed_level", "area"} & set(layouts)
        self.wet_from_file = bool(depth_roles) or "mask" in layouts
        wet_inputs = (depth_roles | {"mask"}) if self.wet_from_file else {"u", "v"}
        self.wet_steady = not (wet_inputs & set(self.varying))
        self.depth_steady = not (depth_roles & set(self.varying))
        # layer faces move with the surface: a layered velocity varies when the depth does
        layered_steady = vertical is None or self.depth_steady
        self.velocity_steady = layered_steady and not ({"u", "v"} & set(self.varying))
        self.nt = max(1, frame_file.size)

    def time_iso(self, k: int) -> str:
        """ISO 8601 time of frame k (for messages)."""
        return _seconds_iso(self.times[k], self.time_units, self.calendar)

    def __getstate__(self) -> dict[str, Any]:
        # sent to other processes without the cached block; files are reopened there
        state = dict(self.__dict__)
        state["_blocks"] = OrderedDict()
        state["_handles"] = {}
        return state

    def _dataset(self, f: int) -> netCDF4.Dataset:
        """File f, kept open between reads (its chunk cache then serves neighbouring frames)."""
        if f not in self._handles:
            ds = netCDF4.Dataset(self.paths[f])
            # a small chunk cache per variable: HDF5's default (64 MiB each) fills up over a long
            # run and makes memory grow with run length
            for var in ds.variables.values():
                var.set_var_chunk_cache(size=FRAME_CACHE_BYTES)
            self._handles[f] = ds
        return self._handles[f]

    def close(self) -> None:
        """Close the files kept open for reading frames."""
        for ds in self._handles.values():
            ds.close()
        self._handles.clear()

    def _read_raw(self, i0: int, i1: int) -> dict[str, np.ndarray]:
        """Time-varying roles for frames i0..i1 (inclusive), arranged, straight from the files."""
        out: dict[str, list[np.ndarray]] = {r: [] for r in self.varying}
        k = i0
        while k <= i1:
            f = int(self.frame_file[k])
            k_end = k
            while (
                k_end + 1 <= i1
                and self.frame_file[k_end + 1] == f
                and self.frame_local[k_end + 1] == self.frame_local[k_end] + 1
            ):
                k_end += 1
            a, b = int(self.frame_local[k]), int(self.frame_local[k_end]) + 1
            for role in self.varying:
                out[role].append(self._read_frames(f, self.layouts[role], k, a, b))
            k = k_end + 1
        self.frames_read += i1 - i0 + 1
        return {r: np.concatenate(parts, axis=0) for r, parts in out.items()}

    def _read_frames(self, f: int, lay: _Layout, k: int, a: int, b: int) -> np.ndarray:
        """Frames a..b-1 of file f (frames k.. of the flow) of one variable, arranged.

        Raises RunFailure naming the file, the variable and the time of the first frame that
        cannot be read (a damaged or incomplete file)."""
        variable = self._dataset(f).variables[lay.name]
        try:
            return lay.arrange(variable[lay.index(a, b)])
        except (RuntimeError, OSError) as exc:
            bad = next((j for j in range(a, b) if not _readable(variable, lay.index(j, j + 1))), a)
            raise RunFailure(
                f"flow file {self.paths[f]!r}: variable {lay.name!r} cannot be read in the frame "
                f"at {self.time_iso(k + bad - a)} ({exc}); the file may be damaged or incomplete. "
                "Copy or write it again; a run saved by --checkpoint-every can then go on with "
                "--resume"
            ) from exc

    def _get(self, raw: dict[str, np.ndarray], role: str) -> np.ndarray:
        return raw[role] if role in raw else self.static[role]

    def block(self, i0: int, i1: int) -> dict[str, np.ndarray]:
        """u, v, depth, wet for frames i0..i1, derived and checked (the last BLOCKS_KEPT blocks
        are kept, and older ones up to KEPT_BYTES; frames that kept blocks hold are taken from
        them; a window whose first frames are kept reads only the rest)."""
        kept = self._kept(i0, i1)
        if kept is not None:
            return kept
        first_missing = i0
        while (
            first_missing < i1
            and not self.keep_column
            and self._kept_frame(first_missing) is not None
        ):
            first_missing += 1
        if first_missing > i0:
            self.block(first_missing, i1)
            kept = self._kept(i0, i1)
            if kept is not None:
                return kept
        raw = self._read_raw(i0, i1) if self.varying else {}
        u = self._get(raw, "u")
        v = self._get(raw, "v") if self.ndim == 2 else np.zeros_like(u[:1])
        shape = (1, self.cell_y.size, self.cell_x.size)
        if "depth" in self.layouts:
            depth = self._get(raw, "depth")
        elif "area" in self.layouts:
            depth = self._get(raw, "area")
        elif "water_level" in self.layouts:
            depth = self._depth_from_levels(raw)
        else:
            depth = np.full(shape, float(self.constant_depth or 0.0))
        column = self._column(raw, u, v, depth) if self.keep_column else {}
        if self.vertical is not None:
            u, v = self._reduce_layers(raw, u, v, depth)
        if self.wet_from_file:
            wet = np.isfinite(depth) & (depth >= self.min_depth if self.ndim == 2 else depth > 0)
            if "mask" in self.layouts:
                wet = wet & _mask_to_water(self._get(raw, "mask"), self.layouts["mask"].attrs)
            self._check_velocity_in_water(u, "u", wet, i0)
            if self.ndim == 2:
                self._check_velocity_in_water(v, "v", wet, i0)
        else:
            wet = self._wet_from_velocity(u, v)
        u, v = np.nan_to_num(u, nan=0.0), np.nan_to_num(v, nan=0.0)
        if self.index_velocity is not None:
            u, v = self.index_velocity(u, v)
        if self.index_velocity is not None and column:
            column["column_u"], column["column_v"] = self.index_velocity(
                column["column_u"], column["column_v"]
            )
        result = {
            "u": u,
            "v": v,
            "depth": np.where(np.isfinite(depth), depth, 0.0),
            "wet": wet.astype(np.float64),
            **column,
        }
        self._blocks[(i0, i1)] = result
        self._forget_old_blocks()
        return result

    def _forget_old_blocks(self) -> None:
        """Drop the oldest blocks beyond the newest BLOCKS_KEPT while all take more than
        KEPT_BYTES."""
        size = sum(a.nbytes for block in self._blocks.values() for a in block.values())
        while len(self._blocks) > BLOCKS_KEPT and size > KEPT_BYTES:
            _, old = self._blocks.popitem(last=False)
            size -= sum(a.nbytes for a in old.values())

    def _kept(self, i0: int, i1: int) -> dict[str, np.ndarray] | None:
        """Frames i0..i1 from a kept block that holds them (the newest first), else put together
        frame by frame from the kept blocks, else None. Every variable is derived frame by frame,
        so a part of a block, or frames of several blocks put together, are what a read would
        give (a steady variable may come with one frame or with one per frame: readers take
        either); the layered columns (levels in the frame axis) are only taken whole."""
        for (a, b), result in reversed(self._blocks.items()):
            if (a, b) == (i0, i1):
                self._blocks.move_to_end((a, b))
                return result
            if a <= i0 and i1 <= b and not self.keep_column:
                n = b - a + 1
                if all(arr.shape[0] in (1, n) for arr in result.values()):
                    return {
                        key: arr if arr.shape[0] == 1 else arr[i0 - a : i1 - a + 1]
                        for key, arr in result.items()
                    }
        if self.keep_column:
            return None
        frames = [self._kept_frame(k) for k in range(i0, i1 + 1)]
        parts = [part for part in frames if part is not None]
        if len(parts) < len(frames):
            return None
        return {
            key: np.concatenate([np.broadcast_to(p[key], (1, *arr.shape[1:])) for p in parts])
            for key, arr in parts[0].items()
        }

    def _kept_frame(self, k: int) -> dict[str, np.ndarray] | None:
        """Frame k from the newest kept block that holds it (a steady variable's one frame as
        it is; the block becomes the newest), or None."""
        for (a, b), result in reversed(self._blocks.items()):
            n = b - a + 1
            if a <= k <= b and all(arr.shape[0] in (1, n) for arr in result.values()):
                self._blocks.move_to_end((a, b))
                return {
                    key: arr if arr.shape[0] == 1 else arr[k - a : k - a + 1]
                    for key, arr in result.items()
                }
        return None

    def latest(self) -> dict[str, np.ndarray]:
        """The newest block kept, or frame 0 read (a steady variable's one frame)."""
        if self._blocks:
            return next(reversed(self._blocks.values()))
        return self.block(0, 0)

    def _surface_and_bed(
        self, raw: dict[str, np.ndarray], depth: np.ndarray, vc: VerticalCoordinate
    ) -> tuple[np.ndarray, np.ndarray]:
        """Surface height above and bed depth below the datum (m) on the cells, as the vertical
        coordinate vc needs them."""
        if "water_level" in self.layouts:
            eta = self._get(raw, "water_level")
        else:
            eta = np.zeros_like(depth)  # the datum closes the top layer
        if vc.parametric:
            bed = self._get(raw, "bed_level")  # depth below the datum (CF-1.8 Appendix D)
        else:
            bed = np.where(depth > 0.0, depth - eta, np.nan)
        return eta, bed

    def _column(
        self, raw: dict[str, np.ndarray], u: np.ndarray, v: np.ndarray, depth: np.ndarray
    ) -> dict[str, np.ndarray]:
        """The layered u, v (at their points, the surface and bed of the cells around them as in
        :meth:`_reduce_layers`), w and K_z (on the cells) as profiles on fractions of the depth
        (:func:`.column.on_levels`): ``column_<role>`` (frames, levels, y, x) and
        ``column_<role>_levels``."""
        out: dict[str, np.ndarray] = {}
        fracs: dict[str, np.ndarray] = {}
        found: dict[str, np.ndarray] = {}
        for role, values in (("u", u), ("v", v), ("w", None), ("kz", None)):
            vc = self.vertical if role in ("u", "v") else self.column_vertical.get(role)
            if vc is None or role not in self.layouts:
                continue
            eta, bed = self._surface_and_bed(raw, depth, vc)
            if values is None:
                values = self._get(raw, role)
            else:
                eta, bed = _wet_mean(eta, bed, self._velocity_brackets(role))
            with np.errstate(invalid="ignore"):
                fracs[role] = layer_points(vc, eta, bed)
            found[role] = values
        if not self.column_levels:
            self.column_levels = {r: common_levels(f) for r, f in fracs.items()}
            cu, cv = self.column_levels.get("u"), self.column_levels.get("v", None)
            if "v" in fracs and (cu is None or cv is None or not np.array_equal(cu[0], cv[0])):
                # u and v share one set of levels in the step
                self.column_levels["u"] = self.column_levels["v"] = None
        for role, values in found.items():
            levels, out[f"column_{role}"] = on_levels(fracs[role], values, self.column_levels[role])
            out[f"column_{role}_levels"] = levels
        return out

    def _reduce_layers(
        self, raw: dict[str, np.ndarray], u: np.ndarray, v: np.ndarray, depth: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """Layered u, v -> the thickness-weighted mean over the selected part of each column.

        Faces are computed at each velocity point from the surface height and bed depth of the
        cells around it (their mean over the wet ones, on staggered grids).
        """
        vc = self.vertical
        assert vc is not None
        eta, bed = self._surface_and_bed(raw, depth, vc)
        out = []
        for role, vel in (("u", u), ("v", v)):
            if role not in self.layouts:
                out.append(vel)
                continue
            corners = self._velocity_brackets(role)
            eta_v, bed_v = _wet_mean(eta, bed, corners)
            lower, upper = layer_faces(vc, eta_v, bed_v)
            weights = layer_weights(vc, lower, upper, eta_v, self.selection)
            mean = thickness_mean(vel, weights)
            self._check_layer_present(role, vel, mean, eta_v + bed_v)
            out.append(mean)
        return out[0], out[1]

    def _check_layer_present(
        self, role: str, layered: np.ndarray, mean: np.ndarray, column: np.ndarray
    ) -> None:
        """InputError where the selected layer has no value in a column with water (``column``:
        its total depth, m, at the velocity points)."""
        if self.selection.mode != "layer":
            return
        with np.errstate(invalid="ignore"):
            wet = column >= self.min_depth
        missing = np.isnan(mean) & np.any(np.isfinite(layered), axis=1) & wet
        if np.any(missing):
            _, _, _, xv, yv = self._first_point(role, missing)
            raise InputError(
                f"flow.layers.layer = {self.selection.layer}: variable "
                f"{self.layouts[role].name!r} of {', '.join(repr(p) for p in self.paths)} has no "
                f"value in that layer at point x={xv:.10g}, y={yv:.10g} (below the bed there), "
                "where the column has water; choose a layer present in every wet column, or a "
                "depth band"
            )

    def _first_point(self, role: str, mask: np.ndarray) -> tuple[int, int, int, float, float]:
        """Frame, row, column and coordinates of the first True of ``mask`` (frames, y, x) on the
        points of ``role``."""
        k, j, i = (int(n[0]) for n in np.nonzero(mask))
        lay = self.layouts[role]
        return k, j, i, float(lay.x.values[i]), 0.0 if lay.y is None else float(lay.y.values[j])

    def _depth_from_levels(self, raw: dict[str, np.ndarray]) -> np.ndarray:
        level = self._get(raw, "water_level")
        bed = self._get(raw, "bed_level")
        return depth_from_levels(level, bed, self.layouts["bed_level"].attrs)

    def _velocity_brackets(self, role: str, *, around_cells: bool = False):
        """Bracketing indices: cells around each velocity point, or (``around_cells``) velocity
        points around each cell centre."""
        lay = self.layouts[role]
        vy = np.array([0.0]) if lay.y is None else lay.y.values
        if around_cells:
            ly, hy = _bracket(vy, self.cell_y)
            lx, hx = _bracket(lay.x.values, self.cell_x)
        else:
            ly, hy = _bracket(self.cell_y, vy)
            lx, hx = _bracket(self.cell_x, lay.x.values)
        return ly, hy, lx, hx

    def _check_velocity_in_water(self, vel: np.ndarray, role: str, wet: np.ndarray, i0: int):
        """NaN velocity where all cells around the velocity point are wet: a defect of the file."""
        if np.all(np.isfinite(vel)):
            return
        inside = np.logical_and.reduce(_corners(wet, *self._velocity_brackets(role)))
        bad = ~np.isfinite(vel) & inside
        if np.any(bad):
            k, j, i, xv, yv = self._first_point(role, bad)
            lay = self.layouts[role]
            frame = min(i0 + k, self.nt - 1)
            raise InputError(
                f"flow file(s) {', '.join(repr(p) for p in self.paths)}: variable {lay.name!r} "
                f"({role}) is missing (fill value or NaN) at frame {self.time_iso(frame)}, "
                f"point x={xv:.10g}, y={yv:.10g} (row {j}, column {i} after sorting axes "
                "ascending), where the depth/mask says there is water. Fix the file, or mark "
                "the cell as land in the mask or with a depth below the minimum depth"
            )

    def _wet_from_velocity(self, u: np.ndarray, v: np.ndarray) -> np.ndarray:
        fu = _corners(np.isfinite(u), *self._velocity_brackets("u", around_cells=True))
        if self.ndim == 1:
            return np.logical_or.reduce(fu)
        fv = _corners(np.isfinite(v), *self._velocity_brackets("v", around_cells=True))
        lu, lv = self.layouts["u"], self.layouts["v"]
        assert lu.y is not None and lv.y is not None
        collocated = all(
            a.size == b.size and np.allclose(a, b)
            for a, b in (
                (lu.x.values, self.cell_x),
                (lu.y.values, self.cell_y),
                (lv.x.values, self.cell_x),
                (lv.y.values, self.cell_y),
            )
        )
        if collocated:
            return np.logical_and.reduce(fu) & np.logical_and.reduce(fv)
        # staggered: a cell is water when any of its faces carries a velocity
        return np.logical_or.reduce(fu) | np.logical_or.reduce(fv)


class _LazyFrames:
    """One derived variable of a :class:`_FlowSource`, sliced along time like an array."""

    def __init__(self, source: _FlowSource, key: str, shape: tuple[int, ...]) -> None:
        self.source = source
        self.key = key
        self.shape = shape
        self.dtype = np.dtype(np.float64)
        self.ndim = 3

    @property
    def frames_read(self) -> int:
        """Frames read from disk so far by the source behind this variable."""
        return self.source.frames_read

    def __getitem__(self, item: Any) -> np.ndarray:
        if isinstance(item, tuple):
            head, rest = item[0], item[1:]
        else:
            head, rest = item, ()
        if self.shape[0] == 1:
            # steady: the same frame whatever the time, from any block already derived
            frames = self.source.latest()[self.key]
            if isinstance(head, (int, np.integer)):
                return np.asarray(frames[(0, *rest)])
            return np.asarray(frames[:1][(head, *rest)])
        if isinstance(head, (int, np.integer)):
            k = int(head) % self.shape[0]
            return self.source.block(k, k)[self.key][(0, *rest)]
        start, stop, step = head.indices(self.shape[0])
        if stop <= start:
            return np.empty((0, *self.shape[1:]))
        data = self.source.block(start, stop - 1)[self.key]
        if data.shape[0] == 1:
            data = np.broadcast_to(data, (stop - start, *data.shape[1:]))
        return np.asarray(data[(slice(None, None, step), *rest)])

    def __array__(self, dtype: Any = None, copy: Any = None) -> np.ndarray:
        out = self[:]
        return out if dtype is None else out.astype(dtype)
