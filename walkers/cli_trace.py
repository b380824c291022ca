"""``walkers trace``: where did the water of a sample come from? A front end beside
:mod:`walkers.cli`, which adds the command to its group and wraps it in its error handling."""

from __future__ import annotations

from pathlib import Path

import click


@click.command("trace", short_help="Trace samples back in time and rank candidate sources.")
@click.argument("scenario", type=click.Path(dir_okay=False, path_type=Path))
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    help="NetCDF file to write [default: the scenario's output.file].",
)
@click.option(
    "--particles",
    type=click.IntRange(min=1),
    help="Backward particles per detection [default: attribution.particles].",
)
@click.option("--overwrite", is_flag=True, help="Replace the output file if it exists.")
@click.option("--no-plot", "plot", flag_value=False, default=True, help="Skip the figures.")
def trace_command(
    scenario: Path, output: Path | None, particles: int | None, overwrite: bool, plot: bool
) -> None:
    """Move particles backward in time from each detection of a trace SCENARIO (TOML), write
    the influence fields and the ranking of the candidate sources (CF-1.8 NetCDF), draw the
    influence maps and the ranking, and print the ranking.

    This ranks possibilities and proves nothing.
    """
    from walkers.attribution.output import write_trace
    from walkers.attribution.scenario_run import trace_scenario
    from walkers.attribution.summary import ranking_text
    from walkers.scenario.trace import load_trace_scenario

    question = load_trace_scenario(scenario)
    target = output or question.run.output_path
    ds = trace_scenario(question, particles=particles)
    write_trace(ds, target, overwrite=overwrite, inputs=[scenario])
    click.echo(f"wrote {target}")
    if plot:
        from walkers.attribution.figures import trace_figures

        for p in trace_figures(ds, target.with_name(target.stem + "_figures")):
            click.echo(f"wrote {p}")
    click.echo(ranking_text(ds))


TRACE_COMMANDS = [trace_command]
