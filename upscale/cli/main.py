"""The ``upscale`` command group and its error handling.

Errors a user can fix (an `UpscaleError`, a bad option) print one line on
stderr and exit with status 2 (input or usage) or 1 (other failures). Any
other exception is a bug: it prints one line asking for a report, and its
traceback with ``--debug``.

A reader that stops reading (``upscale info F | head -3``, a pager quit
early, a log reader that died) ends the command quietly with status 141,
the 128 + SIGPIPE (13) a shell reports for a command a closed pipe ended —
whether the pipe was stdout or the progress lines' stderr. Python ignores
SIGPIPE and raises `BrokenPipeError` instead; letting the default signal
action kill the process would skip the clean-up of a half-written output
folder, so the error unwinds like Ctrl-C: what a run had finished is left
as it was, what it was staging is removed. Before exiting, the console
script points stdout and stderr at ``os.devnull``, so that the interpreter's
final flush of what could not be written does not fail again (the advice of
Python's documentation, "Note on SIGPIPE" in the `signal` module).
"""

from __future__ import annotations

import contextlib
import importlib
import logging
import os
import signal
import sys
import threading
import warnings
from collections.abc import Iterator

import click

from ..caution import CAUTION
from ..errors import UpscaleError
from .settings import command_line, global_options

#: Each command (defined in the module of `upscale.cli` of its name) and its summary: the first
#: paragraph of its help, which `upscale --help` lists. A command's module, and the computing
#: libraries behind it, is imported only when that command is given; tests/cli/test_startup.py holds
#: the summaries to the commands' own help.
COMMANDS = {
    "check": "Check again that the coarse grid in FOLDER passes the fine model's flow.",
    "compare": "Upscale FIELD with every method, check each against the fine model, and rank them.",
    "demo": "Write the demo fields of the fictional Marrowfen Basin.",
    "info": "Describe FIELD: grid, cell size, CRS, units, active cells and statistics of log k.",
    "plan": "How coarse can FIELD go? Every method at every block size, against shared fine solves.",
    "run": "Upscale FIELD to coarse blocks with one method (several FIELDs or a glob: an ensemble).",
}


class _Commands(click.Group):
    """The command group whose commands are imported when given, not to list them in ``--help``."""

    def list_commands(self, ctx: click.Context) -> list[str]:
        return sorted(COMMANDS)

    def get_command(self, ctx: click.Context, name: str) -> click.Command | None:
        if name not in COMMANDS:
            return None
        return getattr(importlib.import_module(f"{__package__}.{name}"), name)

    def invoke(self, ctx: click.Context) -> object:
        """Run the command on dask's threaded scheduler unless it starts a cluster (``--workers``).

        The threads are what dask would use anyway, but given as its function:
        without it (or with a scheduler's name) every compute first imports
        distributed to look for a client, a third of a second. A cluster's
        client still takes over while it runs.
        """
        import dask.threaded

        with dask.config.set(scheduler=dask.threaded.get):
            return super().invoke(ctx)

    def format_commands(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        """List the commands as click does, with the summaries of `COMMANDS` (nothing imported)."""
        limit = formatter.width - 6 - max(map(len, COMMANDS))
        rows = [(name, click.Command(name, help=COMMANDS[name]).get_short_help_str(limit))
                for name in self.list_commands(ctx)]  # fmt: skip
        with formatter.section("Commands"):
            formatter.write_dl(rows)


@click.group(
    cls=_Commands,
    context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100},
    epilog=f"Caution: {CAUTION}",
)
@global_options
@click.version_option(package_name="upscale", prog_name="upscale")
@click.pass_context
def cli(ctx: click.Context) -> None:
    """Upscale permeability maps and models to coarse simulation grids.

    Read a fine permeability raster (GeoTIFF or any raster GDAL reads; one band
    is a 2D map, several bands a 3D model), average it into coarse blocks, and
    write georeferenced coarse GeoTIFFs with a summary.json that records every
    input, parameter and statistic. The options -v, -q and --debug may also
    follow the command.

    \b
    Start with:
      upscale demo --out demo-fields
      upscale info demo-fields/marrowfen_lognormal.tif
      upscale run demo-fields/marrowfen_lognormal.tif --block 8x8 --method geometric --out out/
    """
    ctx.ensure_object(dict).setdefault("command", ["upscale", *sys.argv[1:]])


#: GDAL's block cache in MB for the command line. Windows are read once each, so
#: a cache does not pay; GDAL's default (5 % of RAM) would grow with the raster.
GDAL_CACHE_MB = "64"

#: Exit status when the reader of stdout or stderr went away: 128 + SIGPIPE (13), the status a
#: shell gives a command ended by SIGPIPE (POSIX, XCU 2.8.2 "Exit Status for Commands").
CLOSED_PIPE = 141


def main(argv: list[str] | None = None) -> int:
    """Run the command line; return the exit status instead of raising.

    Parameters
    ----------
    argv : list of str, optional
        Arguments without the program name (default: ``sys.argv[1:]``).
    """
    os.environ.setdefault("GDAL_CACHEMAX", GDAL_CACHE_MB)  # a user's own setting wins
    args = sys.argv[1:] if argv is None else list(argv)
    with _terminate_like_interrupt(), _warnings_to_log():
        try:
            return _main(args)
        except BrokenPipeError:  # the reader went away, perhaps while an error was being told
            return CLOSED_PIPE


@contextlib.contextmanager
def _warnings_to_log() -> Iterator[None]:
    """Show a library's warnings as debug lines (``-vv``), never mid-run on the terminal.

    Only how a warning is shown changes, process-wide (dask's threads
    included); the filters stay as they are, so where they turn warnings into
    errors (the test suite's setting) a warning still raises.
    """
    with warnings.catch_warnings():
        warnings.showwarning = _log_warning
        yield


def _log_warning(message: Warning | str, category: type[Warning], filename: str, lineno: int,
                 file: object = None, line: str | None = None) -> None:  # fmt: skip
    text = " ".join(str(message).split())
    logging.getLogger(__name__).debug("%s from %s:%d: %s", category.__name__, filename, lineno, text)


class _Terminated(KeyboardInterrupt):  # noqa: N818 - a signal, like its parent
    """SIGTERM arrived (a batch scheduler or ``kill`` stopping the run); unwinds like Ctrl-C."""


@contextlib.contextmanager
def _terminate_like_interrupt() -> Iterator[None]:
    """Let SIGTERM unwind the run like Ctrl-C, so staged output is cleaned up (main thread only)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def stop(signum: int, frame: object) -> None:
        raise _Terminated()

    previous = signal.signal(signal.SIGTERM, stop)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


def _main(args: list[str]) -> int:
    settings: dict[str, object] = {"command": ["upscale", *args]}  # -v, -q, --debug join as parsed
    try:
        # make_context and invoke, not cli.main: its handler writes a blank line on Ctrl-C
        with cli.make_context("upscale", args, obj=settings) as ctx:
            cli.invoke(ctx)
    except BrokenPipeError:
        raise  # not a bug: `main` ends quietly
    except click.exceptions.Exit as exc:
        return exc.exit_code
    except click.ClickException as exc:
        click.echo(f"upscale: error: {exc.format_message()}", err=True)
        return exc.exit_code
    except (click.Abort, KeyboardInterrupt) as exc:
        if isinstance(exc, _Terminated):
            click.echo("upscale: stopped by SIGTERM; nothing was written", err=True)
            return 143
        if sys.stderr.isatty():  # end the line the terminal's ^C is on
            click.echo(err=True)
        click.echo("upscale: interrupted; nothing was written", err=True)
        return 130
    except UpscaleError as exc:
        if settings.get("debug"):
            raise
        click.echo(f"upscale: error: {command_line(str(exc))}", err=True)
        return exc.exit_code
    except MemoryError:
        if settings.get("debug"):
            raise
        click.echo("upscale: error: out of memory; nothing was written — give a smaller --chunk or "
                   "--check-limit, or --no-check, or run where more memory is free", err=True)  # fmt: skip
        return 1
    except Exception as exc:  # a bug: say so in one line, keep the traceback for --debug
        if settings.get("debug"):
            raise
        click.echo(
            f"upscale: internal error: {type(exc).__name__}: {exc} "
            "(run again with --debug for the traceback, and please report it)",
            err=True,
        )
        return 1
    return 0


def entry_point() -> None:
    """Console-script entry: exit with the status of `main`."""
    status = main()
    if status == CLOSED_PIPE:
        _drop_standard_streams()
    sys.exit(status)


def _drop_standard_streams() -> None:
    """Point stdout and stderr at ``os.devnull``: what is still buffered for a closed pipe goes nowhere."""
    devnull = os.open(os.devnull, os.O_WRONLY)
    for stream in (sys.stdout, sys.stderr):
        try:
            os.dup2(devnull, stream.fileno())
        except (AttributeError, OSError, ValueError):  # not a file, or already closed
            continue
    os.close(devnull)
