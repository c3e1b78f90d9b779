"""The steps of a long job, timed and told as they start and finish."""

from __future__ import annotations

import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager

from .compiling import compile_seconds

#: Receives one line of progress (the command line prints it on stderr).
Say = Callable[[str], None]


def silent(line: str) -> None:
    """Tell nobody (the library's default; ``--quiet`` on the command line)."""


class Steps:
    """Time the steps of one job and tell someone about each.

    Parameters
    ----------
    say : callable
        Receives ``"<prefix>label ..."`` when a step starts and
        ``"<prefix>label: done in T s"`` when it ends.
    prefix : str
        Put before every line, e.g. the realization of an ensemble.

    Step times leave out the time spent compiling kernels on their first
    use: that is summed apart, as ``compile_s`` (see `upscale.compiling`).

    Examples
    --------
    >>> lines = []
    >>> steps = Steps(lines.append, prefix="r01: ")
    >>> with steps("read_s", "reading"):
    ...     pass
    >>> lines[0], lines[1].startswith("r01: reading: done in"), list(steps.timings)
    ('r01: reading ...', True, ['read_s', 'compile_s'])
    """

    def __init__(self, say: Say = silent, prefix: str = "") -> None:
        self.say = say
        self.prefix = prefix
        self._seconds: dict[str, float] = {}
        self._compiling = 0.0

    @property
    def timings(self) -> dict[str, float]:
        """Seconds per finished step, by key, then ``compile_s``."""
        return {**self._seconds, "compile_s": self._compiling}

    @contextmanager
    def __call__(self, key: str | None, label: str) -> Iterator[None]:
        """Time the block as step `key` (not recorded when None) and tell its start and end."""
        self.say(f"{self.prefix}{label} ...")
        start, compiled = time.perf_counter(), compile_seconds()
        yield
        compiling = compile_seconds() - compiled
        seconds = time.perf_counter() - start - compiling
        self._compiling += compiling
        if key is not None:
            self._seconds[key] = seconds
        first_use = f" (and {compiling:.1f} s compiling kernels on first use)" if compiling >= 0.05 else ""
        self.say(f"{self.prefix}{label}: done in {seconds:.1f} s{first_use}")
