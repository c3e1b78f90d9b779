"""Time spent compiling the package's kernels, told apart from the work itself.

The compiled kernels (numba) are built on their first use after an
installation and kept in numba's cache beside the package (or under
``NUMBA_CACHE_DIR``); later runs load them in milliseconds. That first build
takes tens of seconds for the flow-based methods (docs/performance.md), and a
time that includes it says nothing about the method. Every timing the tool
records therefore leaves it out and reports it on its own, as ``compile_s``.

The clock listens to numba's ``numba:compile`` events (numba's documented
event API), which mark real compilations only, not loads from the cache.
Compilations are serialised by numba's global compiler lock, so one clock
serves every thread; its total only grows, and a step's share is the
difference between two readings.
"""

from __future__ import annotations

import time

from numba.core import event


class _Clock(event.Listener):
    """Seconds of wall time spent inside outermost compilations, in every thread."""

    def __init__(self) -> None:
        self.total = 0.0
        self._depth = 0
        self._start = 0.0

    def on_start(self, happened: event.Event) -> None:
        if self._depth == 0:
            self._start = time.perf_counter()
        self._depth += 1

    def on_end(self, happened: event.Event) -> None:
        self._depth -= 1
        if self._depth == 0:
            self.total += time.perf_counter() - self._start


_CLOCK = _Clock()
event.register("numba:compile", _CLOCK)


def compile_seconds() -> float:
    """Seconds this process has spent compiling kernels so far (s).

    Examples
    --------
    >>> before = compile_seconds()
    >>> compile_seconds() - before   # nothing compiled in between
    0.0
    """
    return _CLOCK.total
