"""The ``ttmap`` command group: verbosity, version, and one-line errors.

Exit status: 0 success, 1 input or run error (a :class:`~ttmap.errors.TtmapError`
or another failure), 2 usage error (bad option), 130 stopped by Ctrl-C
(SIGINT), 143 stopped by SIGTERM. A traceback is shown only with ``--verbose``.

SIGTERM gets the same clean stop as Ctrl-C: a handler raises
:class:`ttmap.jobs.staging.Stopped`, the job's staging folder is removed and
the output folder is left as it was; one line on stderr says so (and, for a
scenario run, which finished tasks were kept for resuming).
"""

from __future__ import annotations

import logging
import signal
import sys
import threading
from typing import Any

import click

from ttmap import __version__
from ttmap.errors import TtmapError

__all__ = ["cli", "main"]

log = logging.getLogger("ttmap")


class _Group(click.Group):
    """A group that turns ttmap errors into one-line messages (exit 1)."""

    def invoke(self, ctx: click.Context) -> Any:
        try:
            return super().invoke(ctx)
        except (click.ClickException, click.exceptions.Exit, click.Abort):
            raise
        except TtmapError as err:
            if ctx.obj and ctx.obj.get("verbose"):
                raise
            raise click.ClickException(str(err)) from err
        except KeyboardInterrupt as err:
            signum = int(getattr(err, "signum", signal.SIGINT))
            note = getattr(err, "note", "") or "no partial product was left behind"
            name = "SIGTERM" if signum == signal.SIGTERM else "Ctrl-C (SIGINT)"
            click.echo(f"ttmap: stopped by {name}; {note}", err=True)
            sys.exit(128 + signum)
        except Exception as err:  # an unexpected failure: still one line
            if ctx.obj and ctx.obj.get("verbose"):
                raise
            raise click.ClickException(
                f"unexpected {type(err).__name__}: {err} (rerun with --verbose for the traceback)"
            ) from err


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="ttmap")
@click.option("-v", "--verbose", is_flag=True, help="More detail, and tracebacks on errors.")
@click.option("-q", "--quiet", is_flag=True, help="No progress messages.")
@click.pass_context
def cli(ctx: click.Context, verbose: bool, quiet: bool) -> None:
    """Tsunami and long-wave travel-time maps from bathymetry.

    A planning aid only, not a warning: official warning centres and local
    emergency management decide. Arrival times only; wave heights and
    flooding are not computed.
    """
    if verbose and quiet:
        raise click.UsageError("--verbose and --quiet exclude each other; give one")
    _stop_on_sigterm(ctx)
    ctx.ensure_object(dict)
    ctx.obj["verbose"] = verbose
    ctx.obj["quiet"] = quiet
    logging.basicConfig(level=logging.DEBUG if verbose else logging.WARNING, format="%(message)s")


def _raise_stopped(signum: int, frame: Any) -> None:
    from ttmap.jobs.staging import Stopped

    raise Stopped(signum)


def _stop_on_sigterm(ctx: click.Context) -> None:
    """SIGTERM raises :class:`~ttmap.jobs.staging.Stopped` (a KeyboardInterrupt) while the command runs."""
    if threading.current_thread() is not threading.main_thread():
        return
    previous = signal.signal(signal.SIGTERM, _raise_stopped)
    ctx.call_on_close(lambda: signal.signal(signal.SIGTERM, previous))


def _register() -> None:
    from ttmap.cli.demo import demo
    from ttmap.cli.info import info
    from ttmap.cli.locate import locate_command
    from ttmap.cli.map import map_command
    from ttmap.cli.scenario import scenario
    from ttmap.cli.sitemap import site_map_command

    cli.add_command(map_command)
    cli.add_command(site_map_command)
    cli.add_command(scenario)
    cli.add_command(demo)
    cli.add_command(info)
    cli.add_command(locate_command)


_register()


def main() -> None:  # pragma: no cover - console entry point
    cli(prog_name="ttmap")
