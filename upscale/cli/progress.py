"""A progress bar for long dask computations, shown only to a person at a terminal."""

from __future__ import annotations

import contextlib
import sys
from collections.abc import Iterator


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
