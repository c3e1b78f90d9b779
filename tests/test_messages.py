"""Library messages name Python parameters; the command line names its options.

A library caller passes ``border=-1`` and should read about `border`, not
about a ``--border`` option it never saw; the command line translates the
backticked names to its options (`upscale.cli.settings.command_line`).
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest
from conftest import write_raster

import upscale
from upscale.errors import InputError
from upscale.gallery.problems import uncorrelated_lognormal

PACKAGE = Path(upscale.__file__).parent
#: An option of the command line: two dashes then a letter, not inside a word.
OPTION = re.compile(r"(?<![\w-])--[a-z]")


def test_library_message_names_the_parameter() -> None:
    field = upscale.Field.from_arrays(uncorrelated_lognormal((16, 16), 5), cell_size=(1.0, 1.0))
    with pytest.raises(InputError) as raised:
        upscale.coarsen(field, "8x8", "flow", border=-1)
    message = str(raised.value)
    assert "`border` must be 0 or more" in message
    assert not OPTION.search(message), message


def test_command_line_names_the_option(tmp_path: Path, run_cli) -> None:
    path = write_raster(tmp_path / "k.tif", uncorrelated_lognormal((16, 16), 5))
    code, _, err = run_cli("run", path, "--block", "8x8", "--method", "flow", "--border", "-1",
                           "--out", tmp_path / "out")  # fmt: skip
    assert code == 2
    assert err.startswith("upscale: error: --border must be 0 or more"), err
    assert "`" not in err
    assert not (tmp_path / "out").exists()


def _raised_text(tree: ast.AST) -> list[tuple[int, str]]:
    """(line, text) of every string constant inside a ``raise`` statement."""
    found = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Raise) and node.exc is not None:
            for part in ast.walk(node.exc):
                if isinstance(part, ast.Constant) and isinstance(part.value, str):
                    found.append((part.lineno, part.value))
    return found


def test_no_library_message_names_an_option() -> None:
    """Outside ``cli/``, a raised message names parameters, never ``--options``."""
    offenders = []
    for path in sorted(PACKAGE.rglob("*.py")):
        if "cli" in path.relative_to(PACKAGE).parts:
            continue
        for line, text in _raised_text(ast.parse(path.read_text(), str(path))):
            if OPTION.search(text):
                offenders.append(f"{path.relative_to(PACKAGE)}:{line}: {text!r}")
    assert not offenders, "\n".join(offenders)


def test_the_guard_can_fail() -> None:
    source = 'raise InputError("--border must be 0 or more")\n'
    assert [OPTION.search(text) is not None for _, text in _raised_text(ast.parse(source))] == [True]
    assert OPTION.search("`border` must be 0 or more") is None
