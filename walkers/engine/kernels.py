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
function (Steele, Lea & Flood 2014, "Fast splittable pseudorandom number generators", OOPSLA);
normal deviates come from the Box–Muller transform (Box & Muller 1958, Ann. Math. Stat. 29).
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

JIT = {"cache": True, "error_model": "numpy", "nogil": True}

GOLDEN = np.uint64(0x9E3779B97F4A7C15)
MIX1 = np.uint64(0xBF58476D1CE4E5B9)
MIX2 = np.uint64(0x94D049BB133111EB)
TWO_PI = 2.0 * math.pi
INV_2_53 = 1.0 / 9007199254740992.0

# Random-number components per particle step.
COMP_NORMAL = 0  # and 1: the two uniforms of the Box-Muller pair
COMP_BRIDGE_X = 2
COMP_BRIDGE_Y = 3
COMPONENTS = 4

# WGS84 ellipsoid (NIMA TR8350.2, 2000).
WGS84_A = 6378137.0
WGS84_E2 = 6.69437999014e-3
DEG = math.pi / 180.0

STATUS_WAITING = 0
STATUS_WATER = 1
STATUS_STRANDED = 2
STATUS_DECAYED = 3
STATUS_LEFT = 4
DECAYED_FRACTION = 1e-15


@nb.njit(**JIT)
def mix64(z):
    """SplitMix64 output function: a bijective 64-bit hash (uint64 -> uint64)."""
    z = (z ^ (z >> np.uint64(30))) * MIX1
    z = (z ^ (z >> np.uint64(27))) * MIX2
    return z ^ (z >> np.uint64(31))


@nb.njit(**JIT)
def particle_stream(key, particle):
    """The per-particle base of the counter-based generator."""
    return mix64(np.uint64(key) ^ (np.uint64(particle) * GOLDEN))


@nb.njit(**JIT)
def uniform(stream, step, comp):
    """A uniform deviate in (0, 1] for (particle stream, step, component)."""
    counter = np.uint64(step) * np.uint64(COMPONENTS) + np.uint64(comp)
    z = mix64(stream + counter * GOLDEN)
    return (float(z >> np.uint64(11)) + 1.0) * INV_2_53


@nb.njit(**JIT)
def normal_pair(stream, step):
    """Two independent standard normal deviates (Box-Muller)."""
    u1 = uniform(stream, step, COMP_NORMAL)
    u2 = uniform(stream, step, COMP_NORMAL + 1)
    r = math.sqrt(-2.0 * math.log(u1))
    a = TWO_PI * u2
    return r * math.cos(a), r * math.sin(a)


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


@nb.njit(**JIT)
def locate(c, inv, v):
    """Interval index i and weight w with v ≈ c[i] + w (c[i+1] - c[i]), clamped to the axis."""
    n = c.shape[0]
    if n < 2 or v <= c[0]:
        return 0, 0.0
    if v >= c[n - 1]:
        return n - 2, 1.0
    if inv > 0.0:
        i = int((v - c[0]) * inv)
        if i > n - 2:
            i = n - 2
    else:
        lo = 0
        hi = n - 1
        while hi - lo > 1:
            mid = (lo + hi) >> 1
            if c[mid] <= v:
                lo = mid
            else:
                hi = mid
        i = lo
    return i, (v - c[i]) / (c[i + 1] - c[i])


@nb.njit(**JIT)
def cell_index(edges, inv, v):
    """Index of the cell (between consecutive edges) that holds v, clamped to the grid."""
    n = edges.shape[0] - 1
    i, w = locate(edges, inv, v)
    if w >= 1.0 and i + 1 < n:
        return i + 1
    return i


@nb.njit(**JIT)
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


@nb.njit(**JIT)
def sample(arr, ax, ay, invx, invy, it, wt, x, y):
    """Bilinear in space on (ax, ay), linear in time between frames it and it+1."""
    nx = arr.shape[2]
    ny = arr.shape[1]
    i, wx = locate(ax, invx, x)
    j, wy = locate(ay, invy, y)
    i1 = min(i + 1, nx - 1)
    j1 = min(j + 1, ny - 1)
    if arr.shape[0] == 1:
        it = 0
        wt = 0.0
    a = arr[it]
    f = (1.0 - wy) * ((1.0 - wx) * a[j, i] + wx * a[j, i1]) + wy * (
        (1.0 - wx) * a[j1, i] + wx * a[j1, i1]
    )
    if wt > 0.0:
        b = arr[it + 1]
        g = (1.0 - wy) * ((1.0 - wx) * b[j, i] + wx * b[j, i1]) + wy * (
            (1.0 - wx) * b[j1, i] + wx * b[j1, i1]
        )
        f = f + wt * (g - f)
    return f


@nb.njit(**JIT)
def metres_to_grid(geographic, y):
    """Grid units per metre along x and y (1 on projected grids; degrees per metre otherwise)."""
    if not geographic:
        return 1.0, 1.0
    s = math.sin(y * DEG)
    q = 1.0 - WGS84_E2 * s * s
    n_rad = WGS84_A / math.sqrt(q)
    m_rad = WGS84_A * (1.0 - WGS84_E2) / (q * math.sqrt(q))
    return 1.0 / (n_rad * math.cos(y * DEG) * DEG), 1.0 / (m_rad * DEG)


@nb.njit(**JIT)
def velocity(flow, it, wt, x, y):
    """Interpolated (u, v) in m s-1."""
    ux, uy, U, vx, vy, V = flow[0], flow[1], flow[2], flow[3], flow[4], flow[5]
    inv = flow[6]
    u = sample(U, ux, uy, inv[0], inv[1], it, wt, x, y)
    v = sample(V, vx, vy, inv[2], inv[3], it, wt, x, y)
    return u, v


@nb.njit(**JIT)
def is_wet(wet, xe, ye, invxe, invye, iw, x, y):
    """True when the cell holding (x, y) is water at wet-frame iw."""
    if wet.shape[0] == 1:
        iw = 0
    i = cell_index(xe, invxe, x)
    j = cell_index(ye, invye, y)
    return wet[iw, j, i] != 0


@nb.njit(**JIT)
def advect(flow, times, scheme, geographic, x, y, t, h):
    """Deterministic displacement over h seconds from (x, y, t), in grid units."""
    it, wt = time_weight(times, t)
    u1, v1 = velocity(flow, it, wt, x, y)
    sx, sy = metres_to_grid(geographic, y)
    if scheme == 0:
        return u1 * h * sx, v1 * h * sy
    itm, wtm = time_weight(times, t + 0.5 * h)
    u2, v2 = velocity(flow, itm, wtm, x + 0.5 * h * u1 * sx, y + 0.5 * h * v1 * sy)
    u3, v3 = velocity(flow, itm, wtm, x + 0.5 * h * u2 * sx, y + 0.5 * h * v2 * sy)
    ite, wte = time_weight(times, t + h)
    u4, v4 = velocity(flow, ite, wte, x + h * u3 * sx, y + h * v3 * sy)
    return (
        h * sx * (u1 + 2.0 * u2 + 2.0 * u3 + u4) / 6.0,
        h * sy * (v1 + 2.0 * v2 + 2.0 * v3 + v4) / 6.0,
    )


@nb.njit(**JIT)
def move_one(
    p,
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
):
    """Advance particle p over nsteps steps of dt from t0. See ``advance`` for the arguments."""
    ndim, scheme, aligned, has_drift, bridge, max_refl, geographic = (
        opts[0],
        opts[1],
        opts[2],
        opts[3],
        opts[4],
        opts[5],
        opts[6],
    )
    xe, ye, wet, cx, cy = cells[0], cells[1], cells[2], cells[3], cells[4]
    invc = cells[5]
    DX, DY, K1, K2 = disp[0], disp[1], disp[2], disp[3]
    kconst = disp[4]
    x_w = xe[0]
    x_e = xe[xe.shape[0] - 1]
    y_s = ye[0]
    y_n = ye[ye.shape[0] - 1]
    stream = particle_stream(key, p)
    px = x[p]
    py = y[p]
    pm = m[p]
    st = status[p]
    for s in range(nsteps):
        t = t0 + s * dt
        t_end = t + dt
        if st == STATUS_WAITING:
            if trel[p] >= t_end:
                continue
            st = STATUS_WATER
            tstart = max(t, trel[p])
        elif st == STATUS_WATER or st == STATUS_STRANDED:
            tstart = t
        else:
            break
        h = t_end - tstart
        if h <= 0.0:
            continue
        it, wt = time_weight(times, tstart)
        iw = it if wt < 0.5 else it + 1
        if not is_wet(wet, xe, ye, invc[0], invc[1], iw, px, py):
            st = STATUS_STRANDED
        elif st == STATUS_STRANDED:
            st = STATUS_WATER
        if decay_rate > 0.0:
            pm = pm * math.exp(-decay_rate * h)
            if pm <= DECAYED_FRACTION * m0[p]:
                st = STATUS_DECAYED
                break
        if st == STATUS_STRANDED:
            continue
        # Deterministic part.
        ax_, ay_ = advect(flow, times, scheme, geographic, px, py, tstart, h)
        # Dispersion tensor at the start point.
        if kconst[0] >= 0.0:
            k1 = kconst[0]
            k2 = kconst[1]
        else:
            k1 = sample(K1, cx, cy, invc[2], invc[3], it, wt, px, py)
            k2 = sample(K2, cx, cy, invc[2], invc[3], it, wt, px, py)
        k1 *= kconst[2]
        k2 *= kconst[2]
        z1, z2 = normal_pair(stream, step0 + s)
        sx, sy = metres_to_grid(geographic, py)
        if aligned:
            u, v = velocity(flow, it, wt, px, py)
            speed = math.sqrt(u * u + v * v)
            if speed > 0.0:
                ex = u / speed
                ey = v / speed
            else:
                ex = 1.0
                ey = 0.0
                k1 = k2
            aL = math.sqrt(2.0 * k1 * h) * z1
            aT = math.sqrt(2.0 * k2 * h) * z2
            nxm = aL * ex - aT * ey
            nym = aL * ey + aT * ex
            kxx = k2 + (k1 - k2) * ex * ex
            kyy = k2 + (k1 - k2) * ey * ey
        else:
            nxm = math.sqrt(2.0 * k1 * h) * z1
            nym = math.sqrt(2.0 * k2 * h) * z2
            kxx = k1
            kyy = k2
        dxm = nxm
        dym = nym
        if has_drift:
            dxm += sample(DX, cx, cy, invc[2], invc[3], it, wt, px, py) * h
            dym += sample(DY, cx, cy, invc[2], invc[3], it, wt, px, py) * h
        qx = px + ax_ + dxm * sx
        qy = py
        if ndim == 2:
            qy = py + ay_ + dym * sy
        # Edges and coast.
        left = -1
        tcross = t_end
        placed = False
        for _ in range(max_refl):
            if qx < x_w:
                if edges_mode[0] == 1:
                    left = 0
                    tcross = tstart + h * (px - x_w) / (px - qx)
                    break
                qx = 2.0 * x_w - qx
            if qx > x_e:
                if edges_mode[1] == 1:
                    left = 1
                    tcross = tstart + h * (x_e - px) / (qx - px)
                    break
                qx = 2.0 * x_e - qx
            if ndim == 2:
                if qy < y_s:
                    if edges_mode[2] == 1:
                        left = 2
                        tcross = tstart + h * (py - y_s) / (py - qy)
                        break
                    qy = 2.0 * y_s - qy
                if qy > y_n:
                    if edges_mode[3] == 1:
                        left = 3
                        tcross = tstart + h * (y_n - py) / (qy - py)
                        break
                    qy = 2.0 * y_n - qy
            if qx < x_w or qx > x_e or qy < y_s or qy > y_n:
                continue
            ci = cell_index(xe, invc[0], qx)
            cj = cell_index(ye, invc[1], qy)
            iw2 = 0 if wet.shape[0] == 1 else iw
            if wet[iw2, cj, ci] != 0:
                placed = True
                break
            pi = cell_index(xe, invc[0], px)
            pj = cell_index(ye, invc[1], py)
            reflected = False
            if ci != pi and wet[iw2, pj, ci] == 0:
                xf = xe[pi + 1] if ci > pi else xe[pi]
                qx = 2.0 * xf - qx
                reflected = True
            if cj != pj and wet[iw2, cj, pi] == 0:
                yf = ye[pj + 1] if cj > pj else ye[pj]
                qy = 2.0 * yf - qy
                reflected = True
            if not reflected:
                if ci != pi:
                    xf = xe[pi + 1] if ci > pi else xe[pi]
                    qx = 2.0 * xf - qx
                if cj != pj:
                    yf = ye[pj + 1] if cj > pj else ye[pj]
                    qy = 2.0 * yf - qy
        if left < 0 and bridge:
            # Brownian-bridge probability that the path crossed an absorbing edge in the step.
            if placed:
                dxw = (px - x_w) / sx
                dqw = (qx - x_w) / sx
                dxe = (x_e - px) / sx
                dqe = (x_e - qx) / sx
                if edges_mode[0] == 1 and kxx > 0.0 and dxw * dqw < 20.0 * kxx * h:
                    if uniform(stream, step0 + s, COMP_BRIDGE_X) < math.exp(-dxw * dqw / (kxx * h)):
                        left = 0
                elif edges_mode[1] == 1 and kxx > 0.0 and dxe * dqe < 20.0 * kxx * h:
                    if uniform(stream, step0 + s, COMP_BRIDGE_X) < math.exp(-dxe * dqe / (kxx * h)):
                        left = 1
                if left < 0 and ndim == 2:
                    dys = (py - y_s) / sy
                    dqs = (qy - y_s) / sy
                    dyn = (y_n - py) / sy
                    dqn = (y_n - qy) / sy
                    if edges_mode[2] == 1 and kyy > 0.0 and dys * dqs < 20.0 * kyy * h:
                        if uniform(stream, step0 + s, COMP_BRIDGE_Y) < math.exp(
                            -dys * dqs / (kyy * h)
                        ):
                            left = 2
                    elif edges_mode[3] == 1 and kyy > 0.0 and dyn * dqn < 20.0 * kyy * h:
                        if uniform(stream, step0 + s, COMP_BRIDGE_Y) < math.exp(
                            -dyn * dqn / (kyy * h)
                        ):
                            left = 3
                if left >= 0:
                    tcross = tstart + 0.5 * h
        if left >= 0:
            st = STATUS_LEFT + left
            texit[p] = tcross
            px = qx
            py = qy
            break
        if placed:
            px = qx
            py = qy
    x[p] = px
    y[p] = py
    m[p] = pm
    status[p] = st


@nb.njit(parallel=True, **JIT)
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
):
    """Advance every particle by ``nsteps`` steps of ``dt`` seconds from time ``t0``.

    Arguments
    ---------
    x, y, m, m0, trel, texit, status : particle state (see ``walkers.engine.state``), in place.
    flow : (ux, uy, U, vx, vy, V, inv) — velocity frames (nf, ny, nx) in m s-1 on their own axes;
        inv holds the inverse spacings of ux, uy, vx, vy (0 for non-uniform axes).
    cells : (xe, ye, wet, cx, cy, inv) — cell edges, wet mask (nf or 1, ny, nx), cell centres;
        inv holds inverse spacings of xe, ye, cx, cy.
    disp : (DX, DY, K1, K2, kconst) — drift (m s-1) and dispersion coefficient (m2 s-1) frames on
        cell centres; kconst = (k1, k2, multiplier), with k1 < 0 meaning "use the K1/K2 grids".
    times : frame times of the window (s).
    opts : int64 (ndim, scheme 0 Euler / 1 RK4, aligned, has_drift, bridge, max_reflections,
        geographic).
    edges_mode : int64 (west, east, south, north), 1 absorbing, 0 reflecting.
    t0, dt, nsteps : start time (s), step (s), number of steps.
    step0 : global index of the first step (keys the random numbers).
    key : uint64 key of the run's random stream.
    decay_rate : first-order decay rate (s-1).
    """
    for p in nb.prange(x.shape[0]):
        move_one(
            p,
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
        )


@nb.njit(**JIT)
def grid_mass(x, y, w, status, x0, dx, nx, y0, dy, ny, out, count):
    """Box counting: add weight w of each in-water particle to its output cell (serial, fixed
    order, so sums are bitwise reproducible). Cell (j, i) spans x0 + (i ± ½) dx."""
    for p in range(x.shape[0]):
        if status[p] != STATUS_WATER:
            continue
        fi = (x[p] - x0) / dx + 0.5
        fj = (y[p] - y0) / dy + 0.5
        if fi < 0.0 or fj < 0.0:
            continue
        i = int(fi)
        j = int(fj)
        if i >= nx or j >= ny:
            continue
        out[j, i] += w[p]
        count[j, i] += 1


@nb.njit(parallel=True, **JIT)
def depth_at_particles(x, y, depth, xe, ye, out):
    """Depth (m; cross-section m2 in 1-D) of the flow cell holding each particle."""
    invx = axis_inverse_spacing(xe)
    invy = axis_inverse_spacing(ye)
    for p in nb.prange(x.shape[0]):
        out[p] = depth[cell_index(ye, invy, y[p]), cell_index(xe, invx, x[p])]


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
