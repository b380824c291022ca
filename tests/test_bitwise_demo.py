"""The estuary demo gives bitwise the results recorded in ``tests/data/demo_reference.json``.

The demo scenario (``scenarios/saltmarsh_estuary.toml``, with fewer particles so the test stays
short) is run in-process and every variable and coordinate of the result Dataset is compared with
the reference: shape, dtype and the sha256 of its raw bytes (strings: of their UTF-8 text). The
global attributes are compared as text, except those that name files on this machine.

Rewriting the reference is legitimate only for a deliberate change of results (a fix or a change
of the step, the random numbers, the reductions or the demo scenario), recorded in CHANGELOG.md
with the reason. A refactor (moving code, splitting modules) must leave it alone. To rewrite it,
from the repository root::

    python tests/test_bitwise_demo.py

and commit ``tests/data/demo_reference.json`` with the change that explains it.
"""

from __future__ import annotations

import hashlib
import json
import sys
import tomllib
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

REPO = Path(__file__).resolve().parents[1]
SCENARIOS = REPO / "scenarios"
REFERENCE = Path(__file__).resolve().parent / "data" / "demo_reference.json"
PARTICLES = 2000  # of the demo's 20 000: the same code paths in a tenth of the time
#: Attributes that name files on the machine that ran the demo, so differ between checkouts.
MACHINE_ATTRS = {"input_files", "source"}


def demo_result() -> xr.Dataset:
    """The estuary demo with fewer particles, run in-process."""
    from walkers import load_scenario, simulate_scenario

    raw = tomllib.loads((SCENARIOS / "saltmarsh_estuary.toml").read_text(encoding="utf-8"))
    raw["releases"][0]["particles"] = PARTICLES
    return simulate_scenario(load_scenario(raw, base_dir=SCENARIOS))


def fingerprint(values: np.ndarray) -> dict[str, Any]:
    """Shape, dtype and sha256 of the raw bytes of an array (strings: of their UTF-8 text)."""
    values = np.asarray(values)
    if values.dtype.kind in "OUS":
        raw = "\x1f".join(map(str, values.ravel().tolist())).encode("utf-8")
    else:
        raw = np.ascontiguousarray(values).tobytes()
    return {
        "shape": list(values.shape),
        "dtype": str(values.dtype),
        "sha256": hashlib.sha256(raw).hexdigest(),
    }


def describe(ds: xr.Dataset) -> dict[str, Any]:
    """Fingerprints of every variable and coordinate, and the global attributes as text."""
    return {
        "variables": {str(k): fingerprint(ds[k].values) for k in sorted(map(str, ds.variables))},
        "attrs": {str(k): str(v) for k, v in sorted(ds.attrs.items()) if k not in MACHINE_ATTRS},
    }


def write_reference() -> None:
    """Run the demo and write its fingerprints to ``tests/data/demo_reference.json``."""
    REFERENCE.parent.mkdir(parents=True, exist_ok=True)
    text = json.dumps(describe(demo_result()), indent=1, sort_keys=True)
    REFERENCE.write_text(text + "\n", encoding="utf-8")


def test_demo_results_are_bitwise_those_of_the_reference() -> None:
    reference = json.loads(REFERENCE.read_text(encoding="utf-8"))
    now = describe(demo_result())
    assert sorted(now["variables"]) == sorted(reference["variables"])
    differing = [
        name for name, print_ in reference["variables"].items() if now["variables"][name] != print_
    ]
    assert differing == [], f"variables not bitwise equal to the reference: {differing}"
    assert now["attrs"] == reference["attrs"]


def test_a_changed_value_changes_the_fingerprint() -> None:
    values = np.linspace(0.0, 1.0, 7)
    nudged = values.copy()
    nudged[3] = np.nextafter(nudged[3], 2.0)
    assert fingerprint(values) != fingerprint(nudged)
    assert fingerprint(values) != fingerprint(values.astype(np.float32))
    assert fingerprint(values) != fingerprint(values.reshape(7, 1))


if __name__ == "__main__":
    write_reference()
    sys.exit(0)
