"""The reader of hydrodynamic-model NetCDF (CF conventions): roles, discovery of the file's
layout, lazy frames, and :func:`~walkers.fields.netcdf.open.open_flow`.

Part of stage 2 (fields). May import: the base, ``walkers.scenario`` and the rest of
``walkers.fields``.
"""
