"""The optional extras (figures, formats, cluster): a missing library is one clear error line.

What is tested
--------------
Each case runs the command line in a fresh interpreter where the library is
made unimportable (``sys.modules[name] = None``, what Python does for a
package that is absent), on a real demo GeoTIFF:

* without pyarrow or netCDF4 ``upscale run`` stops before any work with one
  ``upscale: error:`` line naming the ``formats`` extra, exit 1, and writes
  nothing; ``upscale check`` of a finished run says the same;
* without matplotlib ``--plot`` (of run and of info) and ``upscale compare`` name ``figures``,
  while a run without figures still writes its folder;
* without distributed ``--workers 2`` names ``cluster``;
* with none of the optional libraries ``upscale info`` works, and
  `upscale.optional.require` raises `MissingLibraryError`, an ``ImportError``.
"""

from __future__ import annotations

import subprocess
import sys

import pytest

from upscale.errors import MissingLibraryError
from upscale.optional import EXTRAS, lazy, require

ALL = [library for _, libraries in EXTRAS.values() for library in libraries]
SCRIPT = """import sys
for name in sys.argv[1].split(","):
    sys.modules[name] = None
from upscale.cli.main import main
sys.exit(main(sys.argv[2:]))
"""


def _without(libraries, *args):
    """``upscale ARGS`` with `libraries` unimportable: (exit status, stdout, stderr)."""
    done = subprocess.run([sys.executable, "-c", SCRIPT, ",".join(libraries), *map(str, args)],
                          capture_output=True, text=True, timeout=600)  # fmt: skip
    return done.returncode, done.stdout, done.stderr


def _one_error_line(stderr, library, extra):
    assert stderr == (f"upscale: error: {EXTRAS[extra][0]} {library}, which is not installed; "
                      f'install the extra {extra!r}: pip install "upscale[{extra}]"\n')  # fmt: skip


@pytest.mark.parametrize("library", ["pyarrow", "netCDF4"])
def test_run_without_a_format_library_names_the_formats_extra(demo_dir, tmp_path, library):
    out = tmp_path / "out"
    code, stdout, stderr = _without([library], "run", demo_dir / "marrowfen_lognormal.tif", "--block", "8x8",
                                    "--method", "geometric", "--out", out)  # fmt: skip
    assert (code, stdout) == (1, "")
    _one_error_line(stderr, library, "formats")
    assert not out.exists()


def test_check_of_a_package_without_pyarrow_names_the_formats_extra(demo_dir, tmp_path, run_cli):
    out = tmp_path / "out"
    assert run_cli("run", demo_dir / "marrowfen_lognormal.tif", "--block", "16x16", "--method",
                   "geometric", "--out", out, "--no-check")[0] == 0  # fmt: skip
    code, _, stderr = _without(["pyarrow"], "check", out)
    assert code == 1
    _one_error_line(stderr, "pyarrow", "formats")


@pytest.mark.slow
def test_figures_without_matplotlib_name_the_figures_extra(demo_dir, tmp_path):
    field = demo_dir / "marrowfen_lognormal.tif"
    code, _, stderr = _without(["matplotlib"], "run", field, "--block", "16x16", "--method", "geometric",
                               "--out", tmp_path / "plot", "--plot")  # fmt: skip
    assert code == 1
    _one_error_line(stderr, "matplotlib", "figures")
    code, _, stderr = _without(["matplotlib"], "compare", field, "--block", "16x16", "--methods",
                               "arithmetic", "--out", tmp_path / "compare")  # fmt: skip
    assert code == 1
    _one_error_line(stderr, "matplotlib", "figures")
    code, _, stderr = _without(["matplotlib"], "info", demo_dir / "marrowfen_layered.tif", "--dz", "1",
                               "--plot", tmp_path / "profile.png")  # fmt: skip
    assert code == 1
    _one_error_line(stderr, "matplotlib", "figures")
    assert not (tmp_path / "plot").exists() and not (tmp_path / "compare").exists()
    assert not (tmp_path / "profile.png").exists()
    code, _, _ = _without(["matplotlib", "distributed"], "run", field, "--block", "16x16", "--method",
                          "geometric", "--out", tmp_path / "plain", "-q")  # fmt: skip
    assert code == 0 and (tmp_path / "plain" / "summary.json").is_file()


def test_workers_without_distributed_name_the_cluster_extra(demo_dir, tmp_path):
    code, _, stderr = _without(["distributed"], "run", demo_dir / "marrowfen_lognormal.tif", "--block",
                               "16x16", "--method", "geometric", "--out", tmp_path / "o", "--workers", "2")
    assert code == 1
    _one_error_line(stderr, "distributed", "cluster")


def test_info_needs_no_optional_library(demo_dir):
    code, stdout, stderr = _without(ALL, "info", demo_dir / "marrowfen_channels.tif")
    assert (code, stderr) == (0, "")
    assert "1 body spans the field" in stdout


def test_require_raises_an_import_error_naming_the_extra():
    with pytest.raises(ImportError, match=r'pip install "upscale\[cluster\]"') as raised:
        require("upscale_no_such_library", "cluster")
    assert isinstance(raised.value, MissingLibraryError)
    assert lazy("math", "formats").sqrt(4.0) == 2.0
