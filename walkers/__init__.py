"""walkers: random-walk particle tracking for releases in estuaries, canals and rivers.

The package turns a velocity field (hydrodynamic-model NetCDF or an analytic flow), dispersion
coefficients and a release description into concentration fields, receptor time series and a mass
budget. See README.md for users and DEVELOPERS.md for contributors.

The stages, in the order a run goes through them (a module imports only from its own stage and
the ones before it): the base (this module, ``errors``, ``files``), ``scenario``, ``fields``,
``engine``, ``run``, ``outputs``, ``attribution``, ``ensemble``, ``verify``; then the front
ends ``api``, ``cli`` and ``bench``.

The public Python API is importable from here: :func:`load_scenario`, :func:`simulate_scenario`,
:func:`simulate`, :func:`open_flow`, :func:`open_results` (and :func:`run_scenario`); for
source attribution :func:`load_trace_scenario` and :func:`trace_scenario`. They are
imported on first use, so ``import walkers`` (and the command line) stays quick.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

CAUTION = (
    "Planning and screening aid only: results are only as good as the flow field and the "
    "dispersion coefficients behind them. Local regulations, the authorities in charge and "
    "licensed professionals decide."
)

#: Public name -> the module that defines it.
_API = {
    "load_scenario": "walkers.scenario.load",
    "simulate_scenario": "walkers.run.runner",
    "simulate": "walkers.run.simulate",
    "open_flow": "walkers.fields.netcdf.open",
    "open_results": "walkers.outputs.reader",
    "run_scenario": "walkers.api",
    "load_trace_scenario": "walkers.scenario.trace",
    "trace_scenario": "walkers.attribution.scenario_run",
}

__all__ = [
    "CAUTION",
    "__version__",
    "load_scenario",
    "load_trace_scenario",
    "open_flow",
    "open_results",
    "run_scenario",
    "simulate",
    "simulate_scenario",
    "trace_scenario",
]

if TYPE_CHECKING:
    from walkers.api import run_scenario
    from walkers.attribution.scenario_run import trace_scenario
    from walkers.fields.netcdf.open import open_flow
    from walkers.outputs.reader import open_results
    from walkers.run.runner import simulate_scenario
    from walkers.run.simulate import simulate
    from walkers.scenario.load import load_scenario
    from walkers.scenario.trace import load_trace_scenario


def __getattr__(name: str) -> Any:
    if name in _API:
        return getattr(importlib.import_module(_API[name]), name)
    raise AttributeError(f"module 'walkers' has no attribute {name!r}")
