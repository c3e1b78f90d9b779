"""What every command shares: -v, -q, --debug, and library messages in the command line's words.

Kept apart from `upscale.cli.options`, whose option values (methods, solvers,
units) come from the computing modules: the command group and its help load
only this module and click.
"""

from __future__ import annotations

import logging
import re
import sys
from collections.abc import Callable
from typing import Any

import click

#: Python names and settings whose option is not ``--`` and the name with dashes.
_OPTIONS = {"check=False": "--no-check", "overwrite=True": "--overwrite", "max_cells": "--check-limit",
            "chunk_bytes": "--chunk"}  # fmt: skip
#: A Python parameter in a library message: `name` or `name=value` in backticks.
_PARAMETER = re.compile(r"`([A-Za-z_]\w*)(?:=([^`]*))?`")


def command_line(message: str) -> str:
    """A library message with its Python parameters written as the command line's options.

    The library names its parameters in backticks (`upscale.errors`); the
    option of ``name`` is ``--name`` with dashes for underscores, unless
    `_OPTIONS` says otherwise, and ``name=value`` becomes ``--name value``.

    Examples
    --------
    >>> command_line("`kv_kh` must be > 0; try `solver=direct`, or `check=False`")
    '--kv-kh must be > 0; try --solver direct, or --no-check'
    """

    def option(match: re.Match) -> str:
        if match.group(0)[1:-1] in _OPTIONS:
            return _OPTIONS[match.group(0)[1:-1]]
        name, value = match.groups()
        flag = _OPTIONS.get(name, "--" + name.replace("_", "-"))
        return flag if value is None else f"{flag} {value}"

    return _PARAMETER.sub(option, message)


def global_options(command: Callable[..., Any]) -> Callable[..., Any]:
    """``-v``, ``-q`` and ``--debug``: on the group, before the command, and on every command, after it.

    Either place means the same: the values go into the settings the group
    and its command share (``ctx.obj``), not into the command's arguments.
    Every ``-v`` counts wherever it stands (``upscale -v run ... -v`` is
    ``-vv``); ``-q`` and ``--debug`` hold when given in either place.
    Logging follows the settings as they are parsed.
    """
    options = [
        click.option("-v", "--verbose", count=True, expose_value=False, callback=_setting,
                     help="More messages: progress lines even when stderr is not a terminal (a "
                     "log); repeat for debug messages."),
        click.option("-q", "--quiet", is_flag=True, expose_value=False, callback=_setting,
                     help="Only errors; no progress."),
        click.option("--debug", is_flag=True, expose_value=False, callback=_setting,
                     help="Show the traceback of an error."),
    ]  # fmt: skip
    for option in reversed(options):
        command = option(command)
    return command


def _setting(ctx: click.Context, param: click.Parameter, value: int | bool) -> None:
    """Add one global option's value (from the group or the command) to the shared settings."""
    settings = ctx.ensure_object(dict)
    if param.name == "verbose":
        settings["verbose"] = settings.get("verbose", 0) + value
    else:
        settings[param.name] = settings.get(param.name, False) or value
    _log_at(settings.get("verbose", 0), settings.get("quiet", False))


def _log_at(verbose: int, quiet: bool) -> None:
    """Send log messages to stderr: errors only when quiet, warnings, or more with each ``-v``."""
    level = logging.ERROR if quiet else (logging.WARNING, logging.INFO, logging.DEBUG)[min(verbose, 2)]
    logging.basicConfig(level=level, format="upscale: %(message)s", stream=sys.stderr, force=True)
    # GDAL's own remarks (through rasterio) are for -vv; damage is reported as one error instead
    logging.getLogger("rasterio").setLevel(logging.DEBUG if verbose >= 2 else logging.CRITICAL)
