"""Tests of `upscale.read_field` on real GeoTIFFs and ``.npy`` arrays.

Every raster is written with rasterio in the test and read back through the
package; values are compared with what rasterio itself reads. Covers the 2D
and 3D layouts, inactive cells (nodata, NaN, internal masks), cell sizes
and georeference checks, companion rasters (ky, kz, porosity), value
scales, broken files, checksums and the dask chunking.
"""

from __future__ import annotations

import hashlib
import warnings

import dask.array as da
import numpy as np
import pytest
import rasterio
from affine import Affine
from conftest import ORIGIN, north_up, read_raster, write_raster

import upscale
from upscale.errors import InputError
from upscale.gallery.problems import uncorrelated_lognormal

SEED = 7_301_552_918
SHAPE = (32, 48)


@pytest.fixture
def k2d() -> np.ndarray:
    """Fine 2D permeabilities (mD), shape (M, N)."""
    return uncorrelated_lognormal(SHAPE, SEED)


@pytest.fixture
def k3d() -> np.ndarray:
    """Fine 3D permeabilities (mD), shape (L, M, N); layer l is offset so layers differ."""
    k = uncorrelated_lognormal((3, *SHAPE), SEED + 11)
    return k * np.array([1.0, 10.0, 100.0])[:, None, None]


# --- layout: 2D maps and 3D models -------------------------------------------------------------


def test_one_band_is_a_2d_map_with_cell_size_from_geotransform(write_tif, k2d):
    path = write_tif("map.tif", k2d, cell_size=(12.5, 7.5))
    field = upscale.read_field(path)
    assert field.shape == (1, 32, 48)
    assert field.ndim == 2
    assert field.kz is None and field.porosity is None
    np.testing.assert_array_equal(np.asarray(field.kx), k2d[None])
    np.testing.assert_array_equal(np.asarray(field.ky), k2d[None])
    np.testing.assert_array_equal(field.grid.dx, np.full(48, 12.5))
    np.testing.assert_array_equal(field.grid.dy, np.full(32, 7.5))
    assert field.grid.transform == north_up((12.5, 7.5))
    assert field.grid.crs == rasterio.crs.CRS.from_string("EPSG:32633")


def test_several_bands_are_layers_top_first(write_tif, k3d):
    path = write_tif("model.tif", k3d)
    field = upscale.read_field(path, dz=[1.0, 2.5, 4.0])
    assert field.shape == (3, 32, 48)
    assert field.ndim == 3
    kx = np.asarray(field.kx)
    with rasterio.open(path) as src:
        for band in (1, 2, 3):
            np.testing.assert_array_equal(kx[band - 1], src.read(band))
    np.testing.assert_array_equal(np.asarray(field.kz), k3d)  # kz defaults to kx
    np.testing.assert_array_equal(field.grid.dz, [1.0, 2.5, 4.0])


def test_one_dz_value_applies_to_every_layer(write_tif, k3d):
    field = upscale.read_field(write_tif("model.tif", k3d), dz=2.0)
    np.testing.assert_array_equal(field.grid.dz, [2.0, 2.0, 2.0])


def test_several_bands_without_dz_are_refused(write_tif, k3d):
    path = write_tif("model.tif", k3d)
    with pytest.raises(InputError, match=r"3 bands make a 3D model.*`dz=2.5`") as info:
        upscale.read_field(path)
    assert str(path) in str(info.value)


@pytest.mark.parametrize("dz", [[1.0, 2.0], [1.0, 1.0, 1.0, 1.0]])
def test_wrong_number_of_dz_values_is_refused(write_tif, k3d, dz):
    path = write_tif("model.tif", k3d)
    with pytest.raises(InputError, match=rf"`dz` has {len(dz)} values but .* has 3 layers"):
        upscale.read_field(path, dz=dz)


def test_non_positive_dz_is_refused(write_tif, k3d):
    with pytest.raises(InputError, match="dz"):
        upscale.read_field(write_tif("model.tif", k3d), dz=[1.0, 0.0, 2.0])


# --- inactive cells ---------------------------------------------------------------------------


def test_nodata_and_nan_cells_are_inactive(write_tif, k2d):
    values = k2d.copy()
    values[0, :5] = -9999.0
    values[17, 30:33] = np.nan
    path = write_tif("holes.tif", values, nodata=-9999.0)
    kx = np.asarray(upscale.read_field(path).kx)[0]
    expected = k2d.copy()
    expected[0, :5] = np.nan
    expected[17, 30:33] = np.nan
    np.testing.assert_array_equal(kx, expected)
    assert np.isnan(kx).sum() == 8


def test_nodata_option_overrides_the_raster(write_tif, k2d):
    values = k2d.copy()
    values[3, 4] = values[20, 40] = -1.0
    path = write_tif("flagged.tif", values)  # no nodata declared in the file
    plain = np.asarray(upscale.read_field(path).kx)[0]
    assert plain[3, 4] == -1.0 and plain[20, 40] == -1.0
    kx = np.asarray(upscale.read_field(path, nodata=-1.0).kx)[0]
    assert np.isnan(kx[3, 4]) and np.isnan(kx[20, 40])
    assert np.isnan(kx).sum() == 2


def test_internal_dataset_mask_is_honoured(write_tif, k2d):
    mask = np.full(SHAPE, 255, dtype=np.uint8)
    mask[:4, :6] = 0
    mask[30:, 40:] = 0
    path = write_tif("masked.tif", k2d, mask=mask)
    with rasterio.open(path) as src:  # the file really carries a per-dataset mask
        assert rasterio.enums.MaskFlags.per_dataset in src.mask_flag_enums[0]
    kx = np.asarray(upscale.read_field(path).kx)[0]
    np.testing.assert_array_equal(np.isnan(kx), mask == 0)
    np.testing.assert_array_equal(kx[mask > 0], k2d[mask > 0])


def test_inactive_cells_are_shared_by_every_property(write_tif, k2d):
    kx = k2d.copy()
    kx[5, 5] = np.nan
    por = np.full(SHAPE, 0.2)
    por[9, 11] = -9999.0
    main = write_tif("kx.tif", kx)
    porosity = write_tif("por.tif", por, nodata=-9999.0)
    field = upscale.read_field(main, porosity=porosity)
    for name in ("kx", "ky", "porosity"):
        values = np.asarray(getattr(field, name))[0]
        assert np.isnan(values[5, 5]) and np.isnan(values[9, 11]), name
        assert np.isnan(values).sum() == 2, name


# --- cell size and georeference ---------------------------------------------------------------


def test_geographic_crs_is_refused_without_cell_size(write_tif, k2d):
    path = write_tif("lonlat.tif", k2d, crs="EPSG:4326", cell_size=0.0005)
    with pytest.raises(InputError, match=r"geographic CRS \(EPSG:4326\).*degrees.*`cell_size=DX"):
        upscale.read_field(path)
    field = upscale.read_field(path, cell_size=(30.0, 20.0))
    np.testing.assert_array_equal(field.grid.dx, np.full(48, 30.0))
    np.testing.assert_array_equal(field.grid.dy, np.full(32, 20.0))


def test_cell_size_disagreeing_with_a_projected_raster_is_refused(write_tif, k2d):
    path = write_tif("map.tif", k2d, cell_size=10.0)
    with pytest.raises(InputError, match=r"own cell size is 10 x 10 m.*disagrees"):
        upscale.read_field(path, cell_size=(25.0, 25.0))
    assert upscale.read_field(path, cell_size=(10.0, 10.0)).grid.dx[0] == 10.0


def test_projected_crs_in_feet_gives_cell_sizes_in_metres(write_tif, k2d):
    # EPSG:2263 is in US survey feet: 10 ft cells are 3.048006... m
    path = write_tif("feet.tif", k2d, crs="EPSG:2263", transform=Affine(10, 0, 9.8e5, 0, -10, 2e5))
    field = upscale.read_field(path)
    assert field.grid.dx[0] == pytest.approx(10 * 1200 / 3937, rel=1e-12)
    assert field.grid.dy[0] == pytest.approx(10 * 1200 / 3937, rel=1e-12)


def test_cell_size_in_metres_agrees_with_a_raster_in_feet(write_tif, k2d):
    path = write_tif("feet.tif", k2d, crs="EPSG:2263", transform=Affine(10, 0, 9.8e5, 0, -10, 2e5))
    metres = 10 * 1200 / 3937
    field = upscale.read_field(path, cell_size=(metres, metres))
    assert field.grid.dx[0] == pytest.approx(metres)


@pytest.mark.filterwarnings("ignore::rasterio.errors.NotGeoreferencedWarning")
def test_raster_without_georeference_needs_cell_size(write_tif, k2d):
    path = write_tif("plain.tif", k2d, georeferenced=False)
    with pytest.raises(InputError, match=r"no georeference.*`cell_size=DX\[xDY\]`"):
        upscale.read_field(path)
    field = upscale.read_field(path, cell_size=(5.0, 7.0))
    assert field.grid.crs is None
    np.testing.assert_array_equal(field.grid.dx, np.full(48, 5.0))
    np.testing.assert_array_equal(field.grid.dy, np.full(32, 7.0))
    np.testing.assert_array_equal(np.asarray(field.kx)[0], k2d)


def test_raster_without_georeference_reads_without_warning(write_tif, k2d):
    path = write_tif("plain.tif", k2d, georeferenced=False)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        field = upscale.read_field(path, cell_size=(5.0, 5.0))
        np.asarray(field.kx)


def test_rotated_geotransform_is_refused(write_tif, k2d):
    rotated = Affine.translation(*ORIGIN) @ Affine.rotation(12.0) @ Affine.scale(10.0, -10.0)
    path = write_tif("rotated.tif", k2d, transform=rotated)
    with pytest.raises(InputError, match=r"rotated or sheared.*north-up") as info:
        upscale.read_field(path)
    assert str(path) in str(info.value)


# --- companion rasters ------------------------------------------------------------------------


def _other_grid(kind: str) -> dict:
    if kind == "shape":
        return {"shape": (3, 32, 40)}
    if kind == "transform":
        return {"transform": north_up(10.0, origin=(412_360.0, 5_731_800.0))}
    return {"crs": "EPSG:32634"}


@pytest.mark.parametrize("role", ["ky", "kz", "porosity"])
@pytest.mark.parametrize(
    ("kind", "problem"),
    [("shape", r"shape \(3, 32, 40\) differs"), ("transform", "geotransform differs"),
     ("crs", r"CRS \(EPSG:32634\) differs")],
)  # fmt: skip
def test_companion_on_another_grid_is_refused(tmp_path, k3d, role, kind, problem):
    main = write_raster(tmp_path / "kx.tif", k3d)
    spec = _other_grid(kind)
    shape = spec.pop("shape", k3d.shape)
    values = np.full(shape, 0.2 if role == "porosity" else 50.0)
    other = write_raster(tmp_path / f"{role}_other.tif", values, **spec)
    with pytest.raises(InputError, match=problem) as info:
        upscale.read_field(main, dz=1.0, **{role: other})
    message = str(info.value)
    assert message.startswith(f"`{role}` {other}: not on the grid of {main}")


def test_companion_rasters_on_the_same_grid_are_used(write_tif, k3d):
    ky = k3d * 0.5
    kz = k3d * 0.01
    por = np.clip(0.1 + 0.01 * np.log(k3d), 0.05, 0.3)
    field = upscale.read_field(
        write_tif("kx.tif", k3d), dz=1.0, ky=write_tif("ky.tif", ky), kz=write_tif("kz.tif", kz),
        porosity=write_tif("por.tif", por),
    )  # fmt: skip
    np.testing.assert_array_equal(np.asarray(field.ky), ky)
    np.testing.assert_array_equal(np.asarray(field.kz), kz)
    np.testing.assert_array_equal(np.asarray(field.porosity), por)


def test_kv_kh_gives_kz_as_a_fraction_of_kx(write_tif, k3d):
    field = upscale.read_field(write_tif("kx.tif", k3d), dz=1.0, kv_kh=0.1)
    np.testing.assert_array_equal(np.asarray(field.kz), k3d * 0.1)
    np.testing.assert_array_equal(np.asarray(field.ky), k3d)


@pytest.mark.parametrize("option", ["kz", "kv_kh"])
def test_vertical_permeability_on_a_2d_map_is_refused(write_tif, k2d, option):
    path = write_tif("map.tif", k2d)
    value = write_tif("kz.tif", k2d) if option == "kz" else 0.1
    flag = f"`{option}`"
    with pytest.raises(InputError, match=rf"{flag} was given but .*one-band 2D map"):
        upscale.read_field(path, **{option: value})


def test_kz_and_kv_kh_together_are_refused(write_tif, k3d):
    kx = write_tif("kx.tif", k3d)
    with pytest.raises(InputError, match="either `kz` or `kv_kh`"):
        upscale.read_field(kx, dz=1.0, kz=write_tif("kz.tif", k3d), kv_kh=0.1)


# --- value types and scales -------------------------------------------------------------------


@pytest.mark.parametrize("dtype", ["uint8", "int16", "uint16", "int32"])
def test_integer_rasters_become_float64(write_tif, dtype):
    values = np.random.default_rng(SEED + 3).integers(1, 120, size=SHAPE)
    values[2, 3] = 0 if dtype.startswith("u") else -1  # the nodata cell
    nodata = float(values[2, 3])
    field = upscale.read_field(write_tif("int.tif", values, dtype=dtype, nodata=nodata))
    kx = np.asarray(field.kx)[0]
    assert field.kx.dtype == np.float64 and kx.dtype == np.float64
    expected = values.astype(np.float64)
    expected[2, 3] = np.nan
    np.testing.assert_array_equal(kx, expected)


def test_float32_raster_values_are_kept(write_tif, k2d):
    stored = k2d.astype(np.float32)
    kx = np.asarray(upscale.read_field(write_tif("f32.tif", stored)).kx)[0]
    np.testing.assert_array_equal(kx.astype(np.float64), stored.astype(np.float64))


@pytest.mark.parametrize(("scale", "to_log"), [("log10", np.log10), ("ln", np.log)])
def test_logarithmic_scales_are_turned_into_permeability(write_tif, k2d, scale, to_log):
    stored = to_log(k2d)
    stored[6, 7] = -9999.0
    por = np.full(SHAPE, 0.25)
    field = upscale.read_field(
        write_tif(f"{scale}.tif", stored, nodata=-9999.0), scale=scale,
        porosity=write_tif("por.tif", por),
    )  # fmt: skip
    kx = np.asarray(field.kx)[0]
    assert np.isnan(kx[6, 7])
    active = ~np.isnan(kx)
    np.testing.assert_allclose(kx[active], k2d[active], rtol=1e-13)
    # porosity is a fraction on a linear scale, whatever the permeability scale
    np.testing.assert_array_equal(np.asarray(field.porosity)[0][active], 0.25)


def test_unknown_scale_and_unit_are_refused(write_tif, k2d):
    path = write_tif("map.tif", k2d)
    with pytest.raises(InputError, match="scale must be one of linear, log10, ln"):
        upscale.read_field(path, scale="log2")
    with pytest.raises(InputError, match="unknown unit 'darcies'"):
        upscale.read_field(path, unit="darcies")


def test_complex_raster_is_refused(write_tif, k2d):
    path = write_tif("complex.tif", k2d.astype(np.complex64))
    with pytest.raises(InputError, match="complex values"):
        upscale.read_field(path)


# --- .npy arrays ------------------------------------------------------------------------------


def test_npy_2d_array_needs_and_uses_cell_size(tmp_path, k2d):
    values = k2d.copy()
    values[1, 2] = np.nan
    path = tmp_path / "map.npy"
    np.save(path, values)
    with pytest.raises(InputError, match=r"no georeference.*`cell_size=DX\[xDY\]`"):
        upscale.read_field(path)
    field = upscale.read_field(path, cell_size=(5.0, 7.0))
    assert field.shape == (1, 32, 48) and field.ndim == 2
    np.testing.assert_array_equal(np.asarray(field.kx)[0], values)
    assert field.grid.dx[0] == 5.0 and field.grid.dy[0] == 7.0
    assert field.grid.transform == Affine.scale(5.0, -7.0)


def test_npy_3d_array(tmp_path, k3d):
    path = tmp_path / "model.npy"
    np.save(path, k3d)
    field = upscale.read_field(path, cell_size=(5.0, 5.0), dz=[1.0, 2.0, 3.0], chunk_bytes=4096)
    assert field.shape == (3, 32, 48) and field.ndim == 3
    np.testing.assert_array_equal(np.asarray(field.kx), k3d)
    np.testing.assert_array_equal(field.grid.dz, [1.0, 2.0, 3.0])


def test_npy_of_wrong_rank_is_refused(tmp_path):
    path = tmp_path / "line.npy"
    np.save(path, np.arange(1.0, 10.0))
    with pytest.raises(InputError, match="expected a 2D or 3D numeric array, got 1D"):
        upscale.read_field(path, cell_size=(1.0, 1.0))


# --- broken and missing files -----------------------------------------------------------------


@pytest.mark.parametrize("suffix", [".tif", ".npy"])
def test_file_of_garbage_bytes_is_an_input_error(tmp_path, suffix):
    path = tmp_path / f"garbage{suffix}"
    path.write_bytes(np.random.default_rng(SEED + 5).bytes(3000))
    with pytest.raises(InputError, match="cannot be read as a raster|not a readable .npy") as info:
        upscale.read_field(path, cell_size=(1.0, 1.0))
    assert str(path) in str(info.value)


def test_geotiff_cut_inside_its_header_is_an_input_error(tmp_path, k3d):
    full = write_raster(tmp_path / "full.tif", k3d)
    cut = tmp_path / "cut.tif"
    cut.write_bytes(full.read_bytes()[:200])
    with pytest.raises(InputError, match="cannot be read as a raster") as info:
        upscale.read_field(cut, dz=1.0)
    assert str(cut) in str(info.value)


def test_geotiff_cut_inside_its_pixels_is_an_input_error(tmp_path, k3d):
    full = write_raster(tmp_path / "full.tif", k3d)
    data = full.read_bytes()
    cut = tmp_path / "cut.tif"
    cut.write_bytes(data[: len(data) // 2])
    with pytest.raises(InputError, match="cut.tif"):
        field = upscale.read_field(cut, dz=1.0)
        np.asarray(field.kx)


def test_missing_file_and_folder_are_input_errors(tmp_path):
    with pytest.raises(InputError, match="nothing.tif: no such file"):
        upscale.read_field(tmp_path / "nothing.tif")
    with pytest.raises(InputError, match="is a folder, not a raster"):
        upscale.read_field(tmp_path)


def test_missing_companion_is_an_input_error(write_tif, k2d, tmp_path):
    with pytest.raises(InputError, match="no_porosity.tif: no such file"):
        upscale.read_field(write_tif("kx.tif", k2d), porosity=tmp_path / "no_porosity.tif")


# --- provenance -------------------------------------------------------------------------------


def test_sha256_of_every_input_is_recorded(write_tif, k2d):
    paths = {
        "kx": write_tif("kx.tif", k2d),
        "ky": write_tif("ky.tif", k2d * 2),
        "porosity": write_tif("por.tif", np.full(SHAPE, 0.3)),
    }
    field = upscale.read_field(paths["kx"], ky=paths["ky"], porosity=paths["porosity"])
    recorded = {s.role: (s.path, s.sha256) for s in field.sources}
    assert set(recorded) == set(paths)
    for role, path in paths.items():
        assert recorded[role] == (str(path), hashlib.sha256(path.read_bytes()).hexdigest())
    unchecked = upscale.read_field(paths["kx"], checksum=False)
    assert [s.sha256 for s in unchecked.sources] == [""]


# --- lazy, chunked reading --------------------------------------------------------------------


@pytest.mark.parametrize("chunk_bytes", [None, 8, 1000, 3 * 8 * 48, 50_000])
def test_chunked_values_equal_what_rasterio_reads(write_tif, k3d, chunk_bytes):
    values = k3d.copy()
    values[0, :3, :7] = -9999.0
    values[2, 20, 10:15] = np.nan
    path = write_tif("model.tif", values, nodata=-9999.0)
    field = upscale.read_field(path, dz=1.0, chunk_bytes=chunk_bytes, block=(1, 4, 4))
    assert isinstance(field.kx, da.Array)
    if chunk_bytes is not None and chunk_bytes <= 1000:
        assert np.prod(field.kx.numblocks) >= 12  # tiny chunks: many of them
    expected = read_raster(path)
    assert np.isnan(expected).sum() == 21 + 5
    for name in ("kx", "ky", "kz"):
        np.testing.assert_array_equal(getattr(field, name).compute(), expected)


def test_chunks_hold_whole_blocks(write_tif, k3d):
    path = write_tif("model.tif", k3d)
    field = upscale.read_field(path, dz=1.0, chunk_bytes=2000, block=(1, 4, 8))
    for sizes, b in zip(field.kx.chunks, (1, 4, 8)):
        assert all(size % b == 0 for size in sizes[:-1])
