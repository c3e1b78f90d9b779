"""Exceptions raised by `upscale`.

Every error the tool raises on purpose derives from `UpscaleError`, and most
also derive from the builtin a caller would expect, so ``except ValueError``
keeps working for library users. The command line prints the message of an
`UpscaleError` as one line; any other exception is a bug.

Messages name Python parameters in backticks, as a caller of the library
passes them (`` `border` must be 0 or more``, `` `solver=direct` ``); the
command line writes them as its options (``--border``, ``--solver direct``,
`upscale.cli.settings.command_line`).
"""

from __future__ import annotations


class UpscaleError(Exception):
    """Base class of all errors raised on purpose by `upscale`."""

    #: Exit status used by the command line for this kind of error.
    exit_code = 1


class InputError(UpscaleError, ValueError):
    """An input file, array or option cannot be used as given."""

    exit_code = 2


class OutputExistsError(UpscaleError, FileExistsError):
    """The output folder already holds results and overwriting was not asked for."""

    exit_code = 2


class OutputError(UpscaleError, OSError):
    """The output could not be written; nothing was moved into place."""

    exit_code = 1


class ClusterError(UpscaleError, RuntimeError):
    """The dask cluster failed the work (workers lost too often, scheduler gone); nothing was written."""

    exit_code = 1


class MissingLibraryError(UpscaleError, ImportError):
    """An optional library is not installed; the message names the extra that installs it."""

    exit_code = 1
