"""Stage 2, fields: the flow a run moves through — the :class:`~walkers.fields.base.FlowField`
contract, readers by file format (``netcdf/``), analytic flows, geodesy, CF time axes, and the
flow a scenario asks for.

May import: the base and ``walkers.scenario``.
"""
