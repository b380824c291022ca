"""walkers: random-walk particle tracking for releases in estuaries, canals and rivers.

The package turns a velocity field (hydrodynamic-model NetCDF or an analytic flow), dispersion
coefficients and a release description into concentration fields, receptor time series and a mass
budget. See README.md for users and DEVELOPERS.md for contributors.
"""

__version__ = "0.1.0"

CAUTION = (
    "Planning and screening aid only: results are only as good as the flow field and the "
    "dispersion coefficients behind them. Local regulations, the authorities in charge and "
    "licensed professionals decide."
)
