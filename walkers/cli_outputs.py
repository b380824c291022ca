"""The commands that turn a result file into what people read and hand on: ``walkers plot``,
``walkers report`` and ``walkers export``.

A front end beside :mod:`walkers.cli`, which adds these commands to its group and wraps them in
its error handling (clean messages and exit codes).
"""

from __future__ import annotations

from pathlib import Path

import click

#: The concentration unit people read (summary, figures, CSV, GeoJSON, report); files keep SI.
UNITS_OPTION = click.option(
    "--units",
    metavar="UNIT",
    help="Concentration unit shown, e.g. ug/L [default: the scenario thresholds' unit, else mg/L].",
)


@click.command("plot", short_help="Redraw the figures of a result file.")
@click.argument("result", type=click.Path(dir_okay=False, path_type=Path))
@click.option(
    "--outdir",
    type=click.Path(file_okay=False, path_type=Path),
    help="Folder for the figures (default: <result>_figures).",
)
@click.option(
    "--time",
    "times",
    multiple=True,
    type=float,
    help="Also map these times (hours after the run start; repeatable).",
)
@UNITS_OPTION
def plot_command(result: Path, outdir: Path | None, times, units: str | None) -> None:
    """Draw maps, receptor series, the mass budget and an animation from a RESULT file."""
    from walkers.outputs.figures import plot_results

    outdir = outdir or result.with_name(result.stem + "_figures")
    outdir.mkdir(parents=True, exist_ok=True)
    chosen = [3600.0 * t for t in times] or None
    for p in plot_results(result, outdir, times=chosen, units=units):
        click.echo(f"wrote {p}")


@click.command("report", short_help="Write a self-contained HTML report of a run.")
@click.argument("result", type=click.Path(dir_okay=False, path_type=Path))
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    help="HTML file to write [default: <result>_report.html].",
)
@UNITS_OPTION
@click.option("--overwrite", is_flag=True, help="Replace the HTML file if it exists.")
def report_command(result: Path, output: Path | None, units: str | None, overwrite: bool) -> None:
    """Write one self-contained HTML report of a run RESULT (summary, budget, receptors, figures,
    scenario, provenance), readable offline and printable."""
    from walkers.outputs.report import write_report

    target = output or result.with_name(result.stem + "_report.html")
    click.echo(f"wrote {write_report(result, target, overwrite=overwrite, units=units)}")


@click.command("export", short_help="Write receptor CSV, GeoJSON and GeoTIFF of a result.")
@click.argument("result", type=click.Path(dir_okay=False, path_type=Path))
@click.argument("csv", type=click.Path(dir_okay=False, path_type=Path), required=False)
@click.option(
    "--geojson",
    type=click.Path(dir_okay=False, path_type=Path),
    help="GeoJSON (WGS 84 lon/lat) of threshold contours and receptors "
    "[default: <result>_layers.geojson].",
)
@click.option(
    "--geotiff",
    type=click.Path(dir_okay=False, path_type=Path),
    help="GeoTIFF of the maximum concentration (kg m-3), runs only "
    "[default: <result>_concentration_max.tif]; a 3-D run with a depositing bed also gets "
    "<result>_deposit.tif (the deposit at the end, kg m-2).",
)
@click.option("--no-gis", is_flag=True, help="Write only the CSV, no GeoJSON or GeoTIFF.")
@UNITS_OPTION
@click.option("--overwrite", is_flag=True, help="Replace files that exist.")
def export_command(
    result: Path,
    csv: Path | None,
    geojson: Path | None,
    geotiff: Path | None,
    no_gis: bool,
    units: str | None,
    overwrite: bool,
) -> None:
    """Receptor series of RESULT to CSV (if CSV is given) and its GIS layers."""
    from walkers.outputs.export import receptors_to_csv
    from walkers.outputs.gis import write_geojson, write_geotiff
    from walkers.outputs.reader import open_results

    ds = open_results(result, stream=True)
    written = []
    if csv is not None:
        written.append(receptors_to_csv(ds, csv, overwrite=overwrite, units=units, inputs=[result]))
    if not no_gis:
        stem = result.with_name(result.stem)
        target = geojson or Path(f"{stem}_layers.geojson")
        written.append(write_geojson(ds, target, overwrite=overwrite, units=units, inputs=[result]))
        if "concentration_max" in ds:
            tif = geotiff or Path(f"{stem}_concentration_max.tif")
            written.append(write_geotiff(ds, tif, overwrite=overwrite, inputs=[result]))
        if "deposit" in ds:
            tif = Path(f"{stem}_deposit.tif")
            written.append(
                write_geotiff(ds, tif, overwrite=overwrite, inputs=[result], variable="deposit")
            )
    for path in written:
        click.echo(f"wrote {path}")


OUTPUT_COMMANDS = [plot_command, report_command, export_command]
