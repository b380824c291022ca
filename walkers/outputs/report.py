"""``walkers report``: one self-contained HTML file of a run, to read in a browser and print.

The page holds the caution, the summary (the same text ``walkers run`` prints), the mass budget,
a table per receptor, the figures (PNG inlined as data URIs), the scenario text and the
provenance (tool version, seed, input files with their checksums). It loads nothing from the
network: no scripts, fonts or styles from elsewhere. A few lines of inline script only count the
figures that the browser decoded into ``data-figures-shown`` on the page (the tests read it).
"""

from __future__ import annotations

import base64
import html
import json
import os
import tempfile
from pathlib import Path

import numpy as np
import xarray as xr

import walkers
from walkers.errors import InputError
from walkers.files import check_target
from walkers.outputs.display import (
    after_start,
    concentration_unit,
    output_times,
    utc,
)
from walkers.outputs.export import write_text
from walkers.outputs.figures import report_figures
from walkers.outputs.reader import open_results
from walkers.outputs.summary import budget_rows, receptor_lines, summary_text

_STYLE = """
body { font-family: sans-serif; max-width: 60em; margin: 1.5em auto; padding: 0 1em;
       color: #222; line-height: 1.4; }
h1 { font-size: 1.5em; } h2 { font-size: 1.2em; border-bottom: 1px solid #ccc; }
.caution { border: 2px solid #b5432f; background: #fbeeea; padding: 0.6em 1em; }
table { border-collapse: collapse; margin: 0.5em 0; }
td, th { border: 1px solid #bbb; padding: 0.2em 0.6em; text-align: left; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
pre { background: #f5f5f5; padding: 0.6em; overflow-x: auto; font-size: 0.85em;
      white-space: pre-wrap; }
figure { margin: 1em 0; page-break-inside: avoid; } figure img { max-width: 100%; }
@media print { body { max-width: none; margin: 0; } h2 { page-break-after: avoid; } }
"""

_COUNT_FIGURES = """
window.addEventListener("load", function () {
  var shown = 0;
  document.querySelectorAll("figure img").forEach(function (img) {
    if (img.complete && img.naturalWidth > 0) { shown += 1; }
  });
  document.body.setAttribute("data-figures-shown", String(shown));
});
"""

_CAPTIONS = {
    "concentration_max.png": "Maximum concentration over the run.",
    "receptors.png": "Concentration at the receptors, with their thresholds.",
    "mass_budget.png": "Mass budget over the run.",
    "deposit.png": "Deposit on the bed at the end of the run.",
    "receptor_profiles.png": "Vertical profiles of concentration at the receptors.",
    "section.png": "Vertical section of concentration along the scenario's line.",
}


def _e(text: object) -> str:
    return html.escape(str(text))


def _table(head: list[str], rows: list[list[str]], numeric_from: int = 1) -> str:
    out = ["<table><tr>" + "".join(f"<th>{_e(h)}</th>" for h in head) + "</tr>"]
    for row in rows:
        cells = [
            f'<td class="num">{_e(c)}</td>' if k >= numeric_from else f"<td>{_e(c)}</td>"
            for k, c in enumerate(row)
        ]
        out.append("<tr>" + "".join(cells) + "</tr>")
    return "\n".join(out) + "</table>"


def _budget_table(ds: xr.Dataset) -> str:
    rows = [[name, f"{kg:.6g}"] for name, kg in budget_rows(ds)]
    when = utc(output_times(ds)[-1])
    return f"<p>At the end of the run, {_e(when)}.</p>" + _table(["account", "mass (kg)"], rows)


def _receptor_table(ds: xr.Dataset, units: str | None) -> str:
    unit = concentration_unit(ds, units)
    times = output_times(ds)
    rows = []
    for k, name in enumerate(ds["receptor"].values):
        series = np.asarray(ds["receptor_concentration"].values[k], dtype=np.float64)
        peak = float(np.nanmax(series)) if np.isfinite(series).any() else 0.0
        when = after_start(ds, times[int(np.nanargmax(series))]) if peak > 0 else "-"
        radius = float(ds["receptor_radius"].values[k]) if "receptor_radius" in ds.coords else 0
        rows.append(
            [
                str(name),
                f"{float(ds['receptor_x'].values[k]):.1f}",
                f"{float(ds['receptor_y'].values[k]):.1f}",
                f"{radius:g}",
                unit.text(peak) if peak > 0 else "not reached",
                when,
            ]
        )
    head = ["receptor", "x", "y", "radius (m)", "peak", "time of the peak (UTC)"]
    details = "\n".join(receptor_lines(ds, unit))
    return _table(head, rows) + f"<pre>{_e(details)}</pre>"


def _provenance(ds: xr.Dataset) -> str:
    keys = ("walkers_version", "history", "seed", "run_start", "run_end", "source")
    rows = [[k, str(ds.attrs[k])] for k in keys if k in ds.attrs]
    files = []
    try:
        files = json.loads(str(ds.attrs.get("input_files", "[]")))
    except json.JSONDecodeError:
        pass
    out = _table(["attribute", "value"], rows, numeric_from=9)
    if files:
        frows = [[f.get("path", ""), str(f.get("bytes", "")), f.get("sha256", "")] for f in files]
        out += "<p>Input files:</p>" + _table(["path", "bytes", "SHA-256"], frows, numeric_from=1)
    return out


def _figures(ds: xr.Dataset, units: str | None) -> str:
    parts = []
    with tempfile.TemporaryDirectory(prefix="walkers_report_") as folder:
        for path in report_figures(ds, folder, units):
            data = base64.b64encode(path.read_bytes()).decode("ascii")
            caption = _CAPTIONS.get(path.name, path.stem)
            parts.append(
                f'<figure><img alt="{_e(caption)}" src="data:image/png;base64,{data}">'
                f"<figcaption>{_e(caption)}</figcaption></figure>"
            )
    return "\n".join(parts)


def report_html(ds: xr.Dataset, units: str | None = None) -> str:
    """The report page of a run result, as one HTML string."""
    if "member" in ds.dims:
        raise InputError("walkers report takes the result of a run, not of an ensemble")
    if "concentration" not in ds or "budget_released" not in ds:
        raise InputError("not a walkers run result: no 'concentration' or mass budget")
    title = str(ds.attrs.get("title") or "walkers run")
    body = [
        f"<h1>{_e(title)}</h1>",
        f'<p class="caution"><strong>Caution.</strong> {_e(walkers.CAUTION)}</p>',
        "<h2>Summary</h2>",
        f"<pre>{_e(summary_text(ds, units))}</pre>",
        "<h2>Mass budget</h2>",
        _budget_table(ds),
    ]
    if ds.sizes.get("receptor", 0):
        body += ["<h2>Receptors</h2>", _receptor_table(ds, units)]
    body += ["<h2>Figures</h2>", _figures(ds, units)]
    body += ["<h2>Scenario</h2>", f"<pre>{_e(ds.attrs.get('scenario', '') or '-')}</pre>"]
    body += ["<h2>Provenance</h2>", _provenance(ds)]
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        f"<title>{_e(title)}</title><style>{_STYLE}</style></head>\n<body>\n"
        + "\n".join(body)
        + f"\n<script>{_COUNT_FIGURES}</script>\n</body></html>\n"
    )


def write_report(
    result: xr.Dataset | str | os.PathLike,
    path: str | os.PathLike,
    *,
    overwrite: bool = False,
    units: str | None = None,
) -> Path:
    """Write the report of a run result (Dataset or file) as HTML, atomically; return the path."""
    path = Path(path)
    check_target(path, overwrite)
    ds = result if isinstance(result, xr.Dataset) else open_results(result)
    return write_text(path, report_html(ds, units), overwrite=overwrite)
