"""Stage 4, run: one run from start to result Dataset — the driver, the reductions at output times
(concentration, receptors, mass budget, moments), the field store, checkpoints, and the scenario
runner.

May import: the base, ``walkers.scenario``, ``walkers.fields`` and ``walkers.engine``.
"""
