"""Settings of the test session.

The suite runs its files on every core (pytest-xdist, ``--dist loadfile``: one file's tests stay
in one process). On a fresh clone most of the time is numba compiling the kernels a file uses, so
the files that take longest start first: the processes then finish together instead of one
working through a long file alone at the end. Measured on a cold cache (common practice: longest
job first).
"""

from __future__ import annotations

import pytest

#: Test files, the longest first (cold numba cache); the others follow in their usual order.
LONGEST_FIRST = (
    "test_notebooks.py",
    "test_mesh_step.py",
    "test_vertical.py",
    "test_engine.py",
    "test_verification.py",
    "test_coast.py",
    "test_column.py",
    "test_bench.py",
    "test_trace_duality.py",
    "test_long_runs.py",
    "test_faults.py",
    "test_curvilinear.py",
    "test_attribution.py",
    "test_vertical_runs.py",
    "test_mesh_column.py",
    "test_bad_inputs.py",
)


def pytest_collection_modifyitems(items: list[pytest.Item]) -> None:
    """Put the tests of the longest files first, keeping the order within each file."""
    rank = {name: i for i, name in enumerate(LONGEST_FIRST)}
    items.sort(key=lambda item: rank.get(item.path.name, len(rank)))
