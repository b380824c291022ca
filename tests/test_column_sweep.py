"""The vertical walk in sweeps over a block (``kernels.column_sweep``, constant or parabolic K_z
without w) gives the numbers of the particle-by-particle walk (``kernels.column_walk``, the
walk the numpy twin follows) bit for bit: on random blocks with particles settling and rising,
columns from 0.5 to 10 m, steps long enough to reflect several times, and a depositing bed.
The failing twin: the same comparison against a walk without the drift dK_z/dz differs."""

import numpy as np
import pytest

from walkers.engine import kernels, vertical


def random_block(rng, mode, depositing):
    """A block of particles, their columns and the run's column parameters."""
    nk = int(rng.integers(1, 300))
    depth = rng.uniform(0.5, 10.0, nk)
    z = rng.uniform(0.0, 1.0, nk) * depth
    z[rng.random(nk) < 0.2] = 0.0  # on the bed's level, where the step reflects at once
    ustar = rng.uniform(0.0, 0.1, nk) * (rng.random(nk) > 0.1)
    step_length = rng.uniform(1.0, 600.0, nk)  # s; long steps reflect several times
    on = rng.random(nk) > 0.1
    streams = rng.integers(0, 2**63, nk).astype(np.uint64)
    settling = rng.normal(0.0, 1e-3, nk) * (rng.random(nk) > 0.3)  # m s-1, > 0 down
    params = vertical.column_params(
        mode,
        kz=rng.uniform(0.0, 0.1),
        deposition_velocity=rng.uniform(1e-4, 1e-3) if depositing else 0.0,
    )
    return depth, z, ustar, step_length, on, streams, settling, params


def walk(block, mode, step, sweep, drift=1.0):
    """(heights, in the water, status, sigma) after one step of either walk."""
    depth, z, ustar, step_length, on, streams, settling, params = block
    params = params.copy()
    params[vertical.P_DRIFT] = drift
    nk = z.size
    z, on = z.copy(), on.copy()
    status = np.ones(nk, np.int8)
    sigma = np.full(nk, -1.0)
    # K_z and w profiles: unused by these modes
    profiles = (np.zeros(0), np.zeros((nk, 1)), np.zeros(0), np.zeros((nk, 1)))
    if sweep:
        # the sweep turns the step's length into the substeps' length in place
        state = (
            z,
            depth,
            np.empty(nk),
            ustar,
            streams,
            on,
            np.zeros(nk, np.int64),
            step_length.copy(),
        )
        scratch = (np.empty(nk), np.zeros(8 * ((nk + 7) // 8), np.int8))
        kernels.column_sweep(
            step, 0, sigma, settling, params, state, profiles, status, mode, scratch
        )
    else:
        n = np.array(
            [
                kernels.column_substeps(
                    step_length[k], vertical.column_longest(depth[k], ustar[k], params)
                )
                if on[k]
                else 0
                for k in range(nk)
            ]
        )
        state = (z, depth, 1.0 / depth, ustar, streams, on, n, step_length / np.maximum(n, 1))
        most = int(n.max())
        kernels.column_walk(
            most, step, 0, sigma, settling, params, state, profiles, status, mode, False
        )
    return z, on, status, sigma


@pytest.mark.parametrize("mode", [vertical.KZ_CONSTANT, vertical.KZ_PARABOLIC])
def test_sweep_equals_the_particle_by_particle_walk_bit_for_bit(mode):
    rng = np.random.default_rng(20261203 + mode)
    deposited = 0
    for trial in range(60):
        block = random_block(rng, mode, depositing=trial % 2 == 1)
        step = int(rng.integers(0, 10_000))
        swept = walk(block, mode, step, sweep=True)
        walked = walk(block, mode, step, sweep=False)
        for a, b in zip(swept, walked, strict=True):
            np.testing.assert_array_equal(a, b)
        deposited += int(np.sum(block[4] & ~swept[1]))
    assert deposited > 0  # the deposition draw was exercised


def test_comparison_detects_a_different_walk():
    """The failing twin: without the drift dK_z/dz the parabolic walk ends elsewhere."""
    rng = np.random.default_rng(7)
    block = random_block(rng, vertical.KZ_PARABOLIC, depositing=False)
    swept = walk(block, vertical.KZ_PARABOLIC, 3, sweep=True)
    drift_free = walk(block, vertical.KZ_PARABOLIC, 3, sweep=False, drift=0.0)
    assert not np.array_equal(swept[0], drift_free[0])
