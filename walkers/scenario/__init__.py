"""Stage 1, scenario: the TOML scenario file checked at the door and turned into typed run objects
in SI units (schema, parsing, units, run objects, template and reference page).

May import: the base (``walkers``, ``walkers.errors``, ``walkers.files``) only.
"""
