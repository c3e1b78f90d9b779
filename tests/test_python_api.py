"""Tests of the library as a scientific-Python user meets it.

What is tested
--------------
* `coarsen` takes a NumPy array (a map or a model; kx, on 1 m cells unless
  `cell_size` says otherwise), a raster opened by ``rioxarray.open_rasterio``
  (georeference, cell size and nodata read from it) and a `Field`, with the
  same coarse values bit for bit.
* ``Field.to_xarray`` / ``Field.from_xarray`` give back the field exactly
  (arrays, cell sizes, transform, CRS); ``Upscaled.to_xarray`` holds the
  coarse properties and transmissibilities on labelled dimensions with the CRS.
* ``repr`` of `Upscaled` and `Field` is a few lines with the shape, block,
  method, unit and mean coarse kx; ``_repr_html_`` is an escaped table.
* `Upscaled` takes every field after ``coarse`` by keyword; its
  transmissibilities are computed once (``functools.cached_property``).
* ``write_result(formats=...)`` writes the GeoTIFFs, the package or both.
* Without xarray, the conversions raise one `MissingLibraryError` line naming
  the extra.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import rioxarray
from conftest import write_raster

import upscale
from upscale import Field, InputError, coarsen, read_field, write_result
from upscale.gallery.problems import uncorrelated_lognormal
from upscale.io.windows import open_raster
from upscale.methods.coarsen import Upscaled


def _same_coarse(a: Upscaled, b: Upscaled) -> None:
    for name, values in a.coarse.properties().items():
        np.testing.assert_array_equal(values, b.coarse.properties()[name], err_msg=name)
    for name in ("dx", "dy", "dz"):
        np.testing.assert_array_equal(getattr(a.coarse.grid, name), getattr(b.coarse.grid, name))


def test_coarsen_takes_a_numpy_map_on_1_m_cells():
    k = uncorrelated_lognormal((12, 16), 3)
    from_array = coarsen(k, "4x4", "harmonic")
    _same_coarse(from_array, coarsen(Field.from_arrays(k, cell_size=(1.0, 1.0)), "4x4", "harmonic"))
    assert from_array.coarse.ndim == 2
    assert from_array.coarse.grid.dx.tolist() == [4.0] * 4
    sized = coarsen(k, "4x4", "harmonic", cell_size=(25.0, 10.0))
    assert sized.coarse.grid.dx[0] == 100.0 and sized.coarse.grid.dy[0] == 40.0


def test_coarsen_takes_a_numpy_model_as_kx_of_every_axis():
    k = uncorrelated_lognormal((4, 8, 8), 11)
    result = coarsen(k, "4x4x2", "flow", dz=2.0)
    _same_coarse(result, coarsen(Field.from_arrays(k, dz=2.0), "4x4x2", "flow"))
    assert result.coarse.shape == (2, 2, 2) and result.coarse.ndim == 3
    assert result.coarse.grid.dz.tolist() == [4.0, 4.0]


def test_coarsen_refuses_what_it_cannot_take():
    with pytest.raises(InputError, match=r"`field` must be a Field, a NumPy or dask array"):
        coarsen([[1.0, 2.0]], "1x1")
    with pytest.raises(InputError, match=r"must have 2 \(rows, columns\) or 3"):
        coarsen(np.ones(8), "2x2")
    field = Field.from_arrays(np.ones((4, 4)))
    with pytest.raises(InputError, match=r"`cell_size` describe an array; a Field has its own"):
        coarsen(field, "2x2", cell_size=(5.0, 5.0))


# rioxarray's reader multiplies Affine transforms with `*`, which affine >= 3.1 marks as pending deprecation
@pytest.mark.filterwarnings("ignore:Use `@` matmul:PendingDeprecationWarning:rioxarray")
def test_coarsen_of_a_rioxarray_raster_equals_coarsen_of_the_file(tmp_path: Path):
    k = uncorrelated_lognormal((3, 16, 24), 7)
    k[1, 2, 3] = -9999.0  # the file's nodata: inactive in both
    path = write_raster(tmp_path / "k.tif", k, cell_size=(20.0, 10.0), nodata=-9999.0)
    raster = rioxarray.open_rasterio(path)  # lazily loaded: every .data access reads again
    from_raster = coarsen(raster, "4x4x1", "geometric", dz=2.0)
    from_file = coarsen(read_field(path, dz=2.0), "4x4x1", "geometric")
    _same_coarse(from_raster, from_file)
    assert np.isnan(from_raster.fine.kx[1, 2, 3])
    assert from_raster.coarse.grid.transform == from_file.coarse.grid.transform
    assert from_raster.coarse.grid.crs == from_file.coarse.grid.crs


def test_a_field_goes_to_xarray_and_back_exactly(tmp_path: Path):
    k = uncorrelated_lognormal((3, 8, 12), 5)
    porosity = np.full(k.shape, 0.2)
    path = write_raster(tmp_path / "k.tif", k, cell_size=(25.0, 12.5))
    phi = write_raster(tmp_path / "phi.tif", porosity, cell_size=(25.0, 12.5))
    field = read_field(path, dz=[1.0, 2.0, 3.0], porosity=phi)
    ds = field.to_xarray()
    assert ds.kx.dims == ("layer", "y", "x")
    assert ds.rio.crs == field.grid.crs
    assert ds.x.values[1] - ds.x.values[0] == 25.0 and ds.z.values.tolist() == [-0.5, -2.0, -4.5]
    back = Field.from_xarray(ds)
    for name, values in field.properties().items():
        np.testing.assert_array_equal(np.asarray(back.properties()[name]), np.asarray(values), err_msg=name)
    assert back.grid.transform == field.grid.transform and back.grid.crs == field.grid.crs
    for name in ("dx", "dy", "dz"):
        np.testing.assert_array_equal(getattr(back.grid, name), getattr(field.grid, name))
    assert back.unit == field.unit and back.ndim == 3


def test_a_field_with_a_geometry_goes_to_xarray_and_back_exactly(tmp_path: Path):
    k = uncorrelated_lognormal((3, 8, 12), 6)
    thickness = np.random.default_rng(6).uniform(0.0, 3.0, k.shape)
    thickness[1, :, :4] = 0.0  # pinched out
    top = 80.0 - np.arange(12)[None, :] * np.ones((8, 1))
    path = write_raster(tmp_path / "k.tif", k, cell_size=10.0)
    field = read_field(path, top=write_raster(tmp_path / "top.tif", top, cell_size=10.0),
                       thickness=write_raster(tmp_path / "h.tif", thickness, cell_size=10.0))  # fmt: skip
    ds = field.to_xarray()
    assert ds.thickness.dims == ("layer", "y", "x") and ds.top.dims == ("y", "x")
    assert ds.top.attrs["positive"] == "up"
    back = Field.from_xarray(ds)
    np.testing.assert_array_equal(back.geometry.top, top)
    np.testing.assert_array_equal(np.asarray(back.geometry.thickness), thickness)
    np.testing.assert_array_equal(back.grid.dz, field.grid.dz)
    a, b = coarsen(field, "4x4x3", "flow"), coarsen(back, "4x4x3", "flow")
    np.testing.assert_array_equal(b.coarse.kz, a.coarse.kz)


def test_upscaled_to_xarray_holds_properties_and_transmissibilities(tmp_path: Path):
    path = write_raster(tmp_path / "k.tif", uncorrelated_lognormal((16, 24), 9), cell_size=10.0)
    result = coarsen(read_field(path), "4x4", "arithmetic")
    ds = result.to_xarray()
    np.testing.assert_array_equal(ds.kx.values, result.coarse.kx[0])
    trans = result.transmissibilities()
    assert ds.tx.dims == ("y", "x_face") and ds.ty.dims == ("y_face", "x")
    np.testing.assert_array_equal(ds.tx.values, trans.faces[2][0])
    np.testing.assert_array_equal(ds.ty.values, trans.faces[1][0])
    # faces lie halfway between the block centres, in the CRS's coordinates
    np.testing.assert_allclose(ds.x_face.values, (ds.x.values[:-1] + ds.x.values[1:]) / 2)
    assert ds.tx.attrs["units"] == "mD·m"
    assert ds.rio.crs == result.coarse.grid.crs
    assert ds.attrs["method"] == "arithmetic" and ds.attrs["block"] == "4x4"
    assert Field.from_xarray(ds).grid.transform == result.coarse.grid.transform


def test_repr_is_a_few_lines_with_the_mean_coarse_kx():
    k = uncorrelated_lognormal((64, 64), 1)
    result = coarsen(k, "8x8", "power", exponent=0.5, cell_size=(10.0, 10.0))
    text = repr(result)
    lines = text.splitlines()
    assert len(lines) <= 8 and len(text) < 600, text
    assert lines[0] == "Upscaled: power, exponent=0.5, 8x8 blocks, k in mD"
    assert f"mean {np.nanmean(result.coarse.kx):.4g} mD" in text
    assert "8 × 8 (layers × rows × columns)".replace("8 × 8", "1 × 8 × 8") in text
    page = result._repr_html_()
    assert page.startswith("<table>") and "power" in page and "\n" not in page
    assert "Field: 2D map, 64 × 64 (rows × columns), k in mD" in repr(result.fine)
    assert "<table>" in result.fine._repr_html_()


def test_upscaled_takes_its_fields_after_coarse_by_keyword():
    result = coarsen(np.ones((4, 4)), "2x2")
    with pytest.raises(TypeError):
        Upscaled(result.fine, result.coarse, result.method, result.options, result.block)  # type: ignore[misc]


def test_transmissibilities_are_computed_once():
    result = coarsen(uncorrelated_lognormal((8, 8), 2), "2x2", "geometric")
    assert "_transmissibilities" not in vars(result)
    first = result.transmissibilities()
    assert result.transmissibilities() is first
    assert vars(result)["_transmissibilities"] is first


@pytest.mark.parametrize("formats,written,absent", [
    (["geotiff"], {"kx.tif", "ky.tif"}, {"coarse.nc", "manifest.json"}),
    ("package", {"coarse.nc", "coarse.vtr", "manifest.json", "cells.csv"}, {"kx.tif"}),
])  # fmt: skip
def test_write_result_writes_the_formats_asked_for(tmp_path: Path, formats, written, absent):
    path = write_raster(tmp_path / "k.tif", uncorrelated_lognormal((16, 16), 4))
    result = coarsen(read_field(path), "4x4")
    write_result(result, tmp_path / "out", formats=formats)
    on_disk = {p.name for p in (tmp_path / "out").iterdir()}
    assert written <= on_disk and not absent & on_disk
    listed = json.loads((tmp_path / "out" / "summary.json").read_text())["files"]
    assert set(listed) == on_disk - {"summary.json"}
    write_result(result, tmp_path / "all")
    assert {"kx.tif", "coarse.nc", "manifest.json"} <= {p.name for p in (tmp_path / "all").iterdir()}
    with pytest.raises(InputError, match=r"`formats` may hold geotiff and package, got 'png'"):
        write_result(result, tmp_path / "bad", formats=["geotiff", "png"])


def test_without_xarray_a_conversion_names_the_extra():
    script = (
        "import sys; sys.modules['xarray'] = None\n"
        "import numpy as np, upscale\n"
        "upscale.Field.from_arrays(np.ones((2, 2))).to_xarray()\n"
    )
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True)
    assert done.returncode != 0
    last = done.stderr.strip().splitlines()[-1]
    assert last.startswith("upscale.errors.MissingLibraryError: the conversions to and from xarray "
                           "need xarray, which is not installed")
    assert last.endswith('install the extra \'xarray\': pip install "upscale[xarray]"')
    assert isinstance(upscale.errors.MissingLibraryError("x"), ImportError)


def test_geotiffs_of_an_array_field_are_written_without_a_warning(tmp_path):
    """An array has no georeference, and rasterio's warning about it is not the caller's business.

    The suite turns warnings into errors, so a leaked one fails here.
    """
    result = coarsen(np.full((4, 6), 50.0), "2x2", "arithmetic", cell_size=(10.0, 5.0))
    write_result(result, tmp_path / "out", formats="geotiff")
    with open_raster(str(tmp_path / "out" / "kx.tif")) as src:  # no georeference: no warning
        assert src.crs is None and src.read(1).shape == (2, 3)
        np.testing.assert_array_equal(src.read(1), 50.0)
