"""``ttmap scenario``: check and run a scenario file (many sources, periods, comparisons)."""

from __future__ import annotations

import shlex
import sys
import time
from typing import Any

import click

from ttmap.cli.options import InputFile, OutputFolder, reporter, verbosity_options

__all__ = ["check_command", "executor_callback", "run_command", "scenario"]


def executor_callback(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
    """``--executor``: 'serial', 'local' or a scheduler address."""
    if value is None:
        return None
    from ttmap.tasks import check_executor
    from ttmap.defaults import EXECUTORS
    from ttmap.scenario import did_you_mean

    problem = check_executor(value)
    if problem:
        raise click.BadParameter(problem + did_you_mean(value, EXECUTORS), ctx=ctx, param=param)
    return value


def _load_or_exit(ctx: click.Context, file: str) -> Any:
    """The validated file, or every problem on stderr (one per line) and exit 1."""
    from ttmap.scenario import ScenarioFileError, load_scenario_file

    try:
        return load_scenario_file(file)
    except ScenarioFileError as err:
        for issue in err.issues:
            click.echo(str(issue), err=True)
        n = len(err.issues)
        click.echo(f"{n} problem{'s' if n != 1 else ''} found in {file}; nothing was run", err=True)
        ctx.exit(1)


@click.group("scenario")
def scenario() -> None:
    """Many sources from one scenario file (TOML): check it, then run it.

    The file names the bathymetry, the wave periods, the sources (written out
    or generated as ruptures along a trench), the sites and the outputs; see
    demo_bathymetry/demo_scenarios.toml for a commented example.
    """


@scenario.command("check")
@click.argument("file", type=InputFile())
@verbosity_options
@click.pass_context
def check_command(ctx: click.Context, file: str) -> None:
    """Validate FILE and summarise what a run would do; nothing is solved.

    Every problem is reported with its line, key and fix (exit status 1).
    """
    from ttmap.scenario import summary_lines

    sf = _load_or_exit(ctx, file)
    for line in summary_lines(sf):
        click.echo(line)


class _Progress:
    """``progress(done, total, name)`` for run_tasks: a bar on a terminal, else a line per solve."""

    def __init__(self, total: int, quiet: bool) -> None:
        self.quiet = quiet
        self.done = 0
        stream = sys.stderr
        self.bar: Any = None
        if not quiet and stream.isatty():
            self.bar = click.progressbar(
                length=total,
                label="solving",
                file=stream,
                show_pos=True,
                item_show_func=lambda name: name,
            )
            self.bar.__enter__()

    def __call__(self, done: int, total: int, name: str) -> None:
        step, self.done = done - self.done, done
        if self.bar is not None:
            self.bar.update(step, name)
        elif not self.quiet:
            click.echo(f"ttmap: [{done}/{total}] {name}", err=True)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.__exit__(None, None, None)
            self.bar = None


@scenario.command("run")
@click.argument("file", type=InputFile())
@click.option(
    "--executor",
    callback=executor_callback,
    metavar="serial|local|ADDRESS",
    help="Where to solve: 'serial' (this process), 'local' (a Dask cluster on this "
    "machine) or a Dask scheduler address such as tcp://10.0.0.5:8786. "
    "Default: the file's outputs.executor, else local.",
)
@click.option(
    "--workers",
    type=click.IntRange(min=1),
    help="Number of workers of a local cluster (default: the file's outputs.workers, "
    "else one per CPU, at most one per solve).",
)
@click.option(
    "--out",
    "out_dir",
    type=OutputFolder(),
    help="Output folder (default: the file's outputs.folder).",
)
@click.option(
    "--overwrite",
    is_flag=True,
    help="Replace rasters left by a run with other inputs (with --no-resume: every "
    "existing raster).",
)
@click.option(
    "--resume/--no-resume",
    default=True,
    show_default=True,
    help="Keep rasters finished by an earlier run and skip their solves. The envelope, "
    "differences and run.json are rebuilt from the rasters on every run.",
)
@click.option(
    "--direct",
    is_flag=True,
    help="Solve every scenario directly for the sites x scenarios table and the envelope "
    "(one raster each), instead of the reciprocal path (one solve per site; one union solve "
    "for the envelope) that is used when it is cheaper. See the file's outputs.table_method.",
)
@click.option("--no-report", is_flag=True, help="Skip report.html (the run on one self-contained page).")
@verbosity_options
@click.pass_context
def run_command(
    ctx: click.Context,
    file: str,
    executor: str | None,
    workers: int | None,
    out_dir: str | None,
    overwrite: bool,
    resume: bool,
    direct: bool,
    no_report: bool,
) -> None:
    """Solve every scenario of FILE, then write the envelope and difference rasters.

    One front raster (long-wave speed, earliest arrival) per scenario and one
    per scenario and wave period; a run record run.json. Scenarios that fail
    are listed by name (exit status 1); the others' outputs are kept.

    A planning aid only; official warning centres and local emergency
    management decide.
    """
    from ttmap.products.cautions import CAUTION_SHORT
    from ttmap.jobs.batch import BatchInterrupted
    from ttmap.jobs.scenario import run_scenario_file
    from ttmap.jobs.scenario_reciprocal import plan_table_method

    t0 = time.perf_counter()
    sf = _load_or_exit(ctx, file)
    validate_s = time.perf_counter() - t0
    plan = plan_table_method(sf, direct=direct)
    with reporter(ctx) as rep:
        ex = executor or sf.outputs.executor or "local"
        n_workers = workers or sf.outputs.workers
        rep.stage(
            f"{len(sf.scenarios)} scenarios, {plan.total_solves} solves, executor {ex}"
            + (f", {n_workers} workers" if n_workers and ex == "local" else "")
        )
        if plan.method == "reciprocal":
            rep.stage(
                f"sites x scenarios and envelope: reciprocal path ({plan.reason}): "
                f"{plan.site_solves} site solve(s)"
                + (f", envelope from {plan.envelope_solves} solve(s)" if plan.envelope_one_solve
                   else "")
                + f", {plan.raster_solves} raster solve(s); --direct to solve every scenario"
            )
        else:
            rep.stage(f"sites x scenarios and envelope: direct path ({plan.reason})")
        progress = _Progress(plan.total_solves, rep.quiet)
        try:
            record = run_scenario_file(
                sf,
                out_dir=out_dir,
                executor=executor,
                n_workers=workers,
                overwrite=overwrite,
                resume=resume,
                progress=progress,
                validate_s=validate_s,
                command_line=shlex.join(["ttmap", *sys.argv[1:]]),
                direct=direct,
                report=not no_report,
                dask_log=not rep.quiet,
            )
        except BatchInterrupted as err:  # Ctrl-C: one line, what was kept, how to resume
            progress.close()
            click.echo(("" if rep.quiet else "\n") + f"ttmap: {err}", err=True)
            ctx.exit(130)
        finally:
            progress.close()
        tasks = record["tasks"]
        kept = sum(1 for t in tasks if t["skipped"])
        ok = sum(1 for t in tasks if t["ok"])
        out = record["parameters"]["out_dir"]
        rep.stage(
            f"{ok} of {len(tasks)} solves finished"
            + (f" ({kept} kept from an earlier run)" if kept else "")
            + f"; rasters in {out}"
        )
        params = record["parameters"]
        rep.stage(f"table method: {params['table_method']} ({params['table_method_reason']})")
        products = record["comparisons"]
        if products.get("envelope"):
            rep.stage("envelope: " + ", ".join(_all_paths(products["envelope"])))
        for d in products.get("differences", []):
            rep.stage(f"difference {d['a']} vs {d['b']}: " + ", ".join(_all_paths(d["files"])))
        if products.get("sites"):
            rep.stage("site tables: " + ", ".join(_all_paths(products["sites"])))
        for note in products.get("skipped", []):
            rep.notice(f"skipped {note}")
        rep.stage(f"run record: {record['run_json']}")
        rep.stage(CAUTION_SHORT)
    if record["failed"]:
        click.echo(f"ttmap: {len(record['failed'])} solve(s) failed:", err=True)
        for f in record["failed"]:
            click.echo(f"  {f['name']}: {f['error']}", err=True)
        ctx.exit(1)


def _all_paths(value: Any) -> list[str]:
    """Every path in whatever a comparison writer returned, in order."""
    if isinstance(value, dict):
        return [p for v in value.values() for p in _all_paths(v)]
    if isinstance(value, (list, tuple)):
        return [p for v in value for p in _all_paths(v)]
    return [str(value)] if value else []
