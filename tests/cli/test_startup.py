"""What the command line imports before it knows what it will do.

What is tested
--------------
* ``import upscale.cli.main`` and ``upscale --help``, each in a fresh Python
  process, load none of the computing or writing libraries (numpy, scipy,
  numba, dask, pyamg, rasterio, matplotlib, distributed, pyarrow, netCDF4):
  each command's module is imported when that command is given.
* The summaries ``upscale --help`` lists without importing the commands are
  the first paragraphs of the commands' own help, and so print as click would
  print them from the commands.
* A run without a cluster or figures (``upscale run ... --no-check``) loads
  neither distributed nor matplotlib: dask is given its threaded scheduler,
  and the memory limit is read without distributed.
* A command imported on demand still ends a bad input with one
  ``upscale: error:`` line on stderr.

No timing here: docs/performance.md and tests/benchmarks/bench_startup.py
measure the start-up.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import click
import pytest

from upscale.cli.main import COMMANDS, cli

ROOT = Path(__file__).resolve().parents[2]

#: What a command loads when it computes or writes, never to start or to print its help.
HEAVY = ("numpy", "scipy", "scipy.sparse", "scipy.sparse.linalg", "numba", "dask", "dask.distributed",
         "distributed", "pyamg", "rasterio", "matplotlib", "pyarrow", "netCDF4", "xarray",
         "pandas")  # fmt: skip


def _loaded_after(code: str) -> list[str]:
    """The modules of `HEAVY` that a fresh interpreter holds after running `code`."""
    script = f"import sys\n{code}\nprint(' '.join(m for m in {HEAVY!r} if m in sys.modules), file=sys.stderr)"
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    return done.stderr.split()


def test_importing_the_command_line_loads_no_heavy_library():
    assert _loaded_after("import upscale.cli.main") == []


def test_help_loads_no_heavy_library():
    code = "from upscale.cli.main import main\nassert main(['--help']) == 0"
    assert _loaded_after(code) == []


def test_version_loads_no_heavy_library():
    assert _loaded_after("from upscale.cli.main import main\nassert main(['--version']) == 0") == []


def test_a_run_without_a_cluster_loads_neither_distributed_nor_matplotlib(tmp_path):
    args = ["-q", "run", str(ROOT / "demo-fields" / "marrowfen_lognormal.tif"), "--block", "8x8", "--method",
            "geometric", "--no-check", "--out", str(tmp_path / "out")]  # fmt: skip
    loaded = _loaded_after(f"from upscale.cli.main import main\nassert main({args!r}) == 0")
    assert (tmp_path / "out" / "summary.json").exists()
    assert not {"distributed", "dask.distributed", "matplotlib"} & set(loaded)


@pytest.mark.parametrize("name", sorted(COMMANDS))
def test_listed_summary_is_the_commands_own(name):
    command = cli.get_command(click.Context(cli), name)
    assert command.name == name
    assert command.help.split("\n\n")[0] == COMMANDS[name]
    listed = click.Command(name, help=COMMANDS[name])
    for limit in (20, 45, 60, 90):
        assert listed.get_short_help_str(limit) == command.get_short_help_str(limit)


def test_help_lists_every_command_and_no_other():
    listed = cli.get_help(click.Context(cli, info_name="upscale")).split("Commands:\n")[1].split("\n\n")[0]
    assert [line.split()[0] for line in listed.splitlines()] == sorted(COMMANDS)
    assert cli.get_command(click.Context(cli), "nosuch") is None


def test_a_command_loaded_on_demand_reports_bad_input_in_one_line(tmp_path):
    args = ["run", str(tmp_path / "missing.tif"), "--block", "2x2", "--method", "geometric", "--out",
            str(tmp_path / "out")]  # fmt: skip
    code = f"import sys\nfrom upscale.cli.main import main\nsys.exit(main({args!r}))"
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300)
    assert done.returncode == 2
    assert done.stderr.count("\n") == 1 and done.stderr.startswith("upscale: error: ")
