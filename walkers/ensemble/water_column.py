"""The water-column outputs of an ensemble of three-dimensional runs: per member and output time,
the concentration in each depth band and the deposit on the bed, reduced at once into small sums
(as the depth-averaged concentration is, :mod:`walkers.ensemble.execute`), and assembled into
probabilities.

Each member's bands and deposit are those a single run of it writes (the same reduction,
:func:`walkers.run.accumulate_column.column_fields`, of the same particles). Estimates over N
members:

- band exceedance probability: (members whose concentration in the band exceeds the threshold)
  / N per threshold, output time, band and cell (the thresholds of the depth-averaged
  concentration); binomial standard error sqrt(P (1 - P) / N) (common practice);
- where the bed deposits, deposit exceedance probability: (members whose deposit exceeds the
  deposit threshold, kg m-2) / N, and the ensemble-mean deposit (kg m-2);
- per member, the fraction of its released mass on the bed at each output time (the mass budget's
  "on the bed" over "released"), and the percentiles of that fraction at the last output time
  with bootstrap intervals, as for the receptor numbers (:func:`percentiles_with_ci`).

Nothing of size members x cells is held: a batch keeps counts and sums per cell and time, and
per member only the on-bed fraction over time.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from walkers.ensemble.batches import (
    CONFIDENCE,
    PERCENTILES,
    PROBABILITY_COMMENT,
    add_percentiles,
    count_exceedance,
    percentiles_with_ci,
)
from walkers.outputs.display import plain
from walkers.run.accumulate_column import band_coordinates, column_settings

if TYPE_CHECKING:
    import xarray as xr

    from walkers.ensemble.members import _Prepared
    from walkers.outputs.display import ConcentrationUnit

KG_M2 = "kg m-2"


@dataclass
class ColumnSums:
    """The water-column sums of a batch of ``nb`` members (or, added in batch order, of the
    ensemble so far) over output times of shape ``(nt, ny, nx)``.

    band_exceed : (thresholds, nt, bands, ny, nx) int32, members above each threshold.
    deposit_exceed : (deposit thresholds, nt, ny, nx) int32, or None (no depositing bed).
    deposit_sum : (nt, ny, nx) float64, sum of the members' deposits (kg m-2), or None.
    on_bed : per batch, (members of the batch, nt) the fraction of the released mass on the bed.
    """

    band_exceed: np.ndarray
    deposit_exceed: np.ndarray | None
    deposit_sum: np.ndarray | None
    on_bed: list[np.ndarray] = field(default_factory=list)

    @classmethod
    def zeros(
        cls, prepared: _Prepared, nthr: int, nb: int, shape: tuple[int, int, int]
    ) -> ColumnSums | None:
        """Empty sums of a batch of ``nb`` members; None for a depth-averaged ensemble."""
        vertical = prepared.transport.vertical
        if vertical is None:
            return None
        settings = column_settings(prepared.scenario.column_output, vertical)
        nt, ny, nx = shape
        nband = len(settings.bands)
        deposit_exceed = deposit_sum = None
        if settings.deposit:
            ndep = len(deposit_thresholds(prepared))
            deposit_exceed = np.zeros((ndep, *shape), dtype=np.int32)
            deposit_sum = np.zeros(shape)
        return cls(
            np.zeros((nthr, nt, nband, ny, nx), dtype=np.int32),
            deposit_exceed,
            deposit_sum,
            [np.full((nb, nt), np.nan)],
        )

    def fold_fields(
        self,
        k: int,
        bands: np.ndarray,
        bed: np.ndarray | None,
        thresholds: np.ndarray,
        deposit_thresholds: np.ndarray,
    ) -> None:
        """Add one member's bands (kg m-3) and deposit (kg m-2) at output ``k``."""
        count_exceedance(self.band_exceed[:, k], bands, thresholds)
        if bed is not None and self.deposit_sum is not None and self.deposit_exceed is not None:
            self.deposit_sum[k] += bed
            count_exceedance(self.deposit_exceed[:, k], bed, deposit_thresholds)

    def fold_budget(self, k: int, b: int, budget: dict) -> None:
        """Record member ``b``'s fraction on the bed at output ``k`` (NaN before it releases)."""
        released = float(budget["budget_released"])
        if released > 0:
            self.on_bed[0][b, k] = float(budget["budget_on_bed"]) / released

    def add(self, other: ColumnSums) -> None:
        """Add the sums of the next batch (in batch order)."""
        self.band_exceed += other.band_exceed
        if self.deposit_sum is not None and other.deposit_sum is not None:
            assert self.deposit_exceed is not None and other.deposit_exceed is not None
            self.deposit_sum += other.deposit_sum
            self.deposit_exceed += other.deposit_exceed
        self.on_bed += other.on_bed

    def copy(self) -> ColumnSums:
        return ColumnSums(
            self.band_exceed.copy(),
            None if self.deposit_exceed is None else self.deposit_exceed.copy(),
            None if self.deposit_sum is None else self.deposit_sum.copy(),
            list(self.on_bed),
        )


def deposit_thresholds(prepared: _Prepared) -> np.ndarray:
    """The deposit thresholds (kg m-2) of the scenario's ensemble, as an array."""
    spec = prepared.scenario.ensemble
    return np.asarray(spec.deposit_thresholds if spec is not None else (), dtype=np.float64)


def add_column_variables(
    data: dict[str, Any],
    coords: dict[str, Any],
    sums: ColumnSums,
    prepared: _Prepared,
    members: int,
    nthr: int,
    rng: np.random.Generator,
) -> None:
    """The water-column variables and coordinates of the ensemble result (module docstring)."""
    vertical = prepared.transport.vertical
    assert vertical is not None
    settings = column_settings(prepared.scenario.column_output, vertical)
    one = "1"
    n = members
    coords.update(band_coordinates(settings.bands))
    if nthr:
        data["band_exceedance_probability"] = (
            ("threshold", "time", "band", "y", "x"),
            sums.band_exceed / n,
            {
                "units": one,
                "long_name": "probability that the concentration in the depth band exceeds the "
                "threshold",
                "comment": PROBABILITY_COMMENT,
            },
        )
    if sums.deposit_sum is not None and sums.deposit_exceed is not None:
        data["deposit_mean"] = (
            ("time", "y", "x"),
            sums.deposit_sum / n,
            {"units": KG_M2, "long_name": "ensemble-mean mass on the bed per bed area"},
        )
        levels = deposit_thresholds(prepared)
        if levels.size:
            coords["deposit_threshold"] = (
                "deposit_threshold",
                levels,
                {"units": KG_M2, "long_name": "threshold of the mass on the bed per bed area"},
            )
            data["deposit_exceedance_probability"] = (
                ("deposit_threshold", "time", "y", "x"),
                sums.deposit_exceed / n,
                {
                    "units": one,
                    "long_name": "probability that the mass on the bed per bed area exceeds "
                    "the deposit threshold",
                    "comment": PROBABILITY_COMMENT,
                },
            )
    fraction = np.concatenate(sums.on_bed)
    data["member_on_bed_fraction"] = (
        ("member", "time"),
        fraction,
        {
            "units": one,
            "long_name": "fraction of the member's released mass on the bed (mass budget)",
            "comment": "NaN: nothing released yet",
        },
    )
    est, lo, hi = percentiles_with_ci(fraction[:, -1], rng)
    add_percentiles(
        data,
        "on_bed_fraction",
        (),
        est,
        lo,
        hi,
        one,
        "fraction of the released mass on the bed at the end of the run",
        "",
    )


def column_summary_lines(ds: xr.Dataset, unit: ConcentrationUnit) -> list[str]:
    """Lines of the ensemble summary on the water column: the percentiles of the fraction on
    the bed at the end, and per depth band and threshold (and per deposit threshold) the largest
    probability of exceedance in a cell at the last output time."""
    lines = []
    if "on_bed_fraction_percentile" in ds:
        pct = "/".join(f"{p:g}" for p in PERCENTILES)

        def share(values: np.ndarray) -> str:
            return "/".join("-" if np.isnan(v) else f"{100 * v:.3g} %" for v in values)

        lines.append(
            f"On the bed at the end of the run (share of each member's released mass, percentiles "
            f"{pct}): {share(ds['on_bed_fraction_percentile'].values)} ({CONFIDENCE:.0%} "
            f"bootstrap intervals {share(ds['on_bed_fraction_ci_lower'].values)} to "
            f"{share(ds['on_bed_fraction_ci_upper'].values)})"
        )
    if "band_exceedance_probability" in ds:
        p = ds["band_exceedance_probability"].values[:, -1].max(axis=(-2, -1))
        for j, name in enumerate(ds["band"].values):
            parts = ", ".join(
                f"above {unit.text(float(level))} {p[k, j]:.2f}"
                for k, level in enumerate(ds["threshold"].values)
            )
            lines.append(f"Band {name} at the end, largest probability in a cell: {parts}")
    if "deposit_exceedance_probability" in ds:
        p = ds["deposit_exceedance_probability"].values[:, -1].max(axis=(-2, -1))
        parts = ", ".join(
            f"above {plain(1e3 * float(level))} g/m2 {p[k]:.2f}"
            for k, level in enumerate(ds["deposit_threshold"].values)
        )
        lines.append(f"Deposit on the bed at the end, largest probability in a cell: {parts}")
    return lines
