"""The ``walkers`` command line: a thin layer over the Python API.

Every command turns :class:`walkers.errors.InputError` into a one-line message on stderr and exit
code 2; a run that fails for another known reason (a damaged flow file, a full disk, a folder that
refuses writing) exits 1; anything unexpected is reported as a defect (exit 3) with the traceback
only when WALKERS_DEBUG=1 is set.
"""

from __future__ import annotations

import functools
import os
import sys
import time
import traceback
from pathlib import Path
from typing import TYPE_CHECKING, Any

import click

import walkers
from walkers.cli_outputs import OUTPUT_COMMANDS, UNITS_OPTION
from walkers.cli_trace import TRACE_COMMANDS
from walkers.errors import InputError, RunFailure, WalkersError
from walkers.files import NO_PERMISSION, NO_ROOM

if TYPE_CHECKING:
    from walkers.run.checkpoint import Checkpointer
    from walkers.scenario.specs import Scenario

EXIT_INPUT = 2
EXIT_FAILURE = 1
EXIT_DEFECT = 3


def friendly_errors(func):
    """Report walkers' own errors as clean messages with their exit codes; no tracebacks."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except WalkersError as exc:
            click.echo(f"walkers: error: {exc}", err=True)
            sys.exit(exc.exit_code)
        except KeyboardInterrupt:
            click.echo("walkers: interrupted; nothing was written under the output name", err=True)
            sys.exit(130)
        except (click.exceptions.Exit, click.ClickException, SystemExit):
            raise
        except OSError as exc:
            if exc.errno not in NO_ROOM | NO_PERMISSION:
                _defect(exc)
            click.echo(
                f"walkers: error: {exc.filename or 'a file'!r} cannot be written "
                f"({exc.strerror}); free space there, allow writing, or choose another folder",
                err=True,
            )
            sys.exit(EXIT_FAILURE)
        except Exception as exc:  # a defect of the tool, not of the input
            _defect(exc)

    return wrapper


def _defect(exc: Exception) -> None:
    """Report an unexpected exception as a defect of walkers (exit 3)."""
    if os.environ.get("WALKERS_DEBUG"):
        traceback.print_exc()
    click.echo(
        f"walkers: unexpected failure ({type(exc).__name__}: {exc}). This is a defect of "
        "walkers; rerun with WALKERS_DEBUG=1 to see the traceback and report it.",
        err=True,
    )
    sys.exit(EXIT_DEFECT)


class Progress:
    """Progress on stderr: simulated time, particles in water and an estimated time left."""

    def __init__(self, label: str, quiet: bool = False):
        self.label = label
        self.quiet = quiet
        self.started = time.monotonic()
        self.last = -1.0
        self.tty = sys.stderr.isatty()

    def __call__(self, done: float, total: float, in_water: int) -> None:
        if self.quiet:
            return
        now = time.monotonic()
        fraction = done / total if total > 0 else 1.0
        if not self.tty and fraction < 1.0 and now - self.last < 5.0:
            return
        self.last = now
        elapsed = now - self.started
        eta = elapsed * (1 - fraction) / fraction if fraction > 0 else float("nan")
        line = (
            f"{self.label}: {done / 3600:.2f} h of {total / 3600:.2f} h simulated "
            f"({100 * fraction:3.0f} %), {in_water} particles in water, "
            f"about {eta:.0f} s left"
        )
        click.echo(("\r" + line) if self.tty else line, err=True, nl=not self.tty)
        if self.tty and fraction >= 1.0:
            click.echo("", err=True)


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(walkers.__version__, prog_name="walkers")
def main() -> None:
    """Random-walk particle tracking for releases into estuaries, canals and rivers.

    A planning and screening aid: results are only as good as the flow field and the dispersion
    coefficients behind them.
    """


@main.command("new", short_help="Write a commented scenario template to start from.")
@click.argument("path", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--overwrite", is_flag=True, help="Replace PATH if it exists.")
@friendly_errors
def new_command(path: Path, overwrite: bool) -> None:
    """Write a commented scenario template to PATH (TOML)."""
    from walkers.scenario.docs import template_text

    if path.exists() and not overwrite:
        raise InputError(f"{str(path)!r} exists; pass --overwrite or choose another name")
    if not path.parent.is_dir():
        raise InputError(f"directory {str(path.parent)!r} does not exist; create it first")
    path.write_text(template_text())
    click.echo(f"wrote {path}; edit it, then: walkers run {path}")


@main.command("run", short_help="Run a scenario: NetCDF output, figures and a summary.")
@click.argument("scenario", type=click.Path(dir_okay=False, path_type=Path))
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Output NetCDF file (default: from the scenario, next to it).",
)
@click.option("--overwrite", is_flag=True, help="Replace existing output files.")
@click.option(
    "--plot/--no-plot", default=True, show_default=True, help="Draw the figures next to the output."
)
@click.option(
    "--stepper",
    type=click.Choice(["fast", "reference"]),
    default="fast",
    show_default=True,
    help="How particles are stepped: fast (compiled kernels) or reference (their slow numpy "
    "twin, the same numbers).",
)
@UNITS_OPTION
@click.option("-q", "--quiet", is_flag=True, help="No progress messages.")
@click.option(
    "--checkpoint-every",
    "checkpoint_every",
    metavar="DURATION",
    help='Save the run state every DURATION of simulated time (e.g. "2 h"; at output '
    "times) to <output>.checkpoint.npz, so an interrupted run can be resumed.",
)
@click.option(
    "--resume",
    is_flag=True,
    help="Continue an interrupted run from its checkpoint (same scenario and seed); "
    "the result is bitwise that of an uninterrupted run.",
)
@friendly_errors
def run_command(
    scenario: Path,
    output: Path | None,
    overwrite: bool,
    plot: bool,
    stepper: str,
    units: str | None,
    quiet: bool,
    checkpoint_every: str | None,
    resume: bool,
) -> None:
    """Run SCENARIO (TOML) and write CF-NetCDF output, figures and a summary.

    Ctrl-C or SIGTERM stops the run at once, writes nothing under the output name and says how
    to resume when a checkpoint was saved.
    """
    import signal
    import threading

    from walkers.api import run_scenario
    from walkers.files import refuse_inputs
    from walkers.run.checkpoint import (
        checkpoint_path,
        load_checkpoint,
        remove_checkpoint,
        run_fingerprint,
    )
    from walkers.run.runner import scenario_inputs
    from walkers.scenario.load import load_scenario
    from walkers.scenario.units import parse_quantity

    def terminate(signum, frame):
        raise KeyboardInterrupt

    main_thread = threading.current_thread() is threading.main_thread()
    previous = signal.signal(signal.SIGTERM, terminate) if main_thread else None
    try:
        sc = load_scenario(scenario)
        target = Path(output) if output is not None else Path(sc.output_path)
        ckpt = checkpoint_path(target)
        fingerprint = run_fingerprint(sc, stepper)
        every = None
        if checkpoint_every is not None:
            every = parse_quantity(checkpoint_every, "time", "--checkpoint-every")
        if every is not None:
            refuse_inputs(ckpt, scenario_inputs(sc))
        state = load_checkpoint(ckpt, fingerprint) if resume else None
        if state is None and ckpt.exists():
            raise InputError(
                f"{str(ckpt)!r}: a checkpoint of an interrupted run of this output exists; "
                "continue that run with --resume, or delete the checkpoint to start afresh"
            )
        saver = None if every is None else _checkpointer(sc, ckpt, fingerprint, every)
        try:
            outcome = run_scenario(
                sc,
                output=target,
                overwrite=overwrite,
                stepper=stepper,  # type: ignore[arg-type]
                progress=Progress(scenario.name, quiet),
                resume=state,
                on_output=saver,
                units=units,
                inputs=[ckpt] if resume else [],
            )
        except (KeyboardInterrupt, RunFailure):
            _say_how_to_resume(ckpt, scenario, output, stepper, checkpoint_every)
            raise
        remove_checkpoint(ckpt)
    finally:
        if main_thread:
            signal.signal(signal.SIGTERM, signal.SIG_DFL if previous is None else previous)
    click.echo(outcome.summary)
    click.echo(f"\nwrote {outcome.path}")
    if plot and outcome.path is not None:
        from walkers.outputs.figures import plot_results

        figdir = outcome.path.with_name(outcome.path.stem + "_figures")
        figdir.mkdir(exist_ok=True)
        for p in plot_results(outcome.path, figdir, units=units):
            click.echo(f"wrote {p}")


def _checkpointer(
    sc: Scenario, ckpt: Path, fingerprint: dict[str, Any], every: float
) -> Checkpointer:
    """The ``on_output`` callback that saves the run state every ``every`` seconds of simulated
    time (at output times)."""
    import datetime as dt

    from walkers.run.checkpoint import Checkpointer

    outputs = int(round(sc.duration / sc.output_interval)) + 1
    return Checkpointer(
        ckpt,
        fingerprint,
        every,
        sc.output_interval,
        outputs,
        time_of=lambda k: (sc.start + dt.timedelta(seconds=k * sc.output_interval)).isoformat(),
    )


def _say_how_to_resume(
    ckpt: Path, scenario: Path, output: Path | None, stepper: str, checkpoint_every: str | None
) -> None:
    """After an interruption: the command that continues the run, or why it cannot be."""
    from walkers.run.checkpoint import read_checkpoint_meta

    if ckpt.exists():
        again = [f"walkers run {scenario}"]
        if output is not None:
            again.append(f"-o {output}")
        if stepper != "fast":
            again.append(f"--stepper {stepper}")
        again.append("--resume")
        if checkpoint_every is not None:
            again.append(f'--checkpoint-every "{checkpoint_every}"')
        last = read_checkpoint_meta(ckpt).get("time") or "an output time"
        click.echo(
            f"walkers: the run state at {last} is saved in {ckpt}; continue with: "
            f"{' '.join(again)}",
            err=True,
        )
    else:
        click.echo(
            "walkers: no checkpoint was saved; to be able to resume an interrupted run, "
            'pass --checkpoint-every (e.g. "2 h")',
            err=True,
        )


@main.command("inspect", short_help="Describe a flow file or a scenario's flow and run.")
@click.argument("files", nargs=-1, required=True)
@click.option(
    "--dispersion",
    default=1.0,
    show_default=True,
    type=float,
    help="Dispersion coefficient K (m2/s) for the time-step advice.",
)
@click.option("--time-step", "dt", type=float, default=None, help="A time step (s) to check.")
@click.option(
    "--map",
    "map_png",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Draw the speed field with land to this PNG (a mesh: with its coast and open boundaries).",
)
@click.option("--frame", default=0, show_default=True, help="Frame drawn by --map.")
@friendly_errors
def inspect_command(
    files, dispersion: float, dt: float | None, map_png: Path | None, frame: int
) -> None:
    """Describe flow FILES: grid, CRS, times, variables found, land, speeds, time step.

    Given a scenario file (.toml), describe its flow and its run: three-dimensional or not,
    K_z, the bed, each release's behaviour in the water column, vertical substeps."""
    from walkers.fields.netcdf.ugrid import is_ugrid, open_mesh_flow
    from walkers.inspect import (
        describe_flow,
        describe_mesh,
        draw_mesh_map,
        draw_speed_map,
        open_for_inspection,
    )

    if len(files) == 1 and str(files[0]).endswith(".toml"):
        _inspect_scenario(files[0], dispersion, dt, map_png, frame)
        return
    if len(files) == 1 and is_ugrid(files[0]):
        mesh = open_mesh_flow(files[0])
        click.echo(describe_mesh(mesh, dispersion=dispersion, dt=dt))
        if map_png is not None:
            draw_mesh_map(mesh, map_png, frame=frame)
            click.echo(f"wrote {map_png}")
        return
    flow = open_for_inspection(list(files))
    click.echo(describe_flow(flow, dispersion=dispersion, dt=dt))
    if map_png is not None:
        draw_speed_map(flow, map_png, frame=frame)
        click.echo(f"wrote {map_png}")


def _inspect_scenario(
    path: str, dispersion: float, dt: float | None, map_png: Path | None, frame: int
) -> None:
    """``walkers inspect case.toml``: its flow described as for a flow file, then its run."""
    from walkers.fields.scenario_flow import build_flow
    from walkers.inspect import describe_flow, draw_speed_map
    from walkers.run.column import describe_scenario_column
    from walkers.scenario.load import load_scenario

    scenario = load_scenario(path)
    flow = build_flow(scenario.flow)
    try:
        if getattr(flow.kind(), "mesh", False):
            click.echo(f"Flow field: {flow.source} (a mesh: 'walkers inspect' it for details)")
        else:
            click.echo(describe_flow(flow, dispersion=dispersion, dt=dt or scenario.dt))
            if map_png is not None:
                draw_speed_map(flow, map_png, frame=frame)
                click.echo(f"wrote {map_png}")
        click.echo("\n".join(describe_scenario_column(scenario, flow)))
    finally:
        flow.close()


class _CaseOption(click.Option):
    """``verify --case``: its help lists the case names (read only when help is shown)."""

    def get_help_record(self, ctx: click.Context) -> tuple[str, str] | None:
        from walkers.verify.cases import CASES

        self.help = f"Run only this case (repeatable): {', '.join(CASES)}."
        return super().get_help_record(ctx)


@main.command("verify", short_help="Check the engine against published solutions.")
@click.option(
    "--case", "cases", multiple=True, cls=_CaseOption, help="Run only this case (repeatable)."
)
@click.option(
    "--particles", type=int, default=None, help="Particles per case (default: each case's own)."
)
@click.option(
    "--seed", type=int, default=20261201, show_default=True, help="Seed of the cases' random walks."
)
@click.option(
    "--report",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Also write the results as Markdown (e.g. docs/verification.md).",
)
@friendly_errors
def verify_command(cases, particles: int | None, seed: int, report: Path | None) -> None:
    """Run the verification cases against published solutions; exit 1 on any failure."""
    from walkers.verify.cases import CASES, run_case
    from walkers.verify.checks import report_markdown

    names = list(cases) or list(CASES)
    unknown = [n for n in names if n not in CASES]
    if unknown:
        raise InputError(f"unknown case(s) {', '.join(unknown)}; known: {', '.join(CASES)}")
    results = []
    for name in names:
        started = time.monotonic()
        r = run_case(name, particles=particles, seed=seed)
        results.append(r)
        click.echo(
            f"{'PASS' if r.passed else 'FAIL'}  {name} ({r.particles} particles, "
            f"{time.monotonic() - started:.1f} s): {r.title}"
        )
        for c in r.checks:
            mark = "ok " if c.passed else "BAD"
            click.echo(
                f"   {mark} {c.name}: {c.measured:.6g} (expected {c.expected:.6g}, "
                f"tolerance {c.tolerance:.3g}) — {c.source}"
            )
    if report is not None:
        report.write_text(report_markdown(results))
        click.echo(f"wrote {report}")
    failed = [r.name for r in results if not r.passed]
    if failed:
        click.echo(f"{len(failed)} case(s) failed: {', '.join(failed)}", err=True)
        sys.exit(EXIT_FAILURE)
    click.echo(f"all {len(results)} cases within tolerance")


@main.command("bench", short_help="Measure the engine's speed and memory.")
@click.option(
    "--quick",
    is_flag=True,
    help="Smaller sizes and fewer repeats (under 30 s); the peak memory of 10 M "
    "particles is then projected from 1 M.",
)
@click.option("--json", "as_json", is_flag=True, help="Print the figures as one JSON object.")
@click.option(
    "--particles",
    type=click.IntRange(min=100),
    default=None,
    help="Particles moved [default: 200000; 20000 with --quick].",
)
@click.option(
    "--repeats",
    type=click.IntRange(min=1),
    default=None,
    help="Timed repeats per figure; medians are reported [default: 5; 3 with --quick].",
)
@friendly_errors
def bench_command(quick: bool, as_json: bool, particles: int | None, repeats: int | None) -> None:
    """Measure the engine's speed, memory and start-up on a reference workload."""
    import json

    from walkers.bench import run_benchmark
    from walkers.bench_report import format_report

    progress = None if as_json else (lambda note: click.echo(f"... {note}", err=True))
    result = run_benchmark(quick=quick, particles=particles, repeats=repeats, progress=progress)
    click.echo(json.dumps(result, indent=2) if as_json else format_report(result))


@main.command("ensemble", short_help="Run an ensemble: exceedance probabilities and arrivals.")
@click.argument("scenario", type=click.Path(dir_okay=False, path_type=Path))
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Output NetCDF file (default: the scenario's output file with _ensemble).",
)
@click.option(
    "--members",
    type=int,
    default=None,
    help="Number of members (default: ensemble.members of the scenario).",
)
@click.option(
    "--workers",
    type=int,
    default=0,
    show_default=True,
    help="0 runs in this process; N starts a local Dask cluster of N workers.",
)
@click.option(
    "--scheduler",
    default=None,
    help="Address of a running Dask scheduler, e.g. tcp://127.0.0.1:8786.",
)
@click.option(
    "--threshold",
    "thresholds",
    multiple=True,
    help='Extra concentration threshold, e.g. "0.05 mg/L" (repeatable).',
)
@click.option("--overwrite", is_flag=True, help="Replace an existing output file.")
@click.option(
    "--plot/--no-plot",
    default=True,
    show_default=True,
    help="Draw the ensemble figures next to the output.",
)
@UNITS_OPTION
@click.option("-q", "--quiet", is_flag=True, help="No progress messages.")
@friendly_errors
def ensemble_command(
    scenario: Path,
    output: Path | None,
    members: int | None,
    workers: int,
    scheduler: str | None,
    thresholds,
    overwrite: bool,
    plot: bool,
    units: str | None,
    quiet: bool,
) -> None:
    """Run the ensemble of SCENARIO (TOML with an [ensemble] table): exceedance probabilities,
    receptor distributions and the member table, written as CF-NetCDF with figures."""
    from walkers.ensemble.assemble import summary_text, write_ensemble
    from walkers.ensemble.execute import run_ensemble
    from walkers.files import check_target
    from walkers.run.runner import scenario_inputs
    from walkers.scenario.load import load_scenario
    from walkers.scenario.units import parse_quantity

    sc = load_scenario(scenario)
    if sc.ensemble is None:
        raise InputError(f"{scenario}: no [ensemble] table; add one with at least 'members'")
    extra = [parse_quantity(t, "concentration", f"--threshold {t!r}") for t in thresholds]
    if output is None:
        stem = sc.output_path.stem
        output = sc.output_path.with_name(
            f"{stem}.nc" if stem.endswith("_ensemble") else f"{stem}_ensemble.nc"
        )
    inputs = scenario_inputs(sc)
    check_target(output, overwrite, inputs)
    started = time.monotonic()
    last = [0.0]

    def progress(done: int, total: int) -> None:
        now = time.monotonic()
        if quiet or (done < total and now - last[0] < 5.0):
            return
        last[0] = now
        elapsed = now - started
        left = elapsed * (total - done) / done if done else float("nan")
        click.echo(
            f"{scenario.name}: {done} of {total} members ({100 * done / total:3.0f} %), "
            f"about {left:.0f} s left",
            err=True,
        )

    ds = run_ensemble(
        sc,
        members=members,
        workers=workers,
        scheduler=scheduler,
        progress=progress,
        thresholds=extra,
    )
    elapsed = time.monotonic() - started
    write_ensemble(ds, output, overwrite=overwrite, inputs=inputs)
    click.echo(summary_text(ds, units))
    click.echo(
        f"\n{ds.sizes['member']} members, {ds.attrs['particle_steps']:.3g} "
        f"member-particle-steps in {elapsed:.1f} s "
        f"({ds.attrs['particle_steps'] / elapsed:.3g} per second)"
    )
    click.echo(f"wrote {output}")
    if plot:
        from walkers.ensemble.figures import plot_ensemble

        figdir = output.with_name(output.stem + "_figures")
        figdir.mkdir(exist_ok=True)
        for p in plot_ensemble(ds, figdir, units=units):
            click.echo(f"wrote {p}")


for _command in [*OUTPUT_COMMANDS, *TRACE_COMMANDS]:
    _command.callback = friendly_errors(_command.callback)
    main.add_command(_command)
