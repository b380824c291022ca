"""Weighing candidate sources against every detection: likelihood, posterior, release mass.

Hypotheses: candidate i released mass M at a constant rate over one release-time bin k of its
window (the window split into ``time_bins`` equal bins), and nothing else did. The window-mean
concentration it gives at detection j is M · s_ijk, with s_ijk the mean influence of the
candidate's place over the bin (m-3; :mod:`walkers.attribution.influence`).

Error model (stated by the user): a measurement scatters log-normally about the true value with
standard deviation σ of its natural logarithm; the influence itself is known to a relative
sampling error of about 1/√n (n backward particles behind it; a multinomial count, common
practice), so each comparison uses σ_ijk² = σ² + 1/n_ijk. Then, with Φ the standard normal
distribution function (scipy.stats.norm):

- a measured value c:  likelihood ∝ φ((ln c − ln(M s)) / σ_ijk) / σ_ijk;
- "present" (at or above the detection limit L):  1 − Φ((ln L − ln(M s)) / σ_ijk);
- "absent" (a clean sample, below L):  Φ((ln L − ln(M s)) / σ_ijk),

and s = 0 (no backward particle reached the place) explains no measured or present sample and
every absent one. Priors: the candidates equally likely, each one's bins equally likely, and the
mass log-uniform over [mass_min, mass_max]. The posterior probability of a candidate is its
likelihood integrated over mass and summed over bins, normalised over the candidates given: it
says which of *these* candidates fits the samples best, not that any of them is the source
(Keats, Yee & Lien 2007, *Atmos. Environ.* 41, for the Bayesian form of source inference with
adjoint sensitivities, from memory).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.stats import norm

from walkers.scenario.sources import Candidate, Detection, ErrorModel

#: Points of the mass grid (log-spaced over the prior range) on which the posterior is evaluated.
MASS_POINTS = 801


def window_mean(times: np.ndarray, values: np.ndarray, a: float, b: float) -> np.ndarray:
    """Mean over [a, b] (s) of series given at ``times`` (ascending, s) and linear in between,
    along the last axis of ``values``; the value at ``a`` when a == b. Outside the times: 0."""
    times = np.asarray(times, dtype=np.float64)
    values = np.asarray(values, dtype=np.float64)

    def at(t: np.ndarray) -> np.ndarray:
        flat = values.reshape(-1, values.shape[-1])
        out = np.stack([np.interp(t, times, row, left=0.0, right=0.0) for row in flat])
        return out.reshape(*values.shape[:-1], t.size)

    if b <= a:
        return at(np.array([a]))[..., 0]
    inner = times[(times > a) & (times < b)]
    t = np.concatenate([[a], inner, [b]])
    v = at(t)
    return np.trapezoid(v, t, axis=-1) / (b - a)


def release_bins(candidate: Candidate, bins: int) -> np.ndarray:
    """Edges (s) of the release-time bins of a candidate's window, shape (bins + 1,)."""
    if candidate.end <= candidate.start:
        return np.full(bins + 1, candidate.start)
    return np.linspace(candidate.start, candidate.end, bins + 1)


@dataclass
class Sensitivities:
    """Mean influence s (m-3) and particles behind it n for each detection, candidate and bin."""

    influence: np.ndarray  # (detection, candidate, bin) m-3
    count: np.ndarray  # (detection, candidate, bin)
    bin_edges: np.ndarray  # (candidate, bin + 1) s


def sensitivities(
    times: np.ndarray,
    place_influence: np.ndarray,
    place_count: np.ndarray,
    candidates: Sequence[Candidate],
    bins: int,
) -> Sensitivities:
    """Bin means of the candidates' influence series.

    times : release times (s) of the series; place_influence, place_count : (detection,
    candidate, time) from the backward runs.
    """
    nd, nc = place_influence.shape[:2]
    s = np.zeros((nd, nc, bins))
    n = np.zeros((nd, nc, bins))
    edges = np.stack([release_bins(c, bins) for c in candidates])
    for i in range(nc):
        for k in range(bins):
            a, b = float(edges[i, k]), float(edges[i, k + 1])
            s[:, i, k] = window_mean(times, place_influence[:, i], a, b)
            n[:, i, k] = window_mean(times, place_count[:, i], a, b)
    return Sensitivities(s, n, edges)


@dataclass
class Ranking:
    """What the samples say about each candidate."""

    probability: np.ndarray  # (candidate,) posterior probability among the candidates given
    probability_by_bin: np.ndarray  # (candidate, bin)
    mass_median: np.ndarray  # (candidate,) kg, posterior median given the candidate
    mass_most_likely: np.ndarray  # (candidate,) kg, posterior mode given the candidate
    mass_lower: np.ndarray  # (candidate,) kg, lower end of the central interval at ``level``
    mass_upper: np.ndarray  # (candidate,) kg
    mass_needed: np.ndarray  # (detection, candidate) kg: measured value / window-mean influence
    rank: np.ndarray  # (candidate,) 1 = most probable
    explained: bool  # False when no candidate can explain the samples (probabilities NaN)


def log_likelihood(
    detections: Sequence[Detection], sens: Sensitivities, model: ErrorModel, masses: np.ndarray
) -> np.ndarray:
    """ln-likelihood of every (candidate, bin, mass) hypothesis under all detections together,
    shape (candidate, bin, mass); -inf where a hypothesis cannot explain a sample."""
    nd, nc, nb = sens.influence.shape
    total = np.zeros((nc, nb, masses.size))
    ln_m = np.log(masses)
    for j, det in enumerate(detections):
        s = sens.influence[j][..., None]
        sigma = np.sqrt(model.sigma**2 + 1.0 / np.maximum(sens.count[j], 1.0))[..., None]
        reached = s > 0
        with np.errstate(divide="ignore"):
            ln_pred = np.where(reached, np.log(np.where(reached, s, 1.0)) + ln_m, -np.inf)
        if det.kind == "measured":
            z = (np.log(det.value) - ln_pred) / sigma
            term = np.where(reached, norm.logpdf(z) - np.log(sigma), -np.inf)
        else:
            z = np.where(reached, (np.log(det.detection_limit) - ln_pred) / sigma, np.inf)
            term = norm.logcdf(z) if det.kind == "absent" else norm.logsf(z)
        total = total + term
    return total


def rank_candidates(
    detections: Sequence[Detection],
    candidates: Sequence[Candidate],
    sens: Sensitivities,
    model: ErrorModel,
) -> Ranking:
    """Posterior probabilities, release masses with their interval, and the ranking."""
    masses = np.geomspace(model.mass_min, model.mass_max, MASS_POINTS)
    ll = log_likelihood(detections, sens, model, masses)
    nc, nb, _ = ll.shape
    top = np.max(ll)
    explained = bool(np.isfinite(top))
    weight = np.exp(ll - top) if explained else np.zeros_like(ll)
    # prior: candidates equal, bins equal within a candidate, mass uniform in ln M (equal steps)
    by_bin = weight.mean(axis=2) / nb
    total = by_bin.sum()
    prob_bin = by_bin / total if total > 0 else np.full_like(by_bin, np.nan)
    mass_post = weight.sum(axis=1)  # (candidate, mass)
    tail = (1.0 - model.level) / 2.0
    median = np.full(nc, np.nan)
    mode = np.full(nc, np.nan)
    lower = np.full(nc, np.nan)
    upper = np.full(nc, np.nan)
    for i in range(nc):
        w = mass_post[i]
        if not w.sum() > 0:
            continue
        cdf = np.cumsum(w) / w.sum()
        ln_m = np.log(masses)
        median[i], lower[i], upper[i] = np.exp(np.interp([0.5, tail, 1 - tail], cdf, ln_m))
        mode[i] = masses[int(np.argmax(w))]
    probability = prob_bin.sum(axis=1)
    order = np.argsort(-np.nan_to_num(probability, nan=-1.0), kind="stable")
    rank = np.empty(nc, dtype=np.int64)
    rank[order] = np.arange(1, nc + 1)
    return Ranking(
        probability=probability,
        probability_by_bin=prob_bin,
        mass_median=median,
        mass_most_likely=mode,
        mass_lower=lower,
        mass_upper=upper,
        mass_needed=mass_needed(detections, candidates, sens),
        rank=rank,
        explained=explained,
    )


def mass_needed(
    detections: Sequence[Detection], candidates: Sequence[Candidate], sens: Sensitivities
) -> np.ndarray:
    """Mass (kg) each candidate would need to release, evenly over its whole window, to give each
    measured value alone: c / s (NaN for present/absent samples and unreached places)."""
    out = np.full((len(detections), len(candidates)), np.nan)
    whole = sens.influence.mean(axis=2)  # equal bins: the window mean is the mean of the bins
    for j, det in enumerate(detections):
        if det.kind == "measured":
            with np.errstate(divide="ignore"):
                out[j] = np.where(
                    whole[j] > 0, det.value / np.where(whole[j] > 0, whole[j], 1), np.nan
                )
    return out
