"""Progress on stderr: a line per step of a job, and a bar for long dask computations at a terminal."""

from __future__ import annotations

import contextlib
import sys
from collections.abc import Iterator

import click

from ..steps import Say, silent


@contextlib.contextmanager
def progress(quiet: bool) -> Iterator[None]:
    """Show dask's progress bar on stderr for computations inside the block.

    Nothing is shown with `quiet`, or when stderr is not a terminal (logs and
    pipes stay clean). Computations shorter than a second show nothing either.
    """
    if quiet or not sys.stderr.isatty():
        yield
        return
    from dask.diagnostics import ProgressBar

    with ProgressBar(minimum=1.0, out=sys.stderr):
        yield


def tell(line: str) -> None:
    """Print one progress line on stderr (stdout keeps the results)."""
    click.echo(f"upscale: {line}", err=True)


def teller(ctx: click.Context) -> Say:
    """Where a command's progress lines go: `tell` or `silent`.

    Lines are told to a person at a terminal, or into a log with ``-v``;
    never with ``--quiet``. Elsewhere stderr stays for the one line of an error.
    """
    if ctx.obj["quiet"]:
        return silent
    return tell if ctx.obj.get("verbose") or sys.stderr.isatty() else silent
