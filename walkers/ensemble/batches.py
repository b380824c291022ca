"""Batches of members, their reduction in batch order, and percentile statistics with bootstrap
confidence intervals.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np
import xarray as xr

from walkers.ensemble.draws import SourceDraw
from walkers.errors import InputError
from walkers.scenario.specs import Scenario

if TYPE_CHECKING:
    from walkers.ensemble.members import _BatchResult
    from walkers.ensemble.water_column import ColumnSums

#: Percentiles reported for the receptor distributions (percent).
PERCENTILES = (5.0, 50.0, 95.0)
#: Bootstrap resamples and confidence level of the percentile intervals.
BOOTSTRAP_RESAMPLES = 2000
CONFIDENCE = 0.95
#: How an exceedance probability over the members is read (the ``comment`` of its variable).
PROBABILITY_COMMENT = "fraction of members; binomial standard error sqrt(P (1 - P) / N)"
#: Fixed key mixed with the run seed for the bootstrap Generator.
_BOOTSTRAP_KEY = 0x626F6F74
#: Batches per half of the ensemble aimed at, at most (the work is spread over workers batch by
#: batch); more only when batches would otherwise exceed the bounds below.
_BATCHES_PER_HALF = 16
#: Particles a batch aims at: its members are moved together, so a batch of several members
#: shares the per-interval set-up (flow window, kernel inputs, the kernel call itself) among them.
BATCH_PARTICLES = 10_000
#: Most particles in a batch (about 60 MB of particle state).
MAX_BATCH_PARTICLES = 1_000_000
#: Most members x output cells in a batch: each member's running maximum over time (8 bytes a
#: cell) is held while the batch runs (128 MB).
MAX_BATCH_CELLS = 16_000_000


# --------------------------------------------------------------------------------------------
# Batching, ordered reduction, statistics
# --------------------------------------------------------------------------------------------


def batches(members: int, particles: int, cells: int = 1) -> list[tuple[int, int]]:
    """The (lo, hi) member ranges of an ensemble of ``members`` members of ``particles``
    particles each, on an output grid of ``cells`` cells: the first half [0, N//2) and the rest,
    each cut into nearly equal batches of about :data:`BATCH_PARTICLES` particles, at most
    :data:`_BATCHES_PER_HALF` per half unless a batch would then exceed
    :data:`MAX_BATCH_PARTICLES` particles or :data:`MAX_BATCH_CELLS` members x cells (so the
    memory of a batch does not grow with the members). A function of the scenario only, so every
    way of running the ensemble cuts it the same way (and sums in the same order)."""
    half = members // 2
    out = []
    for a, b in ((0, half), (half, members)):
        n = b - a
        if n == 0:
            continue
        aimed = min(_BATCHES_PER_HALF, math.ceil(n * particles / BATCH_PARTICLES))
        bounded = max(
            math.ceil(n * particles / MAX_BATCH_PARTICLES), math.ceil(n * cells / MAX_BATCH_CELLS)
        )
        count = min(n, max(1, aimed, bounded))
        edges = a + (n * np.arange(count + 1)) // count
        out += [(int(lo), int(hi)) for lo, hi in zip(edges[:-1], edges[1:], strict=True)]
    return out


class _OrderedReducer:
    """Adds batch results in batch order, holding back those that arrive early."""

    def __init__(self, ranges: list[tuple[int, int]], members: int):
        self.ranges = ranges
        self.members = members
        self.half = members // 2
        self.next = 0
        self.waiting: dict[int, _BatchResult] = {}
        self.exceed: np.ndarray | None = None
        self.window: np.ndarray | None = None
        self.conc_sum: np.ndarray | None = None
        self.exceed_half: np.ndarray | None = None
        self.draws: list[SourceDraw] = []
        self.peak: list[np.ndarray] = []
        self.arrival: list[np.ndarray] = []
        self.above: list[np.ndarray] = []
        self.particle_steps = 0
        self.frame: xr.Dataset | None = None
        self.column: ColumnSums | None = None

    @property
    def done(self) -> int:
        return self.ranges[self.next - 1][1] if self.next else 0

    def add(self, index: int, result: _BatchResult) -> None:
        self.waiting[index] = result
        while self.next in self.waiting:
            self._take(self.waiting.pop(self.next))
            self.next += 1

    def _take(self, r: _BatchResult) -> None:
        if self.exceed is None:
            self.exceed, self.window = r.exceed.copy(), r.window.copy()
            self.conc_sum = r.conc_sum.copy()
            self.frame = r.frame
        else:
            assert self.window is not None and self.conc_sum is not None
            self.exceed += r.exceed
            self.window += r.window
            self.conc_sum += r.conc_sum
        if r.column is not None:
            if self.column is None:
                self.column = r.column.copy()
            else:
                self.column.add(r.column)
        if r.hi == self.half:
            self.exceed_half = self.exceed.copy()
        self.draws += r.draws
        self.peak.append(r.peak)
        self.arrival.append(r.arrival)
        self.above.append(r.above)
        self.particle_steps += r.particle_steps


def count_exceedance(counts: np.ndarray, field: np.ndarray, thresholds: np.ndarray) -> None:
    """Add one member's ``field`` to the exceedance counts: counts[i] += field > thresholds[i]
    (``counts`` of shape (thresholds, *field.shape)); in place."""
    for i, level in enumerate(thresholds):
        counts[i] += field > level


def _order_statistic(sorted_values: np.ndarray, q: float) -> np.ndarray:
    """The q-quantile (0 < q <= 1) of values sorted along the last axis: the smallest value whose
    empirical CDF reaches q (Hyndman & Fan 1996, definition 1 — from memory)."""
    n = sorted_values.shape[-1]
    return sorted_values[..., max(math.ceil(q * n) - 1, 0)]


def percentiles_with_ci(
    values: np.ndarray, rng: np.random.Generator, resamples: int = BOOTSTRAP_RESAMPLES
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Percentiles :data:`PERCENTILES` of ``values`` along axis 0 (members), with the lower and
    upper bounds of their percentile-bootstrap :data:`CONFIDENCE` interval.

    values : (members, ...) array; +inf allowed (e.g. never arrived). Returns three arrays of shape
    (..., len(PERCENTILES)); infinite results become NaN.
    """
    n = values.shape[0]
    moved = np.moveaxis(values, 0, -1)  # (..., n)
    est = np.stack([_order_statistic(np.sort(moved, axis=-1), p / 100) for p in PERCENTILES], -1)
    picks = rng.integers(0, n, size=(resamples, n))
    boot = np.sort(moved[..., picks], axis=-1)  # (..., B, n)
    reps = np.stack([_order_statistic(boot, p / 100) for p in PERCENTILES], -1)  # (..., B, P)
    reps = np.sort(np.moveaxis(reps, -2, -1), axis=-1)  # (..., P, B)
    alpha = (1.0 - CONFIDENCE) / 2.0
    lower = _order_statistic(reps, alpha)
    upper = _order_statistic(reps, 1.0 - alpha)

    def finite(a: np.ndarray) -> np.ndarray:
        return np.where(np.isfinite(a), a, np.nan)

    return finite(est), finite(lower), finite(upper)


def add_percentiles(data, stem, dims, est, lo, hi, units, what, comment) -> None:
    """Put the percentiles ``est`` of a quantity and the bounds ``lo``, ``hi`` of their bootstrap
    intervals (as :func:`percentiles_with_ci` gives them) into ``data`` as the variables
    ``<stem>_percentile``, ``<stem>_ci_lower`` and ``<stem>_ci_upper`` of dims ``(*dims,
    "percentile")`` with ``units``; ``what`` names the quantity in their long names."""
    extra = {"comment": comment} if comment else {}
    level = f"{CONFIDENCE:.0%}"
    for suffix, values, label in (
        ("percentile", est, f"{what}: percentile over the members"),
        (
            "ci_lower",
            lo,
            f"{what}: lower bound of the bootstrap {level} interval of the percentile",
        ),
        (
            "ci_upper",
            hi,
            f"{what}: upper bound of the bootstrap {level} interval of the percentile",
        ),
    ):
        data[f"{stem}_{suffix}"] = (
            (*dims, "percentile"),
            values,
            {"units": units, "long_name": label, **extra},
        )


def ensemble_thresholds(scenario: Scenario, extra: Sequence[float] = ()) -> tuple[float, ...]:
    """The thresholds (kg m-3) the probabilities are given for: every receptor threshold of the
    scenario and any given in ``extra``, sorted, each once."""
    values = [t for r in scenario.receptors for t in r.thresholds] + [float(t) for t in extra]
    for t in values:
        if not (math.isfinite(t) and t > 0):
            raise InputError(f"ensemble threshold {t!r} kg m-3: must be a finite number > 0")
    return tuple(sorted(set(values)))
