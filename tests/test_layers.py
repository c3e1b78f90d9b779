"""The package's dependency rule: every import points down the pipeline, never up.

What is tested
--------------
* Every module under ``upscale/`` imports only modules of its own layer or of
  the layers below it (`LAYERS`, top first), read from the source with
  `ast` — imports inside functions count too. Within a layer, the stage
  packages are peers in the order given (a peer may use the ones after it).
* The rule catches what it should: a module of a low layer that imports a
  higher one (a source written here) is reported.
* ``import upscale`` imports none of the optional extras' libraries
  (matplotlib, pyarrow, netCDF4, pyproj, distributed, xarray, rioxarray:
  figures, package formats, clusters and labelled arrays load when used), nor scikit-image (the connectivity
  of a field, loaded when described).
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

#: Top first. A module may import from its own entry or from any entry after it.
LAYERS = [
    "cli",
    "jobs",
    "demo",
    "report",
    "export",
    "analysis",
    "check",
    "methods",
    "io",
    "flow",
    "stats",
    "parallel",
    "grid",
    "gallery",
    "steps",
    "compiling",
    "_elementary",
    "field",
    "geometry",
    "labelled",
    "display",
    "units",
    "_checks",
    "caution",
    "optional",
    "errors",
]


def _place(module: str) -> int | None:
    """Index in `LAYERS` of ``upscale.<part>...``; None for ``upscale`` itself (the public API)."""
    parts = module.split(".")
    if len(parts) < 2:
        return None
    return LAYERS.index(parts[1])


def _imported(path: Path, module: str, source: str) -> list[tuple[int, str]]:
    """Absolute names of the ``upscale`` modules `source` imports, with their line numbers."""
    package = module if path.name == "__init__.py" else module.rsplit(".", 1)[0]
    found = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            names = [f"{target}.{a.name}" for a in node.names] if node.module is None else [target]
            found += [(node.lineno, n) for n in names]
        elif isinstance(node, ast.Import):
            found += [(node.lineno, a.name) for a in node.names]
    return [(line, name) for line, name in found if name == "upscale" or name.startswith("upscale.")]


def upward_imports(path: Path, module: str, source: str) -> list[str]:
    """The imports of `source` (the text of `module`, at `path`) that break the rule."""
    own = _place(module)
    if own is None:
        return []
    return [f"{module}:{line} imports {name}" for line, name in _imported(path, module, source)
            if (place := _place(name)) is None or place < own]  # fmt: skip


def _modules() -> list[tuple[Path, str]]:
    found = []
    for path in sorted((ROOT / "upscale").rglob("*.py")):
        parts = list(path.relative_to(ROOT).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts.pop()
        found.append((path, ".".join(parts)))
    return found


def test_every_stage_is_in_the_rule():
    tops = {p.relative_to(ROOT / "upscale").parts[0].removesuffix(".py") for p, _ in _modules()}
    assert tops - {"__init__"} == set(LAYERS)


def test_no_module_imports_upward():
    broken = [line for path, module in _modules() for line in upward_imports(path, module, path.read_text())]
    assert broken == []


def test_the_rule_reports_an_upward_import():
    path = ROOT / "upscale" / "flow" / "example.py"
    source = "from ..report.figures import build_figures\nfrom .solvers import make_solver\n"
    assert upward_imports(path, "upscale.flow.example", source) == [
        "upscale.flow.example:1 imports upscale.report.figures"
    ]
    inside = "def f():\n    from ..jobs.run import upscale_file\n"
    assert upward_imports(ROOT / "upscale" / "io" / "x.py", "upscale.io.x", inside) == [
        "upscale.io.x:2 imports upscale.jobs.run"
    ]


def test_import_upscale_loads_no_optional_heavy_library():
    heavy = ("matplotlib", "pyarrow", "netCDF4", "pyproj", "distributed", "skimage", "xarray", "rioxarray")
    script = f"import sys, upscale\nprint(' '.join(m for m in {heavy!r} if m in sys.modules))"
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, check=True)
    assert done.stdout.strip() == ""
