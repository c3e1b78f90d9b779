"""The README's Troubleshooting tables and the code's error messages agree.

Each message quoted in the first column of the tables in the README's
"Troubleshooting" section is cut at its placeholders (``FILE``, ``N``, ...)
and ellipses, and every literal fragment long enough to mean something must
occur in a string literal under ``upscale/`` (or, for messages that come from
``click``, in click's source). A value interpolated into an f-string breaks
the literal there, so a fragment cannot span one. Conversely, the first
literal piece of every `UpscaleError` raised under ``upscale/`` (what the
command line prints as one ``upscale: error:`` line) must be documented,
unless the allow-list below says why not. A reworded message thus fails here
instead of leaving the README stale.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import click
import pytest

from upscale.cli import check, compare, demo, info, plan, run  # noqa: F401 - every error class defined
from upscale.cli.settings import command_line
from upscale.errors import UpscaleError

ROOT = Path(__file__).resolve().parents[1]
SECTION = (ROOT / "README.md").read_text().split("\n## Troubleshooting\n")[1].split("\n## ")[0]

# the upper-case words the README uses for values ...
PLACEHOLDERS = "FILE|FIELD|DIR|N|M|X|Y|L|A|B|R|C|NAME|METHOD|OUT|ADDR|PATTERN|MAIN"
# ... and the values it shows as examples where the code interpolates one, e.g. "--kz" in
# f"--{name} was given but ..." or "amg" in f"the {self.method} pressure solve ..."
EXAMPLES = r"--kz|kx|dz|nx|(?<=along )x|(?<=got )0|10|int16|amg|'power'|--exponent|'--out'|summary\.json"
SPLIT = re.compile(rf"(?<![\w-])(?:{PLACEHOLDERS}|{EXAMPLES})(?![\w-])|…|\.\.\.")
CLICK = ("Invalid value for", "is a directory", "is a file")  # messages that click writes
MIN_LENGTH = 9  # keeps "is a file"

# raised on purpose but deliberately not in the tables, as "file: first literal piece": why
_CLICK_FIRST = "the option's click type refuses the value first, with 'Invalid value for ...'"
_PYTHON_ONLY = "reachable from Python only: the command line builds the fields itself and checks them first"
_ELIDED = "documented with this prefix elided, as '… the fine grid has N cells ...'"
NOT_DOCUMENTED = {
    "upscale/_checks.py: must be a fraction in [0, 1], got": _CLICK_FIRST,  # --min-active
    "upscale/grid/blocks.py: remainder must be one of": _CLICK_FIRST,
    "upscale/io/read.py: scale must be one of": _CLICK_FIRST,
    "upscale/io/read.py: --resample must be one of": _CLICK_FIRST,
    "upscale/units.py: unknown unit": _CLICK_FIRST,
    "upscale/analysis/percentiles.py: --percentiles is nonexceedance or exceedance, got": _CLICK_FIRST,
    "upscale/methods/registry.py: unknown method": _CLICK_FIRST,
    "upscale/check/wells.py: the well connection is": _CLICK_FIRST,  # --well-connection
    "upscale/methods/flow_based.py: unknown boundary condition": _CLICK_FIRST,
    "upscale/methods/flow_based.py: --border must be a whole number of fine cells, not": _CLICK_FIRST,
    "upscale/export/staging.py: exists and is not a folder": _CLICK_FIRST,  # --out names a file
    "upscale/field.py: but the grid is": _PYTHON_ONLY,
    "upscale/geometry.py: the thickness has shape": _PYTHON_ONLY,
    "upscale/field.py: a 3D field needs the layer thickness dz in m": _PYTHON_ONLY,
    "upscale/field.py: kz was given for a 2D map; a map has no vertical permeability": _PYTHON_ONLY,
    "upscale/field.py: expected a 2D or 3D array, got": _PYTHON_ONLY,
    "upscale/check/axis.py: the fine and coarse grids differ in extent along": _PYTHON_ONLY,
    "upscale/methods/global_flow.py: the fine flow along": _PYTHON_ONLY,
    "upscale/check/axis.py: the fine corner flow was solved for another block partition": _PYTHON_ONLY,
    "upscale/flow/corner.py: the corner region of the check spans": _PYTHON_ONLY,
    "upscale/methods/coarsen.py: the fine grid's": "an invariant: a raster's cells are uniform",
    "upscale/jobs/run.py: --plot and --report show the flow check, and": _ELIDED,
    "upscale/jobs/compare.py: a comparison ranks methods by the flow check, and": _ELIDED,
}


def _normal(text: str) -> str:
    return " ".join(text.split())


def _text(node: ast.AST) -> str:
    """A string literal as the command line prints it; an f-string's values become ``{}``."""
    if isinstance(node, ast.JoinedStr):
        return command_line("".join(v.value if isinstance(v, ast.Constant) else "{}" for v in node.values))
    return command_line(node.value)


def _literals(folder: Path) -> list[str]:
    """Every string literal but docstrings under `folder`, with its Python parameters as options."""
    found = []
    for path in sorted(folder.rglob("*.py")):
        tree = ast.parse(path.read_text())
        skip = {id(n.value) for n in ast.walk(tree) if isinstance(n, ast.Expr)}  # docstrings
        skip |= {id(v) for n in ast.walk(tree) if isinstance(n, ast.JoinedStr) for v in n.values}
        for node in ast.walk(tree):
            # the parser has already joined adjacent literals ("abc " "def") into one node
            if isinstance(node, ast.JoinedStr) or (
                isinstance(node, ast.Constant) and isinstance(node.value, str) and id(node) not in skip
            ):
                found.append(_text(node))
    return [_normal(text) for text in found]


CODE = _literals(ROOT / "upscale")
CLICK_CODE = _literals(Path(click.__file__).parent)


def _documented() -> list[str]:
    """The messages quoted in the first column of the Troubleshooting tables."""
    messages = []
    for line in SECTION.splitlines():
        if line.startswith("| `"):
            first = line[2:].split(" | ")[0]
            # alternatives are separate backticked pieces; skip bare option names like `--kv-kh`
            messages += [m for m in re.findall(r"`([^`]+)`", first) if not re.fullmatch(r"--[\w-]+", m)]
    return messages


def fragments(message: str) -> list[str]:
    """The literal pieces of `message` between placeholders and ellipses, long enough to mean something."""
    pieces = (_normal(p).strip(" .,;:'\"()[]/-") for p in SPLIT.split(message))
    return [p for p in pieces if len(p) >= MIN_LENGTH]


def missing(message: str) -> list[str]:
    """The fragments of `message` in no string literal of the code that writes it."""
    sources = CLICK_CODE if any(c in message for c in CLICK) else CODE
    return [f for f in fragments(message) if not any(f in text for text in sources)]


# a message of values only ("method 'power' needs --exponent") has nothing to look up
CHECKABLE = [message for message in _documented() if fragments(message)]


@pytest.mark.parametrize("message", CHECKABLE)
def test_documented_message_is_in_the_code(message: str) -> None:
    assert missing(message) == []


@pytest.mark.parametrize("message", ["FILE: no such folder", "--kv-kh must be > 0 and whole (kz = …)"])
def test_a_reworded_message_is_caught(message: str) -> None:
    assert missing(message)


def _subclasses(cls: type) -> set[str]:
    return {cls.__name__}.union(*(_subclasses(sub) for sub in cls.__subclasses__()))


def _raised() -> list[tuple[str, str]]:
    """("file:line", first literal piece of 12 characters or more) of each `UpscaleError` raised."""
    errors, found = _subclasses(UpscaleError), []
    for path in sorted((ROOT / "upscale").rglob("*.py")):
        for node in ast.walk(ast.parse(path.read_text())):
            call = node.exc if isinstance(node, ast.Raise) else None
            if isinstance(call, ast.Call) and call.args and getattr(call.func, "id", None) in errors:
                # a message built elsewhere (raise InputError(reason)) has no literal here
                strings = [n for n in ast.walk(call.args[0]) if isinstance(n, ast.JoinedStr)
                           or (isinstance(n, ast.Constant) and isinstance(n.value, str))]  # fmt: skip
                pieces = [_normal(p).strip(" ,.:;'\"(") for n in strings for p in _text(n).split("{}")]
                long = [p for p in pieces if len(p) >= 12]
                found += [(f"{path.relative_to(ROOT)}:{node.lineno}", long[0])] if long else []
    return found


def documented(piece: str) -> bool:
    """Whether the README holds the first clause of `piece`, or a documented fragment is part of it."""
    clause = re.split(r"; | — | \(|: ", piece)[0]  # the README may elide the rest
    fragments_ = (f for message in _documented() for f in fragments(message))
    return (len(clause) >= 12 and clause in _normal(SECTION)) or any(f in piece for f in fragments_)


def _key(where: str, piece: str) -> str:
    return f"{where.split(':')[0]}: {piece}"


RAISED = [(where, piece) for where, piece in _raised() if _key(where, piece) not in NOT_DOCUMENTED]


@pytest.mark.parametrize("where,piece", RAISED, ids=[where for where, _ in RAISED])
def test_raised_message_is_documented(where: str, piece: str) -> None:
    assert documented(piece), f"{where}: {piece!r} is raised but not in the README's Troubleshooting"


def test_every_message_left_out_is_still_raised() -> None:
    # an allow-list entry whose message was reworded or removed would hide nothing: drop it
    assert set(NOT_DOCUMENTED) <= {_key(where, piece) for where, piece in _raised()}
