"""docs/python.md runs as written and prints what it shows.

Every ``python`` block of the page runs in order in one namespace, from a
folder where ``demo-fields/`` is, as a reader would run them; a ``text``
block right after a ``python`` block is what that block must print, line for
line. The blocks assert their own checkable results (Wiener's bounds, the
exact layered values, the flow check, a raster read back).
"""

from __future__ import annotations

import contextlib
import io
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PAGE = ROOT / "docs" / "python.md"


def _cells() -> list[tuple[str, str | None]]:
    """(code, expected output or None) of each ``python`` block, in page order."""
    blocks = re.findall(r"```(python|text)\n(.*?)```", PAGE.read_text(), flags=re.S)
    cells: list[tuple[str, str | None]] = []
    for kind, body in blocks:
        if kind == "python":
            cells.append((body, None))
        else:
            assert cells and cells[-1][1] is None, "a text block follows a python block"
            cells[-1] = (cells[-1][0], body)
    return cells


# rioxarray's reader multiplies Affine transforms with `*`, which affine >= 3.1 marks as pending deprecation
@pytest.mark.filterwarnings("ignore:Use `@` matmul:PendingDeprecationWarning:rioxarray")
def test_every_block_runs_and_prints_what_the_page_shows(tmp_path: Path, monkeypatch: pytest.MonkeyPatch):
    (tmp_path / "demo-fields").symlink_to(ROOT / "demo-fields")
    monkeypatch.chdir(tmp_path)
    cells = _cells()
    assert len(cells) >= 8 and sum(expected is not None for _, expected in cells) >= 6
    namespace: dict = {}
    for number, (code, expected) in enumerate(cells, 1):
        printed = io.StringIO()
        with contextlib.redirect_stdout(printed):
            exec(compile(code, f"{PAGE.name}, block {number}", "exec"), namespace)  # noqa: S102
        if expected is not None:
            assert printed.getvalue().splitlines() == expected.splitlines(), f"block {number}"
