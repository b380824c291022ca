"""Compiled kernels (numba, cached on disk): the particle step, random numbers and gridding.

Every kernel here has a plain-numpy twin in ``walkers.engine.twin`` that follows the same
arithmetic on the same random numbers; tests hold the two equal to 1e-12.

The step integrates the Itô equation

    dX = [u + (1/h) ∇·(hK)] dt + B dW,   B Bᵀ = 2K

with Euler–Maruyama (Kloeden & Platen 1992, Numerical Solution of Stochastic Differential
Equations, §10.2, from memory); the advective part may instead use classical RK4 with the noise
added once per step. The drift (1/h)∇·(hK) arrives precomputed on the cell grid (``DX``, ``DY``).

Random numbers are counter-based: the deviates of particle p at step s are a hash of
(key, p, s), so they do not depend on how particles are split over threads, blocks or workers, and a
run resumed from a checkpoint continues with the same numbers. The hash is the SplitMix64 output
function (Steele, Lea & Flood 2014, "Fast splittable pseudorandom number generators", OOPSLA).
Normal deviates come from the ziggurat method with 256 layers (Marsaglia & Tsang 2000, "The
ziggurat method for generating random variables", J. Stat. Softw. 5(8)), one 64-bit hash per
deviate on the fast path, with the index and the uniform taken from separate bits (Doornik 2005,
"An improved ziggurat method to generate normal random samples", from memory); the tail beyond r
uses Marsaglia's 1964 method. Rejections draw further hashes by chaining z -> mix64(z + golden).

Performance layout (see docs/performance.md): particles are moved in blocks of ``BLOCK``; inside a
block the loop runs over steps, then over particles, so consecutive iterations are independent and
the CPU overlaps them; each particle's current cell and random stream are kept in per-block scratch
arrays; time weights of every step are computed once per call. The step kernel is serial and
releases the GIL: it moves the range of blocks it is given, and ``advance`` has the caller's
``spread`` (``walkers.engine.blocks.spread_blocks``) run ranges on threads.
"""

from __future__ import annotations

import functools
import math

import numba as nb
import numpy as np
from numba.core import cgutils, types
from numba.extending import intrinsic

JIT = {"cache": True, "error_model": "numpy", "nogil": True}
# The small functions of the step loop are inlined by numba itself (in its IR), not left to
# LLVM, which inlined few of them; their array arguments come ``borrowed`` (below), so the
# references numba takes and drops for an inlined helper cost no atomic operation.
INLINE = {**JIT, "inline": "always"}


@intrinsic
def borrowed(typingctx, arrays):
    """The arrays of a tuple (or one array) as views that own no reference: their memory-info
    pointer is null, so numba's reference counting of them costs a test of that pointer instead
    of an atomic add on a count. numba takes and drops a reference to an array wherever an
    inlined helper receives it; where a branch follows, LLVM merges the drops into one on a
    selected pointer, which numba's pruning of reference operations no longer recognises, and
    the serial step loop spent about 70 % of its time in a dozen or more atomic operations per
    particle-step (docs/performance.md). Only for arrays that the
    caller keeps alive (the kernel's arguments) and that are neither returned nor stored."""
    members = arrays.types if isinstance(arrays, types.BaseTuple) else (arrays,)
    if not all(isinstance(t, types.Array) for t in members):
        return None

    def unowned(builder, value):
        value = builder.insert_value(value, cgutils.get_null_value(value.type.elements[0]), 0)
        return builder.insert_value(value, cgutils.get_null_value(value.type.elements[1]), 1)

    def codegen(context, builder, signature, args):
        if not isinstance(arrays, types.BaseTuple):
            return unowned(builder, args[0])
        value = args[0]
        for k in range(len(members)):
            value = builder.insert_value(
                value, unowned(builder, builder.extract_value(value, k)), k
            )
        return value

    return arrays(arrays), codegen


# The mesh primitives and the vertical step import JIT from this module, so they are imported
# after it.
from walkers.engine import meshwalk, vertical  # noqa: E402

GOLDEN = np.uint64(0x9E3779B97F4A7C15)
MIX1 = np.uint64(0xBF58476D1CE4E5B9)
MIX2 = np.uint64(0x94D049BB133111EB)
INV_2_53 = 1.0 / 9007199254740992.0

# Random-number components per particle step.
COMP_NORMAL = 0  # and 1: the hashes of the two normal deviates
COMP_BRIDGE_X = 2
COMP_BRIDGE_Y = 3
COMPONENTS = 4
# The vertical step draws from a stream of its own, mix64(particle stream ^ VERTICAL_SALT), so the
# deviates of the horizontal step (and every 2-D run's numbers) stay as they were; substep j of a
# step uses components 2j (its normal deviate) and 2j + 1 (its deposition uniform).
VERTICAL_SALT = np.uint64(0xD1B54A32D192ED03)
MAX_SUBSTEPS = 1024
VERTICAL_COMPONENTS = 2 * MAX_SUBSTEPS

# WGS84 ellipsoid (NIMA TR8350.2, 2000).
WGS84_A = 6378137.0
WGS84_E2 = 6.69437999014e-3
DEG = math.pi / 180.0

STATUS_WAITING = 0
STATUS_WATER = 1
STATUS_HELD_DRY = 2
STATUS_DECAYED = 3
STATUS_EXITED = 4
STATUS_ON_BED = -1
DECAYED_FRACTION = 1e-15

# Particles per block of the step kernel (state of a block stays in the L1 cache).
BLOCK = 256

# Ziggurat of 256 layers of equal area under f(x) = exp(-x²/2) (Marsaglia & Tsang 2000): r is the
# start of the tail, v = r f(r) + ∫_r^∞ f the area of each layer. ZIG_X[i] is the width of layer
# i (ZIG_X[0] = v / f(r) for the base strip, ZIG_X[1] = r, ZIG_X[256] = 0), ZIG_F = f(ZIG_X).
ZIG_R = 3.6541528853610088


def _ziggurat_tables() -> tuple[np.ndarray, np.ndarray]:
    def f(x: float) -> float:
        return math.exp(-0.5 * x * x)

    area = ZIG_R * f(ZIG_R) + math.sqrt(math.pi / 2.0) * math.erfc(ZIG_R / math.sqrt(2.0))
    xs = [0.0] * 257
    xs[0] = area / f(ZIG_R)
    xs[1] = ZIG_R
    for i in range(1, 255):
        xs[i + 1] = math.sqrt(-2.0 * math.log(f(xs[i]) + area / xs[i]))
    xs[256] = 0.0
    return np.array(xs), np.array([f(v) for v in xs])


ZIG_X, ZIG_F = _ziggurat_tables()


@nb.njit(**INLINE)
def mix64(z):
    """SplitMix64 output function: a bijective 64-bit hash (uint64 -> uint64)."""
    z = (z ^ (z >> np.uint64(30))) * MIX1
    z = (z ^ (z >> np.uint64(27))) * MIX2
    return z ^ (z >> np.uint64(31))


@nb.njit(**JIT)
def hash_chain(seed, rounds):
    """``rounds`` SplitMix64 hashes, each of the one before: arithmetic only, no memory. The
    benchmark runs it on one and on two threads at once to see how much of a second core the
    machine gives at that moment (``walkers.bench``)."""
    z = np.uint64(seed)
    for _ in range(rounds):
        z = mix64(z + GOLDEN)
    return z


@nb.njit(**JIT)
def particle_stream(key, particle):
    """The per-particle base of the counter-based generator."""
    return mix64(np.uint64(key) ^ (np.uint64(particle) * GOLDEN))


@nb.njit(**INLINE)
def hash_at(stream, step, comp):
    """The 64-bit hash for (particle stream, step, component)."""
    counter = np.uint64(step) * np.uint64(COMPONENTS) + np.uint64(comp)
    return mix64(stream + counter * GOLDEN)


@nb.njit(**JIT)
def open_unit(z):
    """A uniform deviate in (0, 1] from the top 53 bits of a hash."""
    return (float(z >> np.uint64(11)) + 1.0) * INV_2_53


@nb.njit(**JIT)
def uniform(stream, step, comp):
    """A uniform deviate in (0, 1] for (particle stream, step, component)."""
    return open_unit(hash_at(stream, step, comp))


@nb.njit(**JIT)
def ziggurat_rest(z):
    """The ziggurat after the fast test failed on hash z: wedge or tail, then fresh draws."""
    while True:
        i = int(z & np.uint64(255))
        negative = (z >> np.uint64(8)) & np.uint64(1)
        x = float(z >> np.uint64(11)) * INV_2_53 * ZIG_X[i]
        if x < ZIG_X[i + 1]:
            return -x if negative else x
        if i == 0:
            while True:
                z = mix64(z + GOLDEN)
                a = -math.log(open_unit(z)) / ZIG_R
                z = mix64(z + GOLDEN)
                b = -math.log(open_unit(z))
                if b + b > a * a:
                    x = ZIG_R + a
                    return -x if negative else x
        z = mix64(z + GOLDEN)
        yv = ZIG_F[i] + open_unit(z) * (ZIG_F[i + 1] - ZIG_F[i])
        if yv < math.exp(-0.5 * x * x):
            return -x if negative else x
        z = mix64(z + GOLDEN)


@nb.njit(**INLINE)
def normal_from(z):
    """A standard normal deviate from hash z (ziggurat fast path inline, the rest out of line):
    bits 0-7 pick the layer, bit 8 the sign, bits 11-63 the uniform."""
    i = int(z & np.uint64(255))
    x = float(z >> np.uint64(11)) * INV_2_53 * ZIG_X[i]
    if x < ZIG_X[i + 1]:
        # The sign by a product, not a branch: the CPU cannot predict a random sign.
        return x * float(1 - 2 * int((z >> np.uint64(8)) & np.uint64(1)))
    return ziggurat_rest(z)


@nb.njit(**INLINE)
def normal_pair(stream, step):
    """Two independent standard normal deviates of a particle at a step."""
    return (
        normal_from(hash_at(stream, step, COMP_NORMAL)),
        normal_from(hash_at(stream, step, COMP_NORMAL + 1)),
    )


@nb.njit(**JIT)
def column_hash(vstream, step, comp):
    """The 64-bit hash of component comp of a particle's vertical stream at a step."""
    counter = np.uint64(step) * np.uint64(VERTICAL_COMPONENTS) + np.uint64(comp)
    return mix64(vstream + counter * GOLDEN)


@nb.njit(**JIT)
def column_substeps(h, longest):
    """Number of vertical substeps of a step of h seconds, each at most ``longest`` s (Visser's
    criterion; inf: one), at most MAX_SUBSTEPS."""
    if not (longest < h):
        return 1
    return min(int(math.ceil(h / longest)), MAX_SUBSTEPS)


@nb.njit(**INLINE)
def particle_substep(
    k, j, step, lo, z0, r, settling, params, walk, profiles, row, bst, mode, with_w
):
    """Substep j of particle k of a block from height z0 (m) with the standard normal deviate r:
    ``vertical.column_step`` in the particle's column (``walk`` and ``profiles`` as in
    :func:`column_walk`, the profiles in row ``row``), then the deposition draw; a particle
    that deposits goes "on the bed" (``bst``, height 0) and leaves the water."""
    z, depth, inv_depth, ustar, vstreams, on, _, sub = walk
    klev, kcols, wlev, wcols = profiles
    zn, chance = vertical.column_step(
        z0,
        depth[k],
        inv_depth[k],
        ustar[k],
        settling[lo + k],
        params,
        sub[k],
        r,
        klev,
        kcols,
        wlev,
        wcols,
        row,
        mode,
        with_w,
    )
    z[k] = zn
    if chance > 0.0 and open_unit(column_hash(vstreams[k], step, 2 * j + 1)) < chance:
        z[k] = 0.0
        on[k] = False
        bst[k] = STATUS_ON_BED


@nb.njit(inline="always", **JIT)
def column_walk(most, step, lo, sigma, settling, params, walk, profiles, bst, mode, with_w):
    """The vertical motion over a step of the particles lo.. of a block that take it
    (``walk[6]`` substeps, > 0): ``vertical.column_step`` in each particle's substeps of ``walk[7]``
    s from height ``walk[0]`` (m) in its column of depth ``walk[1]``, 1/depth ``walk[2]``
    and u* ``walk[3]``, with the K_z and w profiles of ``profiles``; the substeps keep
    Visser's criterion (``vertical.substep_longest``). The loop runs over substeps, then
    over particles, so consecutive iterations are independent. A particle that deposits
    goes "on the bed" (``bst``, sigma 0) and stops; the others' sigma is z / h at the
    end."""
    z, depth, _, _, vstreams, on, n, _ = walk
    for j in range(most):
        for k in range(on.shape[0]):
            if not on[k] or j >= n[k]:
                continue
            r = normal_from(column_hash(vstreams[k], step, 2 * j))
            particle_substep(
                k, j, step, lo, z[k], r, settling, params, walk, profiles, k, bst, mode, with_w
            )
    for k in range(on.shape[0]):
        if n[k] > 0:
            sigma[lo + k] = z[k] / depth[k]


@nb.njit(**JIT)
def column_sweep(step, lo, sigma, settling, params, walk, profiles, bst, mode, scratch):
    """:func:`column_walk` for a constant or parabolic K_z without w (``mode`` 1 or 2), in one
    sweep per substep over the whole block that the compiler turns into vector instructions.

    First each particle's substeps (Visser's criterion, :func:`column_substeps`) and their
    length, from the step's length that ``walk[7]`` holds on entry, and 1/depth (``walk[2]``).
    Then per substep, for every particle at once: the hash, the ziggurat's fast path, and
    :func:`vertical.column_step`'s arithmetic with the first reflection at the bed and at the
    surface written without branches, kept where the particle takes the substep. A particle
    whose deviate needs the rest of the ziggurat, whose step needs more reflections, or that
    ended below a depositing bed is marked, and only these are stepped again, one by one, from
    their height before the substep, by :func:`vertical.column_step` itself (with the
    deposition draw of :func:`column_walk`). The same numbers as :func:`column_walk`, bit for
    bit (``profiles`` as in :func:`column_walk`, not read by these modes; ``scratch``: the
    height before the substep, an array of the block's length, and the marks, int8, zero, of
    the block's length rounded up to a multiple of 8, read eight at a time;
    ``tests/test_column_sweep.py``)."""
    # views without a reference of their own (the step kernel holds the arrays): passed on to
    # the inlined ``particle_substep``, they cost no reference counting (``borrowed``)
    walk, profiles, scratch = borrowed(walk), borrowed(profiles), borrowed(scratch)
    sigma, settling, params, bst = borrowed((sigma, settling, params, bst))
    z, depth, inv_depth, ustar, vstreams, on, n, sub = walk
    before, mark = scratch
    words = mark.view(np.uint64)
    nk = on.shape[0]
    # the block's settling velocities as a view from its first particle: indexed by the loop's
    # counter (never negative), they load as one vector, not element by element
    ws = settling[lo : lo + nk]
    k_const = params[vertical.P_K0]
    drift = params[vertical.P_DRIFT]
    depositing = params[vertical.P_WD] > 0.0
    most = 0
    for k in range(nk):
        longest = vertical.column_longest(depth[k], ustar[k], params)
        nsub = column_substeps(sub[k], longest) if on[k] else 0
        n[k] = nsub
        inv_depth[k] = 1.0 / depth[k]
        sub[k] = sub[k] / max(nsub, 1)
        most = max(most, nsub)
    for j in range(most):
        offset = (np.uint64(step) * np.uint64(VERTICAL_COMPONENTS) + np.uint64(2 * j)) * GOLDEN
        seen = 0
        for k in range(nk):
            h = mix64(vstreams[k] + offset)
            i = h & np.uint64(255)
            x = float(np.int64(h >> np.uint64(11))) * INV_2_53 * ZIG_X[i]
            r = x * float(1 - 2 * np.int64((h >> np.uint64(8)) & np.uint64(1)))
            tail = x >= ZIG_X[i + np.uint64(1)]
            zk = z[k]
            dt = sub[k]
            if mode == vertical.KZ_CONSTANT:
                dk = 0.0
                kk = k_const
            else:
                a = vertical.KAPPA * ustar[k]
                dk = a * (1.0 - 2.0 * zk * inv_depth[k]) * drift
                zm = min(max(zk + 0.5 * dk * dt, 0.0), depth[k])
                kk = a * zm * (1.0 - zm * inv_depth[k])
            zn = zk + (dk - ws[k]) * dt + r * math.sqrt(2.0 * kk * dt)
            below = zn < 0.0
            zn = abs(zn)
            zn = min(zn, 2.0 * depth[k] - zn)
            take = on[k] and j < n[k]
            before[k] = zk
            z[k] = min(max(zn, 0.0), depth[k]) if take else zk
            again = int(take and (tail or zn < 0.0 or (below and depositing)))
            mark[k] = np.int8(again)
            seen |= again
        if not seen:
            continue
        # the marks read eight at a time: a block has few marked particles
        for q in range(words.shape[0]):
            if words[q] == 0:
                continue
            for k in range(8 * q, min(8 * q + 8, nk)):
                if not mark[k]:
                    continue
                r = normal_from(mix64(vstreams[k] + offset))
                particle_substep(
                    k,
                    j,
                    step,
                    lo,
                    before[k],
                    r,
                    settling,
                    params,
                    walk,
                    profiles,
                    0,
                    bst,
                    mode,
                    False,
                )
    for k in range(nk):
        if n[k] > 0:
            sigma[lo + k] = z[k] / depth[k]


@nb.njit(**JIT)
def column_profile(arr, levels, it, wt, j, i, out, row):
    """The values of (nf nl or nl, ny, nx) layered frames in cell (j, i) at time (it, wt), one
    per level, into row ``row`` of ``out`` (``vertical.layer_frame_value``)."""
    nl = levels.shape[0]
    for q in range(nl):
        out[row, q] = vertical.layer_frame_value(arr, nl, q, it, wt, j, i)


@nb.njit(**INLINE)
def bed_log_ratio(params, depth, it, wt, j, i):
    """ln(h/z0) = 1 + a h^b of column (j, i) at time (it, wt), (a, b) = params[P_LOG_A],
    params[P_LOG_B] (``vertical.bed_log_law``); 0 without a bed roughness (a = 0)."""
    if params.shape[0] <= vertical.P_LOG_A or not params[vertical.P_LOG_A] > 0.0:
        return 0.0
    h = vertical.cell_frame_value(depth, it, wt, j, i)
    return 1.0 + params[vertical.P_LOG_A] * max(h, 0.0) ** params[vertical.P_LOG_B]


@nb.njit(**INLINE)
def bed_weight(s1, s, log_ratio):
    """The weight w <= 0 of height s below the lowest layer centre s1 (fractions of the depth)
    in a column with ln(h/z0) = ``log_ratio``: the law of the wall through the lowest layer's
    value u1, u = u1 ln(z/z0) / ln(z1/z0) = u1 (1 + w), so w = (ln s − ln s1) / (ln s1 +
    log_ratio), and w = -1 (u = 0) at or below z0. 0 (the lowest layer's value) without a
    roughness (log_ratio 0) or where z0 >= z1."""
    if not log_ratio > 0.0:
        return 0.0
    lo = math.log(s1) + log_ratio
    if not lo > 0.0:
        return 0.0
    if not s > 0.0:
        return -1.0
    ls = math.log(s)
    if not ls + log_ratio > 0.0:
        return -1.0
    return (ls - math.log(s1)) / lo


@nb.njit(**JIT)
def layer_weight(levels, s, params, depth, it, wt, j, i):
    """Layer index k and weight w of height s (fraction of the depth) between the layer centres
    ``levels`` (ascending): the velocity is linear between centres, above the highest centre the
    value of that layer (a layer's value is its mean over the layer in a finite-volume model;
    common practice), (nl - 1, 0), and below the lowest one the law of the wall to the bed in
    column (j, i) at time (it, wt) (ln(h/z0) of :func:`bed_log_ratio`, looked up only there),
    (0, w <= 0) of :func:`bed_weight`."""
    nl = levels.shape[0]
    if nl == 1:
        return 0, 0.0
    if s <= levels[0]:
        return 0, bed_weight(levels[0], s, bed_log_ratio(params, depth, it, wt, j, i))
    if s >= levels[nl - 1]:
        return nl - 1, 0.0
    k = 0
    while levels[k + 1] <= s:
        k += 1
    return k, (s - levels[k]) / (levels[k + 1] - levels[k])


@nb.njit(**JIT)
def layer_bilinear(arr, nl, it, wt, i, j, wx, wy, k, wz):
    """:func:`bilinear` of layered frames (nf nl or nl, ny, nx; frame f layer k at f nl + k)
    at layer k with weight wz > 0 towards layer k + 1, or -wz > 0 towards 0 (the law of the wall
    below the lowest centre, :func:`layer_weight`) (nl = 1: ``bilinear`` itself)."""
    if nl == 1:
        return bilinear(arr, it, wt, i, j, wx, wy)
    nx = arr.shape[2]
    ny = arr.shape[1]
    i1 = min(i + 1, nx - 1)
    j1 = min(j + 1, ny - 1)
    if arr.shape[0] == nl:
        it = 0
        wt = 0.0
    out = 0.0
    for q in range(2):
        if q == 1 and not wz > 0.0:
            break
        f0 = it * nl + k + q
        f = (1.0 - wy) * ((1.0 - wx) * arr[f0, j, i] + wx * arr[f0, j, i1]) + wy * (
            (1.0 - wx) * arr[f0, j1, i] + wx * arr[f0, j1, i1]
        )
        if wt > 0.0:
            f1 = f0 + nl
            g = (1.0 - wy) * ((1.0 - wx) * arr[f1, j, i] + wx * arr[f1, j, i1]) + wy * (
                (1.0 - wx) * arr[f1, j1, i] + wx * arr[f1, j1, i1]
            )
            f = f + wt * (g - f)
        if q == 0:
            out = f
        else:
            out = out + wz * (f - out)
    if wz < 0.0:
        out = out * (1.0 + wz)
    return out


@nb.njit(**JIT)
def axis_inverse_spacing(c):
    """1/spacing for a uniformly spaced axis (to 1e-9 relative), 0.0 otherwise."""
    n = c.shape[0]
    if n < 2:
        return 0.0
    d = (c[n - 1] - c[0]) / (n - 1)
    for i in range(1, n):
        if abs((c[i] - c[i - 1]) - d) > 1e-9 * abs(d):
            return 0.0
    return 1.0 / d


@nb.njit(**INLINE)
def locate(c, inv, v):
    """Interval index i and weight w with v ≈ c[i] + w (c[i+1] - c[i]), clamped to the axis.

    On a uniformly spaced axis (inv = 1/spacing > 0) the weight is (v - c[i]) * inv."""
    n = c.shape[0]
    if n < 2 or v <= c[0]:
        return 0, 0.0
    if v >= c[n - 1]:
        return n - 2, 1.0
    if inv > 0.0:
        i = int((v - c[0]) * inv)
        if i > n - 2:
            i = n - 2
        return i, (v - c[i]) * inv
    lo = 0
    hi = n - 1
    while hi - lo > 1:
        mid = (lo + hi) >> 1
        if c[mid] <= v:
            lo = mid
        else:
            hi = mid
    return lo, (v - c[lo]) / (c[lo + 1] - c[lo])


@nb.njit(**JIT)
def cell_index(edges, inv, v):
    """Index i of the cell with edges[i] <= v < edges[i+1], clamped to the grid (the rule of
    ``numpy.searchsorted(edges, v, 'right') - 1``, so the twin finds the same cell)."""
    n = edges.shape[0] - 1
    if n < 2 or v < edges[1]:
        return 0
    if v >= edges[n - 1]:
        return n - 1
    if inv > 0.0:
        i = int((v - edges[0]) * inv)
        if i > n - 1:
            i = n - 1
        if v < edges[i]:
            i -= 1
        elif v >= edges[i + 1]:
            i += 1
        return i
    lo = 1
    hi = n - 1
    while hi - lo > 1:
        mid = (lo + hi) >> 1
        if edges[mid] <= v:
            lo = mid
        else:
            hi = mid
    return lo


@nb.njit(**INLINE)
def time_weight(times, t):
    """Frame index and weight for linear interpolation in time (clamped to the window)."""
    n = times.shape[0]
    if n < 2 or t <= times[0]:
        return 0, 0.0
    if t >= times[n - 1]:
        return n - 2, 1.0
    i = 0
    while times[i + 1] < t:
        i += 1
    return i, (t - times[i]) / (times[i + 1] - times[i])


@nb.njit(**INLINE)
def bilinear(arr, it, wt, i, j, wx, wy):
    """Bilinear in space at interval (i, j) with weights (wx, wy), linear in time between frames
    it and it+1 (a single frame is used as is)."""
    nx = arr.shape[2]
    ny = arr.shape[1]
    # Unsigned indices (the callers' are never negative): numba then adds no wrap-around of
    # negative indices, three instructions per index.
    i0 = np.uint64(i)
    j0 = np.uint64(j)
    i1 = np.uint64(min(i + 1, nx - 1))
    j1 = np.uint64(min(j + 1, ny - 1))
    t0 = np.uint64(it)
    if arr.shape[0] == 1:
        t0 = np.uint64(0)
        wt = 0.0
    f = (1.0 - wy) * ((1.0 - wx) * arr[t0, j0, i0] + wx * arr[t0, j0, i1]) + wy * (
        (1.0 - wx) * arr[t0, j1, i0] + wx * arr[t0, j1, i1]
    )
    if wt > 0.0:
        t1 = t0 + np.uint64(1)
        g = (1.0 - wy) * ((1.0 - wx) * arr[t1, j0, i0] + wx * arr[t1, j0, i1]) + wy * (
            (1.0 - wx) * arr[t1, j1, i0] + wx * arr[t1, j1, i1]
        )
        f = f + wt * (g - f)
    return f


@nb.njit(**JIT)
def sample(arr, ax, ay, invx, invy, it, wt, x, y):
    """Bilinear in space on (ax, ay), linear in time between frames it and it+1."""
    i, wx = locate(ax, invx, x)
    j, wy = locate(ay, invy, y)
    return bilinear(arr, it, wt, i, j, wx, wy)


@nb.njit(**INLINE)
def metres_to_grid(geographic, y):
    """Grid units per metre along x and y (1 on projected grids; degrees per metre otherwise)."""
    if not geographic:
        return 1.0, 1.0
    s = math.sin(y * DEG)
    q = 1.0 - WGS84_E2 * s * s
    n_rad = WGS84_A / math.sqrt(q)
    m_rad = WGS84_A * (1.0 - WGS84_E2) / (q * math.sqrt(q))
    return 1.0 / (n_rad * math.cos(y * DEG) * DEG), 1.0 / (m_rad * DEG)


@nb.njit(**INLINE)
def velocity(ux, uy, U, vx, vy, V, inv, shared, it, wt, x, y):
    """Interpolated (u, v) in m s-1; when u and v share their axes they are located once."""
    i, wx = locate(ux, inv[0], x)
    j, wy = locate(uy, inv[1], y)
    u = bilinear(U, it, wt, i, j, wx, wy)
    if not shared:
        i, wx = locate(vx, inv[2], x)
        j, wy = locate(vy, inv[3], y)
    return u, bilinear(V, it, wt, i, j, wx, wy)


@nb.njit(**JIT)
def step_tables(times, t0, dt, nsteps, decay_rate, out_i, out_w, out_decay):
    """Time weights of every step of a call: at the start t, the middle t + h/2 and the end t + h
    of each step (columns 0, 1, 2), with t and h computed as the step kernel computes them; and
    the decay factor exp(-rate h) of each step."""
    for s in range(nsteps):
        t = t0 + s * dt
        h = (t + dt) - t
        out_decay[s] = math.exp(-decay_rate * h)
        out_i[s, 0], out_w[s, 0] = time_weight(times, t)
        out_i[s, 1], out_w[s, 1] = time_weight(times, t + 0.5 * h)
        out_i[s, 2], out_w[s, 2] = time_weight(times, t + h)


@nb.njit(**JIT)
def face_ahead(edges, k, s, d):
    """Along one axis, the fraction of a segment from s (length d) at which it reaches the face of
    cell k ahead of it, and that face (2.0 and 0.0 when the segment does not move on this axis)."""
    if d > 0.0:
        return max((edges[k + 1] - s) / d, 0.0), edges[k + 1]
    if d < 0.0:
        return max((edges[k] - s) / d, 0.0), edges[k]
    return 2.0, 0.0


@nb.njit(**JIT)
def inside_cell(edges, k, v):
    """v kept in the half-open interval [edges[k], edges[k+1]) of cell k when it lies on a face
    of it, so that the cell found from the position later (``cell_index``) is cell k."""
    n = edges.shape[0] - 1
    if k < n - 1 and v >= edges[k + 1]:
        return np.nextafter(edges[k + 1], -np.inf)
    if k > 0 and v < edges[k]:
        return edges[k]
    return v


@nb.njit(**INLINE)
def trace_path(px, py, pi, pj, qx, qy, xe, ye, wet, iw, edges_mode, max_refl):
    """Follow the straight path of a step from (px, py) in wet cell (pi, pj) to (qx, qy), cell by
    cell, and reflect it at the first closed face it meets. A step that ends in its own cell or
    a neighbour, with every cell of the rectangle between the two wet, is placed at once (the
    end cell is then the one whose half-open extent [e_i, e_i+1) holds the end).

    A face is closed when the cell beyond it is land or dry (``wet[iw]`` 0) or when it is a
    reflecting domain edge. At a closed face the rest of the path is mirrored in the face (the
    image of the candidate end), and the trace goes on from the crossing point; the path therefore
    never enters land, whatever the length of the step or the width of the land (a dike one cell
    thick holds). Crossing an absorbing domain edge ends the path there. When the path passes
    exactly through a cell corner, the x face is taken first, so diagonal gaps between land cells
    that touch only at a corner do not leak either.

    Reflection in a straight wall is exact for Brownian motion whatever the step (the method of
    images; Carslaw & Jaeger 1959, Conduction of Heat in Solids, §2.2, from memory), so a
    well-mixed tracer stays well mixed next to a wall.

    Returns (edge, fraction, placed, qx, qy, ci, cj): the absorbing edge crossed (0 west, 1 east,
    2 south, 3 north) or -1, the fraction of the path travelled at the crossing, whether the end
    was placed, the end position (inside cell (ci, cj), which is wet) or the crossing point. A path
    still reflecting after ``max_refl`` reflections, or whose end is not a finite number, is not
    placed (the particle keeps its position).
    """
    # Most steps end in their own cell or in one of the eight around it. When the end lies in
    # such a cell and that cell and the two beside both (the rectangle of cells between start
    # and end, which holds the whole straight path) are wet, the path meets no closed face and
    # the trace below would end there: it is found at once, without branches that depend on the
    # random step (the comparisons give 0 or 1). A NaN end fails the test and goes to the trace.
    ncx = xe.shape[0] - 1
    ncy = ye.shape[0] - 1
    ci = min(max(pi - int(qx < xe[pi]) + int(qx >= xe[pi + 1]), 0), ncx - 1)
    cj = min(max(pj - int(qy < ye[pj]) + int(qy >= ye[pj + 1]), 0), ncy - 1)
    near = xe[ci] <= qx < xe[ci + 1] and ye[cj] <= qy < ye[cj + 1]
    if near and wet[iw, cj, ci] != 0 and wet[iw, pj, ci] != 0 and wet[iw, cj, pi] != 0:
        return -1, 1.0, True, qx, qy, ci, cj
    return cross_cells(px, py, pi, pj, qx, qy, xe, ye, wet, iw, edges_mode, max_refl)


@nb.njit(**JIT)
def cross_cells(px, py, pi, pj, qx, qy, xe, ye, wet, iw, edges_mode, max_refl):
    """:func:`trace_path` for a step that leaves its start cell. A function of its own so that
    the step loop inlines only the test of the start cell and calls this for the steps that
    cross a face (the call passes some forty words of array descriptors)."""
    if not (math.isfinite(qx) and math.isfinite(qy)):
        # A velocity or coefficient that is not finite (a hole beside land): no step is taken.
        return -1, 1.0, False, px, py, pi, pj
    ncx = xe.shape[0] - 1
    ncy = ye.shape[0] - 1
    i = pi
    j = pj
    sx_ = px
    sy_ = py
    done = 0.0
    reflections = 0
    # Between two reflections a straight path crosses at most ncx + ncy faces.
    for _ in range((ncx + ncy + 2) * (max_refl + 1)):
        dx = qx - sx_
        dy = qy - sy_
        tx, fx = face_ahead(xe, i, sx_, dx)
        ty, fy = face_ahead(ye, j, sy_, dy)
        if tx >= 1.0 and ty >= 1.0:
            return -1, 1.0, True, inside_cell(xe, i, qx), inside_cell(ye, j, qy), i, j
        across_x = tx <= ty
        if across_x:
            frac = done + tx * (1.0 - done)
            cx_ = fx
            cy_ = sy_ + tx * dy
            ni = i + (1 if dx > 0.0 else -1)
            nj = j
            edge = 0 if ni < 0 else 1
            outside = ni < 0 or ni >= ncx
        else:
            frac = done + ty * (1.0 - done)
            cx_ = sx_ + ty * dx
            cy_ = fy
            ni = i
            nj = j + (1 if dy > 0.0 else -1)
            edge = 2 if nj < 0 else 3
            outside = nj < 0 or nj >= ncy
        if outside and edges_mode[edge] == 1:
            return edge, frac, False, cx_, cy_, i, j
        if outside or wet[iw, nj, ni] == 0:
            if reflections >= max_refl:
                break
            reflections += 1
            if across_x:
                qx = 2.0 * fx - qx
            else:
                qy = 2.0 * fy - qy
        else:
            i = ni
            j = nj
        sx_ = cx_
        sy_ = cy_
        done = frac
    return -1, 1.0, False, px, py, pi, pj


@nb.njit(**JIT)
def edge_product(edge, p, q, s):
    """d0·d1: the product of the distances (m) of the start p and the end q of a step from an
    edge, with s grid units per metre (the same bits whichever side of the edge is water)."""
    return ((p - edge) / s) * ((q - edge) / s)


@nb.njit(**INLINE)
def bridge_exit(stream, step, px, py, qx, qy, sx, sy, kxx, kyy, h, ndim, edges_mode, xe, ye, ij):
    """Brownian-bridge test of a crossing of an absorbing edge inside the step: the path from
    d0 to d1 metres from the edge crossed it with probability exp(-d0 d1 / (K h)) (Lépingle 1995,
    Math. Comput. Simul. 38, from memory). Returns the edge crossed or -1.

    ij = (pi, pj, ci, cj) are the cells of the start and of the end. An edge is tested only when
    one of them lies in the row or column of water beside it, so an open edge behind land is
    reached only through water."""
    ncx = xe.shape[0] - 1
    ncy = ye.shape[0] - 1
    # Most steps start and end away from the rim of the grid: that is found here, in the step
    # loop (this part is inlined), and the test itself is called only beside the rim.
    rim_x = ij[0] == 0 or ij[2] == 0 or ij[0] == ncx - 1 or ij[2] == ncx - 1
    rim_y = ndim == 2 and (ij[1] == 0 or ij[3] == 0 or ij[1] == ncy - 1 or ij[3] == ncy - 1)
    if not (rim_x or rim_y):
        return -1
    return bridge_test(
        stream, step, px, py, qx, qy, sx, sy, kxx, kyy, h, ndim, edges_mode, xe, ye, ij
    )


@nb.njit(**JIT)
def bridge_test(stream, step, px, py, qx, qy, sx, sy, kxx, kyy, h, ndim, edges_mode, xe, ye, ij):
    """:func:`bridge_exit` for a step that starts or ends beside the rim of the grid."""
    ncx = xe.shape[0] - 1
    ncy = ye.shape[0] - 1
    # The cells are tested first: most steps start and end away from every open edge, and the
    # distances (four divisions per axis) are then not computed.
    west = edges_mode[0] == 1 and (ij[0] == 0 or ij[2] == 0) and kxx > 0.0
    east = edges_mode[1] == 1 and (ij[0] == ncx - 1 or ij[2] == ncx - 1) and kxx > 0.0
    pw = edge_product(xe[0], px, qx, sx) if west else math.inf
    if pw < 20.0 * kxx * h:
        if uniform(stream, step, COMP_BRIDGE_X) < math.exp(-pw / (kxx * h)):
            return 0
    else:
        pe = edge_product(xe[ncx], px, qx, sx) if east else math.inf
        if pe < 20.0 * kxx * h and uniform(stream, step, COMP_BRIDGE_X) < math.exp(-pe / (kxx * h)):
            return 1
    if ndim == 2:
        south = edges_mode[2] == 1 and (ij[1] == 0 or ij[3] == 0) and kyy > 0.0
        north = edges_mode[3] == 1 and (ij[1] == ncy - 1 or ij[3] == ncy - 1) and kyy > 0.0
        ps = edge_product(ye[0], py, qy, sy) if south else math.inf
        if ps < 20.0 * kyy * h:
            if uniform(stream, step, COMP_BRIDGE_Y) < math.exp(-ps / (kyy * h)):
                return 2
        else:
            pn = edge_product(ye[ncy], py, qy, sy) if north else math.inf
            if pn < 20.0 * kyy * h and uniform(stream, step, COMP_BRIDGE_Y) < math.exp(
                -pn / (kyy * h)
            ):
                return 3
    return -1


@nb.njit(**INLINE)
def frame_value(arr, it, wt, n):
    """Value n of a (nf, 1, n) mesh variable, linear in time between frames it and it+1 (a
    single frame as is); the arithmetic of :func:`bilinear` in time."""
    un = np.uint64(n)  # unsigned: no wrap-around of negative indices
    if arr.shape[0] == 1:
        return arr[0, 0, un]
    t0 = np.uint64(it)
    f = arr[t0, 0, un]
    if wt > 0.0:
        f = f + wt * (arr[t0 + np.uint64(1), 0, un] - f)
    return f


@nb.njit(**INLINE)
def mesh_value(arr, lay, it, wt, n):
    """Value n of a mesh variable at time (it, wt): of (nf, 1, n) frames (:func:`frame_value`),
    or, with layers (lay = (nl, k, wz), nl > 1), of layered frames (nf nl or nl, 1, n) in layer
    k with weight wz towards k + 1 (:func:`layer_bilinear` at one point)."""
    if lay[0] > 1:
        return layer_bilinear(arr, lay[0], it, wt, n, 0, 0.0, 0.0, lay[1], lay[2])
    return frame_value(arr, it, wt, n)


@nb.njit(**INLINE)
def mesh_velocity(node_x, node_y, face_nodes, U, V, it, wt, f, px, py, w, on_nodes, lay):
    """(u, v) in m s-1 at p in face f of a mesh: node values interpolated with the corner
    weights (barycentric or bilinear, ``meshwalk.face_weights``, written into w), or the face's
    own value (piecewise constant); in the particle's layer lay (:func:`mesh_value`)."""
    if not on_nodes:
        return mesh_value(U, lay, it, wt, f), mesh_value(V, lay, it, wt, f)
    meshwalk.face_weights(node_x, node_y, face_nodes, f, px, py, w)
    u = 0.0
    v = 0.0
    for c in range(meshwalk.corner_count(face_nodes, f)):
        node = face_nodes[f, c]
        u += w[c] * mesh_value(U, lay, it, wt, node)
        v += w[c] * mesh_value(V, lay, it, wt, node)
    return u, v


@nb.njit(**JIT)
def mesh_velocity_at(
    node_x, node_y, face_nodes, neighbours, U, V, it, wt, f, px, py, w, on_nodes, lay
):
    """:func:`mesh_velocity` at a point found by walking from face f (an RK4 stage point; one
    outside the mesh is evaluated with the weights of f, extrapolated)."""
    g = meshwalk.walk_to_face(node_x, node_y, face_nodes, neighbours, f, px, py)
    return mesh_velocity(
        node_x, node_y, face_nodes, U, V, it, wt, g if g >= 0 else f, px, py, w, on_nodes, lay
    )


@nb.njit(**JIT)
def layered_velocity(ux, uy, U, vx, vy, V, inv, shared, it, wt, x, y, lay):
    """:func:`velocity` of layered frames at the layer and weight of lay = (nl, k, wz)
    (:func:`layer_bilinear`)."""
    nl, k, wz = lay
    i, wx = locate(ux, inv[0], x)
    j, wy = locate(uy, inv[1], y)
    u = layer_bilinear(U, nl, it, wt, i, j, wx, wy, k, wz)
    if not shared:
        i, wx = locate(vx, inv[2], x)
        j, wy = locate(vy, inv[3], y)
    return u, layer_bilinear(V, nl, it, wt, i, j, wx, wy, k, wz)


@nb.njit(**INLINE)
def stage_velocity(mesh, on_nodes, shared, grid, topo, U, V, it, wt, f, x, y, w, lay):
    """(u, v) at an RK4 stage point (x, y): on the lattice's velocity axes (``grid``; in the
    particle's layer lay = (nl, k, wz) when the velocity is layered, nl > 1), or on a mesh by
    walking from face f (``topo``; :func:`mesh_velocity_at`, in the particle's layer too)."""
    ux, uy, vx, vy, invu, node_x, node_y = grid
    if mesh:
        return mesh_velocity_at(
            node_x, node_y, topo[0], topo[1], U, V, it, wt, f, x, y, w, on_nodes, lay
        )
    if lay[0] > 1:
        return layered_velocity(ux, uy, U, vx, vy, V, invu, shared, it, wt, x, y, lay)
    return velocity(ux, uy, U, vx, vy, V, invu, shared, it, wt, x, y)


@nb.njit(**JIT)
def block_faces(lo, hi, x, y, node_x, node_y, face_nodes, neighbours, hint, key):
    """Faces (walked to from each particle's last face, ``hint``) and random streams of
    particles lo..hi-1 on a mesh; the second index array is unused (0)."""
    nb_ = hi - lo
    cell_i = np.empty(nb_, np.int64)
    cell_j = np.zeros(nb_, np.int64)
    streams = np.empty(nb_, np.uint64)
    for k in range(nb_):
        p = lo + k
        start = hint[p] if hint[p] >= 0 else 0
        cell_i[k] = meshwalk.walk_to_face(node_x, node_y, face_nodes, neighbours, start, x[p], y[p])
        streams[k] = particle_stream(key, p)
    return cell_i, cell_j, streams


@nb.njit(**JIT)
def block_scratch(lo, hi, x, y, xe, ye, invc, key):
    """Cell indices and random streams of particles lo..hi-1 (per-block scratch arrays)."""
    nb_ = hi - lo
    cell_i = np.empty(nb_, np.int64)
    cell_j = np.empty(nb_, np.int64)
    streams = np.empty(nb_, np.uint64)
    for k in range(nb_):
        p = lo + k
        cell_i[k] = cell_index(xe, invc[0], x[p])
        cell_j[k] = cell_index(ye, invc[1], y[p])
        streams[k] = particle_stream(key, p)
    return cell_i, cell_j, streams


@functools.cache
def compiled_mover(
    ndim,
    scheme,
    aligned,
    drift,
    geographic,
    kgrid,
    tensor,
    shared,
    centred,
    mesh=0,
    vertical_mode=0,
):
    """The step loop, compiled for one set of options (the branches of the others removed).

    There is one source of the step: this function. Each option below is a constant of the
    compiled code, so numba compiles (and caches on disk) one specialised kernel per option set
    that a run uses, and the branches not taken cost nothing per particle-step.

    ndim : 1 (channel) or 2 (depth-averaged plane).
    scheme : 0 Euler, 1 RK4 for the advective part (the noise is added once per step).
    aligned : dispersion aligned with the local flow (K_L along, K_T across) instead of the axes.
    drift : add the drift (1/h) ∇·(h K), given on cell centres.
    geographic : positions in degrees (steps converted through the WGS84 radii).
    kgrid : K varies on the cell grid (else constant).
    tensor : K is a full tensor on the cell grid (K1 = Kxx, K2 = Kyy, K3 = Kxy; the index-space
        tensor of a curvilinear grid); the noise is its Cholesky factor times two normals.
    shared : u and v lie on the same axes (located once).
    centred : u and v lie on the cell centres (the location is shared with K and the drift).
    mesh : 0 a lattice of cells; 1 an unstructured mesh with u, v on its nodes, 2 on its faces.
        On a mesh the argument tuples keep their shapes with other contents (see ``advance``),
        a particle's cell is its face, the walls and open boundaries are those of
        ``meshwalk.trace_mesh_path``, the drift is per face, and there is no bridge test.
    vertical_mode : 0 depth-averaged; 1 a vertical step with constant K_z, 2 with parabolic
        K_z, 3 with the K_z profiles of the flow's column, plus 4 with the vertical velocity w
        of the column (``column_walk``:
        ``vertical.column_step`` in substeps that keep Visser's criterion, after the horizontal
        step of the block's particles, with the depth, u*, K_z and w of the cell each step
        starts in); a particle whose substep ends below a depositing bed may go "on the bed"
        (``STATUS_ON_BED``), and returns to the water above a critical bed shear stress
        (``vertical.resuspension_chance``). With layered velocities (more than one layer
        centre in ``column``) u and v are sampled at each particle's height
        (``layer_bilinear``). The ``column`` argument is described in ``advance``.
    """
    rk4 = scheme == 1
    on_nodes = mesh == 1
    two_d = ndim == 2
    # the K_z mode (low two bits) and w (bit 2) of vertical_mode, constants of the walk
    kz_mode = vertical_mode & 3
    with_w = (vertical_mode & 4) != 0
    # the vertical walk in sweeps over the block (``column_sweep``): K_z constant or parabolic,
    # no w
    sweep = vertical_mode != 0 and kz_mode != vertical.KZ_FILE and not with_w

    @nb.njit(**JIT)
    def move(
        x,
        y,
        m,
        m0,
        trel,
        texit,
        status,
        flow,
        cells,
        disp,
        times,
        edges_mode,
        t0,
        dt,
        nsteps,
        step0,
        key,
        decay_rate,
        max_refl,
        bridge,
        topology,
        column,
        tables,
        first_block,
        last_block,
    ):
        # The arrays as views without a reference of their own (the caller holds them):
        # ``borrowed``.
        x, y, m, m0, trel, texit, status = borrowed((x, y, m, m0, trel, texit, status))
        flow, cells, disp, times = borrowed(flow), borrowed(cells), borrowed(disp), borrowed(times)
        topology, column, edges_mode = borrowed(topology), borrowed(column), borrowed(edges_mode)
        tab_i, tab_w, tab_decay = borrowed(tables)
        ux, uy, U, vx, vy, V, invu = flow[0], flow[1], flow[2], flow[3], flow[4], flow[5], flow[6]
        face_nodes, neighbours, edge_open, hint = topology[0], topology[1], topology[2], topology[3]
        xe, ye, wet, cx, cy, invc = cells[0], cells[1], cells[2], cells[3], cells[4], cells[5]
        DX, DY, K1, K2, kconst, K3 = disp[0], disp[1], disp[2], disp[3], disp[4], disp[5]
        KM = disp[6]  # per-particle dispersion multipliers (ones for a single run)
        sigma, settling, c_depth, c_ustar, c_params = (
            column[0],
            column[1],
            column[2],
            column[3],
            column[4],
        )
        # the RK4 stage points: on the lattice's axes, or on the mesh from face pi (the tuples
        # made here, once: made in the loop, they took a reference to each array every step)
        grid = (ux, uy, vx, vy, invu, xe, ye)
        topo = (face_nodes, neighbours)
        # layer centres of U and V, heights and frames of w and of K_z (fractions of the depth)
        c_levels, c_wlev, c_w, c_klev, c_kz = column[5], column[6], column[7], column[8], column[9]
        n_levels = c_levels.shape[0]
        resuspend = c_params.shape[0] > 5 and c_params[5] > 0.0
        n = x.shape[0]
        for b in range(first_block, last_block):
            lo = b * BLOCK
            hi = min(n, lo + BLOCK)
            nb_ = hi - lo
            if mesh:
                cell_i, cell_j, streams = block_faces(
                    lo, hi, x, y, xe, ye, face_nodes, neighbours, hint, key
                )
            else:
                cell_i, cell_j, streams = block_scratch(lo, hi, x, y, xe, ye, invc, key)
            w4 = np.zeros(4)
            # The vertical walk of a step, for the particles of the block that take it: their
            # column's depth, u*, K_z and w profiles, substeps and their length, sampled once
            # per step (``column_walk``).
            nv = nb_ if vertical_mode else 0
            v_z = np.empty(nv)
            v_depth = np.empty(nv)
            v_inv = np.empty(nv)
            v_ustar = np.empty(nv)
            v_streams = np.empty(nv, np.uint64)
            v_on = np.zeros(nv, np.bool_)
            v_n = np.zeros(nv, np.int64)
            v_sub = np.empty(nv)
            kcols = np.zeros((nv, max(c_klev.shape[0], 1)))
            wcols = np.zeros((nv, max(c_wlev.shape[0], 1)))
            for k in range(nv):
                v_streams[k] = mix64(streams[k] ^ VERTICAL_SALT)
            v_before = np.empty(nv)
            v_mark = np.zeros(8 * ((nv + 7) // 8), np.int8)
            # the walk's tuples made once per block: made at each step's call, they took a
            # reference to each of their arrays every step
            v_walk = (v_z, v_depth, v_inv, v_ustar, v_streams, v_on, v_n, v_sub)
            v_profiles = (c_klev, kcols, c_wlev, wcols)
            v_scratch = (v_before, v_mark)
            # The block's state, gathered so that it stays in the L1 cache.
            bx = np.empty(nb_)
            by = np.empty(nb_)
            bm = np.empty(nb_)
            bst = np.empty(nb_, np.int8)
            for k in range(nb_):
                bx[k] = x[lo + k]
                by[k] = y[lo + k]
                bm[k] = m[lo + k]
                bst[k] = status[lo + k]
            for s in range(nsteps):
                t = t0 + s * dt
                t_end = t + dt
                v_most = 0
                for k in range(nv):
                    v_on[k] = False
                    v_n[k] = 0
                for k in range(nb_):
                    p = lo + k
                    st = bst[k]
                    if st == STATUS_WAITING:
                        if trel[p] >= t_end:
                            continue
                        st = STATUS_WATER
                        tstart = max(t, trel[p])
                    elif st == STATUS_WATER or st == STATUS_HELD_DRY:
                        tstart = t
                    elif vertical_mode and st == STATUS_ON_BED and resuspend:
                        # back to the water at the bed (``vertical.resuspension_chance``)
                        us = vertical.cell_frame_value(
                            c_ustar, tab_i[s, 0], tab_w[s, 0], cell_j[k], cell_i[k]
                        )
                        chance = vertical.resuspension_chance(us, c_params, t_end - t)
                        vs = v_streams[k]
                        if chance > 0.0 and open_unit(column_hash(vs, step0 + s, 0)) < chance:
                            sigma[p] = 0.0
                            bst[k] = STATUS_WATER
                        continue
                    else:
                        continue
                    h = t_end - tstart
                    if h <= 0.0:
                        bst[k] = st
                        continue
                    # A particle released inside the step has time weights of its own.
                    own_time = tstart != t
                    if own_time:
                        it, wt = time_weight(times, tstart)
                    else:
                        it = tab_i[s, 0]
                        wt = tab_w[s, 0]
                    iw = it if wt < 0.5 else it + 1
                    if wet.shape[0] == 1:
                        iw = 0
                    # wet[iw] is indexed in place: a view of it would take and drop a reference
                    # (two atomic operations on the array's shared count) at every particle-step.
                    pi = cell_i[k]
                    pj = cell_j[k]
                    if pi < 0 or wet[iw, pj, pi] == 0:
                        st = STATUS_HELD_DRY
                    elif st == STATUS_HELD_DRY:
                        st = STATUS_WATER
                    if decay_rate > 0.0:
                        pm = bm[k] * (math.exp(-decay_rate * h) if own_time else tab_decay[s])
                        bm[k] = pm
                        if pm <= DECAYED_FRACTION * m0[p]:
                            bst[k] = STATUS_DECAYED
                            continue
                    if st == STATUS_HELD_DRY:
                        bst[k] = st
                        continue
                    px = bx[k]
                    py = by[k]
                    if vertical_mode:
                        # the column's depth and u* where the step starts, read here with the
                        # particle's cell rather than after the horizontal step
                        hd = vertical.cell_frame_value(c_depth, it, wt, pj, pi)
                        us = vertical.cell_frame_value(c_ustar, it, wt, pj, pi)
                    else:
                        hd = 0.0
                        us = 0.0
                    lay = (1, 0, 0.0)
                    if vertical_mode and n_levels > 1:
                        lk, lw = layer_weight(c_levels, sigma[p], c_params, c_depth, it, wt, pj, pi)
                        lay = (n_levels, lk, lw)
                    # Where the particle sits on the cell-centre grid (K, drift) and on the
                    # velocity axes; located once and shared wherever the axes coincide.
                    ic, wxc = locate(cx, invc[2], px)
                    jc, wyc = locate(cy, invc[3], py)
                    if mesh:
                        u1, v1 = mesh_velocity(
                            xe, ye, face_nodes, U, V, it, wt, pi, px, py, w4, on_nodes, lay
                        )
                    else:
                        if centred:
                            iu, wxu, ju, wyu = ic, wxc, jc, wyc
                        else:
                            iu, wxu = locate(ux, invu[0], px)
                            ju, wyu = locate(uy, invu[1], py)
                        if vertical_mode and lay[0] > 1:
                            # in the particle's layer (layered velocity)
                            nl, lk, lw = lay
                            u1 = layer_bilinear(U, nl, it, wt, iu, ju, wxu, wyu, lk, lw)
                            if not shared:
                                iu, wxu = locate(vx, invu[2], px)
                                ju, wyu = locate(vy, invu[3], py)
                            v1 = layer_bilinear(V, nl, it, wt, iu, ju, wxu, wyu, lk, lw)
                        else:
                            u1 = bilinear(U, it, wt, iu, ju, wxu, wyu)
                            if shared:
                                v1 = bilinear(V, it, wt, iu, ju, wxu, wyu)
                            else:
                                iv, wxv = locate(vx, invu[2], px)
                                jv, wyv = locate(vy, invu[3], py)
                                v1 = bilinear(V, it, wt, iv, jv, wxv, wyv)
                    if geographic:
                        sx, sy = metres_to_grid(True, py)
                    else:
                        sx = 1.0
                        sy = 1.0
                    # Deterministic part.
                    if rk4:
                        if own_time:
                            itm, wtm = time_weight(times, tstart + 0.5 * h)
                            ite, wte = time_weight(times, tstart + h)
                        else:
                            itm = tab_i[s, 1]
                            wtm = tab_w[s, 1]
                            ite = tab_i[s, 2]
                            wte = tab_w[s, 2]
                        xm = px + 0.5 * h * u1 * sx
                        ym = py + 0.5 * h * v1 * sy
                        u2, v2 = stage_velocity(
                            mesh, on_nodes, shared, grid, topo, U, V, itm, wtm, pi, xm, ym, w4, lay
                        )
                        xm = px + 0.5 * h * u2 * sx
                        ym = py + 0.5 * h * v2 * sy
                        u3, v3 = stage_velocity(
                            mesh, on_nodes, shared, grid, topo, U, V, itm, wtm, pi, xm, ym, w4, lay
                        )
                        xm = px + h * u3 * sx
                        ym = py + h * v3 * sy
                        u4, v4 = stage_velocity(
                            mesh, on_nodes, shared, grid, topo, U, V, ite, wte, pi, xm, ym, w4, lay
                        )
                        ax_ = h * sx * (u1 + 2.0 * u2 + 2.0 * u3 + u4) / 6.0
                        ay_ = h * sy * (v1 + 2.0 * v2 + 2.0 * v3 + v4) / 6.0
                    else:
                        ax_ = u1 * h * sx
                        ay_ = v1 * h * sy
                    # Dispersion tensor at the start point.
                    if kgrid:
                        k1 = bilinear(K1, it, wt, ic, jc, wxc, wyc)
                        k2 = bilinear(K2, it, wt, ic, jc, wxc, wyc)
                    else:
                        k1 = kconst[0]
                        k2 = kconst[1]
                    k1 *= kconst[2] * KM[p]
                    k2 *= kconst[2] * KM[p]
                    stream = streams[k]
                    z1, z2 = normal_pair(stream, step0 + s)
                    if tensor:
                        # B = chol(2 h K): B Bᵀ = 2 h K with K = [[k1, k12], [k12, k2]]
                        k12 = bilinear(K3, it, wt, ic, jc, wxc, wyc) * (kconst[2] * KM[p])
                        l11 = math.sqrt(max(k1, 0.0))
                        l21 = k12 / l11 if l11 > 0.0 else 0.0
                        l22 = math.sqrt(max(k2 - l21 * l21, 0.0))
                        root = math.sqrt(2.0 * h)
                        dxm = root * l11 * z1
                        dym = root * (l21 * z1 + l22 * z2)
                        kxx = k1
                        kyy = k2
                    elif aligned:
                        speed = math.sqrt(u1 * u1 + v1 * v1)
                        if speed > 0.0:
                            ex = u1 / speed
                            ey = v1 / speed
                        else:
                            ex = 1.0
                            ey = 0.0
                            k1 = k2
                        aL = math.sqrt(2.0 * k1 * h) * z1
                        aT = math.sqrt(2.0 * k2 * h) * z2
                        dxm = aL * ex - aT * ey
                        dym = aL * ey + aT * ex
                        kxx = k2 + (k1 - k2) * ex * ex
                        kyy = k2 + (k1 - k2) * ey * ey
                    else:
                        dxm = math.sqrt(2.0 * k1 * h) * z1
                        dym = math.sqrt(2.0 * k2 * h) * z2
                        kxx = k1
                        kyy = k2
                    if drift and mesh:
                        # the drift is per face (piecewise constant)
                        dxm += frame_value(DX, it, wt, pi) * KM[p] * h
                        dym += frame_value(DY, it, wt, pi) * KM[p] * h
                    elif drift:
                        dxm += bilinear(DX, it, wt, ic, jc, wxc, wyc) * KM[p] * h
                        dym += bilinear(DY, it, wt, ic, jc, wxc, wyc) * KM[p] * h
                    qx = px + ax_ + dxm * sx
                    qy = py
                    if two_d:
                        qy = py + ay_ + dym * sy
                    if mesh:
                        edge, frac, placed, qx, qy, ci = meshwalk.trace_mesh_path(
                            xe,
                            ye,
                            face_nodes,
                            neighbours,
                            edge_open,
                            wet[iw, 0],
                            pi,
                            px,
                            py,
                            qx,
                            qy,
                            max_refl,
                        )
                        cj = 0
                    else:
                        edge, frac, placed, qx, qy, ci, cj = trace_path(
                            px, py, pi, pj, qx, qy, xe, ye, wet, iw, edges_mode, max_refl
                        )
                    tcross = tstart + h * frac
                    if edge < 0 and bridge and placed and not mesh:
                        edge = bridge_exit(
                            stream,
                            step0 + s,
                            px,
                            py,
                            qx,
                            qy,
                            sx,
                            sy,
                            kxx,
                            kyy,
                            h,
                            ndim,
                            edges_mode,
                            xe,
                            ye,
                            (pi, pj, ci, cj),
                        )
                        if edge >= 0:
                            tcross = tstart + 0.5 * h
                    if edge >= 0:
                        bst[k] = STATUS_EXITED + edge
                        texit[p] = tcross
                        bx[k] = qx
                        by[k] = qy
                        continue
                    if placed:
                        bx[k] = qx
                        by[k] = qy
                        cell_i[k] = ci
                        cell_j[k] = cj
                    if vertical_mode:
                        if hd >= vertical.MIN_COLUMN_DEPTH and sweep:
                            # the substeps are counted in ``column_sweep``; v_sub holds the
                            # step's length until then
                            v_on[k] = True
                            v_z[k] = sigma[p] * hd
                            v_depth[k] = hd
                            v_ustar[k] = us
                            v_sub[k] = h
                        elif hd >= vertical.MIN_COLUMN_DEPTH:
                            # (shallower: too shallow to step in, sigma is kept)
                            if c_klev.shape[0] > 0:
                                column_profile(c_kz, c_klev, it, wt, pj, pi, kcols, k)
                                longest = vertical.substep_longest(
                                    hd, us, c_params, c_klev, kcols, k
                                )
                            else:
                                longest = vertical.column_longest(hd, us, c_params)
                            if c_wlev.shape[0] > 0:
                                column_profile(c_w, c_wlev, it, wt, pj, pi, wcols, k)
                            nsub = column_substeps(h, longest)
                            v_on[k] = True
                            v_z[k] = sigma[p] * hd
                            v_depth[k] = hd
                            v_inv[k] = 1.0 / hd
                            v_ustar[k] = us
                            v_n[k] = nsub
                            v_sub[k] = h / nsub
                            v_most = max(v_most, nsub)
                    bst[k] = st
                if sweep:
                    column_sweep(
                        step0 + s,
                        lo,
                        sigma,
                        settling,
                        c_params,
                        v_walk,
                        v_profiles,
                        bst,
                        kz_mode,
                        v_scratch,
                    )
                elif vertical_mode:
                    column_walk(
                        v_most,
                        step0 + s,
                        lo,
                        sigma,
                        settling,
                        c_params,
                        v_walk,
                        v_profiles,
                        bst,
                        kz_mode,
                        with_w,
                    )
            for k in range(nb_):
                x[lo + k] = bx[k]
                y[lo + k] = by[k]
                m[lo + k] = bm[k]
                status[lo + k] = bst[k]
                if mesh:
                    hint[lo + k] = cell_i[k]

    return move


#: The topology tables and column fields of a call on a lattice, depth-averaged (never read
#: there): made once, so that a worker thread's copy of a call's fields
#: (``blocks.own_fields``) is kept from one call to the next.
_NO_TOPOLOGY = (np.zeros((1, 4), np.int64),) * 3
_NO_COLUMN = (
    np.zeros((1, 1, 1)),
    np.zeros((1, 1, 1)),
    np.zeros(4),
    np.zeros(1),
    np.zeros(0),
    np.zeros((1, 1, 1)),
    np.zeros(0),
    np.zeros((1, 1, 1)),
)


def advance(
    x,
    y,
    m,
    m0,
    trel,
    texit,
    status,
    flow,
    cells,
    disp,
    times,
    opts,
    edges_mode,
    t0,
    dt,
    nsteps,
    step0,
    key,
    decay_rate,
    topology=None,
    column=None,
    spread=None,
):
    """Advance every particle by ``nsteps`` steps of ``dt`` seconds from time ``t0``.

    Arguments
    ---------
    x, y, m, m0, trel, texit, status : particle state (see ``walkers.engine.state``), in place.
    flow : (ux, uy, U, vx, vy, V, inv) — velocity frames (nf, ny, nx) in m s-1 on their own axes;
        inv holds the inverse spacings of ux, uy, vx, vy (0 for non-uniform axes).
    cells : (xe, ye, wet, cx, cy, inv) — cell edges, wet mask (nf or 1, ny, nx), cell centres;
        inv holds inverse spacings of xe, ye, cx, cy.
    disp : (DX, DY, K1, K2, kconst, K3, KM) — drift (m s-1) and dispersion coefficient (m2 s-1)
        frames on cell centres; kconst = (k1, k2, multiplier), with k1 < 0 meaning "use the K1/K2
        grids"; K3 the off-diagonal K of a full tensor (opts[7] = 1), else unused; KM a further
        multiplier of K and the drift per particle (ensemble members; ones for a single run).
    times : frame times of the window (s).
    opts : int64 (ndim, scheme 0 Euler / 1 RK4, aligned, has_drift, bridge, max_reflections,
        geographic, tensor, mesh: 0 lattice, 1 mesh with node velocities, 2 with face velocities).
    edges_mode : int64 (west, east, south, north), 1 absorbing, 0 reflecting.
    t0, dt, nsteps : start time (s), step (s), number of steps.
    step0 : global index of the first step (keys the random numbers).
    key : uint64 key of the run's random stream.
    decay_rate : first-order decay rate (s-1).
    topology : on a mesh (face_nodes, neighbours, edge_open, hint): the face-node and neighbour
        tables, the open boundary of each edge (-1: coast or interior), and each particle's last
        face (-1: unknown), updated in place. On a mesh ``flow`` is (_, _, U, _, _, V, _) with
        U, V (nf, 1, nnode or nface), ``cells`` is (node_x, node_y, wet (nf, 1, nface), _, _, _),
        and the drift (nf, 1, nface) is per face.
    column : in three dimensions (sigma, w_s, depth, u*, params, levels, w heights, w,
        K_z heights, K_z): each particle's height above the bed as a fraction of the depth
        (updated in place) and settling velocity (m s-1, > 0 down); the depth (m) and bed shear
        velocity (m s-1) frames on the cells (nf or 1, ny, nx; (nf or 1, 1, nface) on a mesh);
        params = ``vertical.column_params`` (its first entry, the K_z mode, picks the compiled
        option); the layer centres of U and V (fractions of the depth, ascending; one entry:
        U and V are depth means, else they are layered frames (nf nl or nl, ny, nx), layer k
        of frame f at f nl + k); the heights and layered frames of the upward velocity w
        (m s-1; no heights: none) and of K_z (m2 s-1; mode 3) on the cells. None:
        depth-averaged.
    spread : a function ``spread(nblocks, run, fields)`` that calls ``run(first, last, fields)``
        for ranges of blocks of ``BLOCK`` particles that cover ``range(nblocks)`` once, on
        threads of its choosing, each with ``fields`` (the call's read-only fields, a nested
        tuple of arrays) or its own copy of them (``blocks.spread_blocks``); None: one call for
        all blocks on this thread. The kernel releases the GIL.

    Particles are independent, so any split over threads gives the same numbers bitwise.
    """
    ux, uy, vx, vy = flow[0], flow[1], flow[3], flow[4]
    cx, cy = cells[3], cells[4]
    shared = bool(np.array_equal(ux, vx) and np.array_equal(uy, vy))
    centred = bool(shared and np.array_equal(ux, cx) and np.array_equal(uy, cy))
    if topology is None:
        topology = (*_NO_TOPOLOGY, np.zeros(1, np.int64))
    vertical_mode = 0
    if column is None:
        column = (np.zeros(1), np.zeros(1), *_NO_COLUMN)
    else:
        vertical_mode = int(column[4][0]) + (4 if column[6].shape[0] > 0 else 0)
    move = compiled_mover(
        int(opts[0]),
        int(opts[1]),
        bool(opts[2]),
        bool(opts[3]),
        bool(opts[6]),
        bool(disp[4][0] < 0.0),
        bool(opts[7]),
        shared,
        centred,
        int(opts[8]) if opts.shape[0] > 8 else 0,
        vertical_mode,
    )
    nsteps = int(nsteps)
    # Time weights of every step of the call, for every range of blocks (``step_tables``).
    tables = (np.zeros((nsteps, 3), np.int64), np.zeros((nsteps, 3)), np.ones(nsteps))
    step_tables(times, float(t0), float(dt), nsteps, float(decay_rate), *tables)

    # The read-only fields of the call, apart from the per-particle arrays (the dispersion
    # multipliers, sigma and settling velocity, the last face), which ``spread`` may hand to
    # each thread as its own copy (``blocks.spread_blocks``).
    fields = (flow, cells, disp[:6], times, column[2:], topology[:3])

    def run(first, last, fields):
        flow, cells, disp_fields, times, column_fields, topology_fields = fields
        move(
            x,
            y,
            m,
            m0,
            trel,
            texit,
            status,
            flow,
            cells,
            (*disp_fields, disp[6]),
            times,
            edges_mode,
            float(t0),
            float(dt),
            int(nsteps),
            int(step0),
            np.uint64(key),
            float(decay_rate),
            int(opts[5]),
            bool(opts[4]),
            (*topology_fields, topology[3]),
            (column[0], column[1], *column_fields),
            tables,
            first,
            last,
        )

    nblocks = (x.shape[0] + BLOCK - 1) // BLOCK
    if spread is None:
        run(0, nblocks, fields)
    else:
        spread(nblocks, run, fields)


@nb.njit(**JIT)
def grid_mass(x, y, w, status, x0, dx, nx, y0, dy, ny, out, count):
    """Box counting: add weight w of each in-water particle to its output cell (serial, fixed
    order, so sums are bitwise reproducible). Cell (j, i) spans x0 + (i ± ½) dx.

    The cell is found with one multiply per axis by 1/dx (no division in the loop)."""
    inv_dx = 1.0 / dx
    inv_dy = 1.0 / dy
    for p in range(x.shape[0]):
        if status[p] != STATUS_WATER:
            continue
        fi = (x[p] - x0) * inv_dx + 0.5
        fj = (y[p] - y0) * inv_dy + 0.5
        if not (fi >= 0.0 and fj >= 0.0 and fi < nx and fj < ny):
            continue
        i = int(fi)
        j = int(fj)
        out[j, i] += w[p]
        count[j, i] += 1


@nb.njit(**JIT)
def fill_land(a, wet, sweeps, out):
    """Values of a (ny, nx) field carried from wet cells onto land, for finite differences that
    see no jump at a coast: ``out`` takes ``a`` on wet cells and NaN elsewhere (and where ``a`` is
    NaN); then, ``sweeps`` times, each NaN cell with a neighbour that is not NaN (above, below,
    left, right, as the previous sweep left them) takes their mean. Returns whether NaN cells
    remain (the caller gives them the mean of the rest). The numpy twin is ``twin.fill_land``:
    the same sums in the same order, so the two agree bitwise."""
    ny, nx = a.shape
    for j in range(ny):
        for i in range(nx):
            out[j, i] = a[j, i] if wet[j, i] else np.nan
    before = np.empty_like(out)
    for _ in range(sweeps):
        before[:] = out
        missing = False
        for j in range(ny):
            for i in range(nx):
                if not np.isnan(before[j, i]):
                    continue
                missing = True
                # the neighbours in the order of the twin's sum; beyond the grid a cell is its
                # own neighbour (NaN here), as numpy's "edge" padding makes it
                total = 0.0
                count = 0
                for k in range(4):
                    if k == 0:
                        v = before[max(j - 1, 0), i]
                    elif k == 1:
                        v = before[min(j + 1, ny - 1), i]
                    elif k == 2:
                        v = before[j, max(i - 1, 0)]
                    else:
                        v = before[j, min(i + 1, nx - 1)]
                    if np.isnan(v):
                        v = 0.0
                    else:
                        count += 1
                    total = v if k == 0 else total + v
                if count > 0:
                    out[j, i] = total / count
        if not missing:
            return False
    for j in range(ny):
        for i in range(nx):
            if np.isnan(out[j, i]):
                return True
    return False


@nb.njit(**JIT)
def depth_at_particles(x, y, depth, xe, ye, out):
    """Depth (m; cross-section m2 in 1-D) of the flow cell holding each particle (one thread:
    a lookup per particle; no kernel here compiles numba's parallel loops)."""
    invx = axis_inverse_spacing(xe)
    invy = axis_inverse_spacing(ye)
    for p in range(x.shape[0]):
        out[p] = depth[cell_index(ye, invy, y[p]), cell_index(xe, invx, x[p])]


@nb.njit(**JIT)
def water_moments(x, y, m, status, ox, oy, sx, sy):
    """Mass-weighted sums over the particles in water, in particle order (serial, so bitwise
    reproducible): (Σm, Σm·dx, Σm·dy, Σm·dx², Σm·dy², Σm·dx·dy) with dx = (x - ox)·sx and
    dy = (y - oy)·sy (sx, sy: metres per grid unit, or 1)."""
    s0 = 0.0
    s1x = 0.0
    s1y = 0.0
    sxx = 0.0
    syy = 0.0
    sxy = 0.0
    for p in range(x.shape[0]):
        if status[p] != STATUS_WATER:
            continue
        w = m[p]
        dx = (x[p] - ox) * sx
        dy = (y[p] - oy) * sy
        s0 += w
        s1x += w * dx
        s1y += w * dy
        sxx += w * dx * dx
        syy += w * dy * dy
        sxy += w * dx * dy
    return s0, s1x, s1y, sxx, syy, sxy


@nb.njit(**JIT)
def normals_for(key, particles, step):
    """The two normal deviates of each listed particle at a step (for tests and the twin)."""
    n = particles.shape[0]
    out = np.empty((n, 2))
    for k in range(n):
        z1, z2 = normal_pair(particle_stream(key, particles[k]), step)
        out[k, 0] = z1
        out[k, 1] = z2
    return out
