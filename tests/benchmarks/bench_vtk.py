"""Benchmark: the package's VTK file (``coarse.vtr``) — its size, the time to write it and to open it.

Run on demand (not collected by pytest), from the repository's top folder::

    python tests/benchmarks/bench_vtk.py [--before OLD_VTK_PY] [--side 2048 [8192 ...]] [--repeat 5]

Cases: the demo 3D model (``upscale run demo-fields/marrowfen_3d.tif --dz 2
--block 8x8x4 --method geometric``) and ``--side``² lognormal maps (FFT-MA,
geometric mean 100 mD, σ(ln k) = 1, correlation 8 cells) in 4 x 4 blocks
(``--method geometric --no-check``). Each case runs once through the command
line in this process; the arguments of its call to ``write_vtk`` are kept,
and the writer is then called ``--repeat`` times more on them: wall time of
each write (median and range), the file's size, the peak of the memory that
Python allocates during one write (tracemalloc: NumPy's arrays included),
and the time VTK's own reader (``vtkXMLRectilinearGridReader``, the ``vtk``
wheel) takes to open the file and decode every array.

``--before`` names another version of ``upscale/export/vtk.py`` (for example
``git show main:upscale/export/vtk.py > /tmp/vtk_before.py``); it is loaded
as a module of the package and measured on the same arguments, in the same
run, so that the ratios hold on a busy machine.
"""

from __future__ import annotations

import argparse
import importlib.util
import shutil
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path
from typing import Any

import numpy as np

DEMO = Path(__file__).resolve().parents[2] / "demo-fields"


def _lognormal_map(path: Path, side: int) -> Path:
    import rasterio
    from affine import Affine
    from upscale.demo.fields import lognormal_field

    k = lognormal_field((side, side), (8, 8), geometric_mean=100.0, sigma_ln=1.0, seed=2_718_281_828)
    profile = {"driver": "GTiff", "dtype": "float64", "width": side, "height": side, "count": 1,
               "crs": "EPSG:32633", "transform": Affine(10.0, 0, 500_000.0, 0, -10.0, 6_000_000.0)}
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(k.astype(np.float64), 1)
    return path


def _arguments(args: list[str], out: Path) -> tuple[Any, ...]:
    """Run the command line in this process; the arguments it gave ``write_vtk``."""
    import upscale.export.result as result
    from upscale.cli.main import main

    kept: list[tuple[Any, ...]] = []
    writer = result.write_vtk

    def keep(*arguments: Any) -> None:
        kept.append(arguments)
        writer(*arguments)

    result.write_vtk = keep
    try:
        assert main(["-q", *args, "--out", str(out)]) == 0
    finally:
        result.write_vtk = writer
    (arguments,) = kept
    return arguments[1:]  # without the path


def _open(path: Path) -> float:
    from vtkmodules.util.numpy_support import vtk_to_numpy
    from vtkmodules.vtkIOXML import vtkXMLRectilinearGridReader

    start = time.perf_counter()
    reader = vtkXMLRectilinearGridReader()
    reader.SetFileName(str(path))
    reader.Update()
    cells = reader.GetOutput().GetCellData()
    for i in range(cells.GetNumberOfArrays()):
        vtk_to_numpy(cells.GetArray(i))
    seconds = time.perf_counter() - start
    assert cells.GetNumberOfArrays() > 1, path
    return seconds


def _measure(write: Any, arguments: tuple[Any, ...], folder: Path, repeat: int) -> dict[str, Any]:
    path = folder / "coarse.vtr"
    times = []
    for _ in range(repeat):
        path.unlink(missing_ok=True)
        start = time.perf_counter()
        write(path, *arguments)
        times.append(time.perf_counter() - start)
    tracemalloc.start()
    write(path, *arguments)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    opened = [_open(path) for _ in range(repeat)]
    return {"size": path.stat().st_size, "write": times, "peak": peak, "open": opened}


def _load(path: Path) -> Any:
    """Another version of ``upscale/export/vtk.py``, as a module of the package (relative imports)."""
    spec = importlib.util.spec_from_file_location("upscale.export._vtk_before", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module.write_vtk


def _row(case: str, name: str, cells: int, m: dict[str, Any]) -> str:
    w, o = (1e3 * np.array(m[k]) for k in ("write", "open"))  # ms
    return (f"| {case} | {name} | {cells} | {m['size'] / 1e3:,.0f} kB | {np.median(w):.1f} ms "
            f"({w.min():.1f}–{w.max():.1f}) | {m['peak'] / 2**20:.1f} MiB | {np.median(o):.1f} ms |")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--before", type=Path, help="another version of upscale/export/vtk.py")
    parser.add_argument("--side", type=int, nargs="+", default=[2048], help="sides of the lognormal maps")
    parser.add_argument("--repeat", type=int, default=5)
    options = parser.parse_args()
    from upscale.export.vtk import write_vtk

    writers = {"package": write_vtk}
    if options.before:
        writers = {"before": _load(options.before), **writers}
    print("| case | writer | coarse cells | file | write: median (range) | peak (Python) | open in VTK |")
    print("|---|---|---|---|---|---|---|")
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        cases = {"demo 3D, 8x8x4": [str(DEMO / "marrowfen_3d.tif"), "--dz", "2", "--block", "8x8x4",
                                    "--method", "geometric"]}  # fmt: skip
        for side in options.side:
            raster = _lognormal_map(folder / f"map{side}.tif", side)
            cases[f"lognormal {side}², 4x4"] = [str(raster), "--block", "4x4", "--method", "geometric",
                                                "--no-check"]  # fmt: skip
        for case, args in cases.items():
            arguments = _arguments(["run", *args], folder / "run")
            cells = int(np.prod(arguments[0].shape))
            for name, write in writers.items():
                print(_row(case, name, cells, _measure(write, arguments, folder, options.repeat)), flush=True)
            shutil.rmtree(folder / "run")


if __name__ == "__main__":
    sys.exit(main())
