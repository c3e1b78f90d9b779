"""Outputs on the demo fields stay what they were when recorded: a guard for refactoring.

What is tested
--------------
Four commands on the demo fields (a geometric run with porosity, a 3D
flow-transmissibility run, a periodic flow run with figures, a comparison)
write every output file; each file is reduced to canonical content —
GeoTIFF bands, table and NetCDF columns and VTK arrays (decoded by VTK's
own reader, whatever the file's encoding) as float64 arrays,
JSON without the keys that differ between runs (times, versions, paths),
figures as bytes — and each piece's SHA-256 is compared with the digest
recorded in ``tests/data/reference_outputs.json``. A reorganisation of the
code must leave every digest as it was (bit for bit).

Digests hold on the library versions they were recorded with (listed in the
file). With other versions of those libraries, rounding may differ in the
last bits: the test then compares the recorded mean, minimum, maximum and
count of each array to 1e-9 instead, and skips the figures.

Record again only when a change of the outputs is intended, and say why in
the commit::

    python tests/test_reference_outputs.py --record
"""

from __future__ import annotations

import csv
import hashlib
import json
import sys
from importlib import metadata
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from conftest import read_vtr

ROOT = Path(__file__).resolve().parents[1]
RECORD = ROOT / "tests" / "data" / "reference_outputs.json"
#: The libraries whose versions decide the last bits of the outputs.
STACK = ("numpy", "scipy", "numba", "llvmlite", "pyamg", "dask", "rasterio", "matplotlib", "netCDF4",
         "pyarrow")
#: Keys of the JSON outputs that differ from one run to the next, or from one folder to the next.
VOLATILE = {"timings_s", "versions", "command", "working_folder", "seconds", "compile_seconds", "path",
            "resolved"}  # fmt: skip

CASES = {
    "geometric-2d-porosity": ["run", "@marrowfen_lognormal.tif", "--porosity", "@marrowfen_porosity.tif",
                              "--block", "8x8", "--method", "geometric"],
    "flow-transmissibility-3d": ["run", "@marrowfen_3d.tif", "--dz", "2", "--kv-kh", "0.1", "--block",
                                 "8x8x4", "--method", "flow-transmissibility", "--border", "2"],
    "geometric-3d-auto-layers": ["run", "@marrowfen_3d.tif", "--dz", "2", "--kv-kh", "0.1", "--block",
                                 "8x8xauto:4", "--method", "geometric"],
    "flow-periodic-figures": ["run", "@marrowfen_channels.tif", "--block", "16x16", "--method", "flow",
                              "--bc", "periodic", "--border", "2", "--plot"],
    "compare-lognormal": ["compare", "@marrowfen_lognormal.tif", "--block", "16x16", "--methods",
                        "harmonic,tubes,renormalization,flow"],
}  # fmt: skip


def _digest(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _array(values: np.ndarray) -> dict[str, Any]:
    values = np.ascontiguousarray(values, dtype=np.float64)
    finite = values[np.isfinite(values)]
    stats = [float(finite.mean()), float(finite.min()), float(finite.max())] if finite.size else [None] * 3
    digest = _digest(repr(values.shape).encode() + values.tobytes())
    return {"sha256": digest, "stats": [*stats, int(finite.size)]}


def _numbers(column: list[str]) -> np.ndarray | None:
    try:
        return np.array([float(v) if v != "" else np.nan for v in column])
    except ValueError:
        return None


def _strip(content: Any) -> Any:
    if isinstance(content, dict):
        return {k: _strip(v) for k, v in content.items() if k not in VOLATILE}
    if isinstance(content, list):
        return [_strip(v) for v in content]
    return content


def canonical(folder: Path) -> dict[str, dict[str, Any]]:
    """Every output file of `folder` as named pieces, each with its digest (and array statistics)."""
    import netCDF4
    import pyarrow.parquet as pq
    import rasterio

    pieces: dict[str, dict[str, Any]] = {}
    for path in sorted(p for p in folder.rglob("*") if p.is_file()):
        name = path.relative_to(folder).as_posix()
        if path.suffix == ".tif":
            with rasterio.open(path) as raster:
                pieces[name] = _array(raster.read())
        elif path.suffix == ".csv":
            with open(path, newline="") as table:
                rows = list(csv.reader(table))
            for head, *column in zip(*rows):
                values = _numbers(column)
                pieces[f"{name}:{head}"] = (_array(values) if values is not None
                                            else {"sha256": _digest("\n".join(column).encode())})  # fmt: skip
        elif path.suffix == ".parquet":
            for head, column in pq.read_table(path).to_pydict().items():
                values = _numbers(["" if v is None else str(v) for v in column])
                pieces[f"{name}:{head}"] = (_array(values) if values is not None
                                            else {"sha256": _digest("\n".join(map(str, column)).encode())})
        elif path.suffix == ".nc":
            with netCDF4.Dataset(path) as dataset:
                for head, variable in dataset.variables.items():
                    values = np.ma.filled(np.ma.asarray(variable[:], dtype=np.float64), np.nan)
                    pieces[f"{name}:{head}"] = _array(values)
        elif path.suffix == ".vtr":
            _, cells, coordinates = read_vtr(path)  # decoded by VTK's reader: the encoding does not count
            for head, values in {**cells, **coordinates}.items():
                pieces[f"{name}:{head}"] = _array(values)
        elif path.suffix == ".json":
            content = json.dumps(_strip(json.loads(path.read_text())), sort_keys=True)
            pieces[name] = {"sha256": _digest(content.encode())}
        elif path.suffix in (".png", ".svg"):
            pieces[name] = {"sha256": _digest(path.read_bytes()), "image": True}
        # report.html holds times and the folder; its content comes from the pieces above
    return pieces


def _stack() -> dict[str, str]:
    return {name: metadata.version(name) for name in STACK}


def _run_case(args: list[str], demo: Path, out: Path) -> Path:
    from upscale.cli.main import main

    resolved = [str(demo / a[1:]) if a.startswith("@") else a for a in args]
    assert main(["-q", *resolved, "--out", str(out)]) == 0
    return out


@pytest.mark.parametrize("case", list(CASES))
def test_outputs_match_the_recorded_reference(case, demo_dir, tmp_path):
    recorded = json.loads(RECORD.read_text())
    expected = recorded["cases"][case]
    found = canonical(_run_case(CASES[case], demo_dir, tmp_path / case))
    assert sorted(found) == sorted(expected), "the set of outputs changed"
    if recorded["stack"] == _stack():
        changed = sorted(k for k in expected if found[k]["sha256"] != expected[k]["sha256"])
        assert changed == [], f"outputs differ from the reference: {changed}"
        return
    for key, piece in expected.items():  # another stack: the statistics of the arrays
        if "stats" in piece:
            got, want = (np.array(p["stats"], dtype=float) for p in (found[key], piece))
            np.testing.assert_allclose(got, want, rtol=1e-9, err_msg=key)


def record() -> None:
    """Run every case on freshly generated demo fields and write the reference file."""
    import tempfile

    from upscale.demo.scenario import write_demo_fields

    with tempfile.TemporaryDirectory() as folder:
        demo = Path(folder) / "demo-fields"
        write_demo_fields(demo)
        cases = {case: canonical(_run_case(args, demo, Path(folder) / case)) for case, args in CASES.items()}
    content = {"stack": _stack(), "cases": cases}
    RECORD.write_text(json.dumps(content, indent=1, sort_keys=True) + "\n")
    print(f"recorded {sum(map(len, cases.values()))} pieces of {len(cases)} cases in {RECORD}")


if __name__ == "__main__":
    if sys.argv[1:] != ["--record"]:
        sys.exit("usage: python tests/test_reference_outputs.py --record")
    record()
