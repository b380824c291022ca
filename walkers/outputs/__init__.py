"""Stage 5, outputs: a result Dataset to files and figures — the CF-NetCDF writer, readers of our
own files, CSV export, the summary text and the figures.

May import: the base and the stages before it (``scenario``, ``fields``, ``engine``, ``run``).
"""
