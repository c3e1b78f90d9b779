"""The demo scenario: fields of the Marrowfen Basin, an invented sedimentary basin.

Everything here is fictional — the basin, its Ostrella Sandstone, the
Marrowfen Gravels aquifer and the numbers — and exists to show the tool at
work. The coordinates are on a made-up projected grid (transverse Mercator
on a sphere, origin far from any real survey), not at any real place.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
from affine import Affine

from ..export.geotiff import write_property
from ..export.staging import staged_folder
from ..field import Grid
from ..gallery.fields import channel_field, gaussian_field, layered_field, lognormal_field

#: Listing written last into the demo folder; marks it complete.
LISTING = "fields.json"
NODATA = -9999.0
_CRS = "+proj=tmerc +lat_0=0 +lon_0=0 +k=1 +x_0=0 +y_0=0 +R=6371000 +units=m +no_defs"
_ORIGIN = (31_000.0, 87_000.0)  # west and north edges of every demo grid, m
#: Equiprobable realizations in demo-fields/ensemble/.
ENSEMBLE_SIZE = 8
#: The wells of the channel belt (docs/wells.md): an injector and a producer in one sand channel, a
#: producer in the shale beside it; x, y at cell centres of marrowfen_channels.tif (5 m cells).
WELLS = {
    "marrowfen_wells.csv": (
        "# Marrowfen Basin (fictional): test wells on marrowfen_channels.tif, pressures in bar\n"
        "name,x,y,control,value,radius,skin\n"
        "OST-I1,31102.5,86322.5,pressure,200,0.1,0\n"
        "OST-P1,32182.5,86322.5,pressure,100,0.1,0\n"
        "OST-P2,32182.5,85997.5,pressure,100,0.1,0\n"
    )
}


def _outline(shape: tuple[int, int]) -> np.ndarray:
    """True outside the model: a curved boundary cutting off the north-east corner."""
    rows, cols = shape
    y, x = np.mgrid[0:rows, 0:cols] / np.array([rows, cols])[:, None, None]
    return (x - 1.0) ** 2 + y**2 < 0.3**2 + 0.05 * np.sin(12 * x)


def _windows(shape: tuple[int, int]) -> np.ndarray:
    """True in two erosional windows of the mudstone, where the sands above and below it touch."""
    rows, cols = np.mgrid[0 : shape[0], 0 : shape[1]]
    west = ((rows - 62) / 9.0) ** 2 + ((cols - 22) / 14.0) ** 2 < 1.0
    east = ((rows - 30) / 6.0) ** 2 + ((cols - 58) / 8.0) ** 2 < 1.0
    return west | east


def _dome_surfaces(shape: tuple[int, int], size: float) -> np.ndarray:
    """Elevations (m, positive up) of the dome model's 9 surfaces, shape (9, M, N).

    The top is a gentle dome with a slight undulation (dips below 3°); every
    layer is about 3 m thick and thickens or thins by up to 15 %, except the
    fifth: a shale wedge 3 m thick at the west edge that thins eastward to
    nothing along a curved line 880-1000 m from it, and is absent beyond.
    """
    rows, cols = shape
    y, x = (np.mgrid[0:rows, 0:cols] + 0.5) * size  # cell centres, m from the north-west corner
    top = -1500.0 + 24.0 * np.exp(-((x - 900.0) ** 2 + (y - 700.0) ** 2) / (2 * 500.0**2))
    top += 1.2 * np.sin(2 * np.pi * x / 640.0) * np.sin(2 * np.pi * y / 800.0)
    swell = np.sin(2 * np.pi * (x + 0.7 * y) / 1100.0)
    thickness = np.stack([3.0 * (1 + 0.15 * swell * (-1) ** layer) for layer in range(8)])
    edge = 880.0 + 120.0 * np.sin(np.pi * y / (rows * size))  # where the wedge ends, m from the west
    thickness[4] = 3.0 * np.clip(1.0 - x / edge, 0.0, 1.0)
    return np.concatenate([top[None], top[None] - np.cumsum(thickness, axis=0)])


def _dome() -> dict[str, np.ndarray]:
    """The dome model's k (mD), surfaces (m) and porosity on a grid of twice the cell size."""
    k = lognormal_field((8, 64, 64), (1.0, 6.0, 9.0), geometric_mean=80.0, sigma_ln=1.0, seed=27_604_913)
    k[4] = lognormal_field((1, 64, 64), (1.0, 8.0, 8.0), geometric_mean=0.01, sigma_ln=0.4,
                           seed=27_604_914)[0]  # fmt: skip
    g = gaussian_field((8, 33, 33), (1.0, 3.0, 4.0), seed=27_604_915)
    porosity = np.clip(0.17 + 0.03 * g, 0.08, 0.28)
    porosity[4] = np.clip(0.05 + 0.01 * g[4], 0.02, 0.08)
    return {"k": k, "surfaces": _dome_surfaces((64, 64), 25.0), "porosity": porosity}


def _aquifer() -> dict[str, np.ndarray]:
    """The valley aquifer's hydraulic conductivity (m/day) and thickness (m), 80 x 80 cells of 50 m."""
    conductivity = lognormal_field((1, 80, 80), (1.0, 5.0, 10.0), geometric_mean=35.0, sigma_ln=0.9,
                                   seed=39_118_527)  # fmt: skip
    y, x = (np.mgrid[0:80, 0:80] + 0.5) / 80.0
    axis = 0.5 + 0.12 * np.sin(2 * np.pi * x)  # the buried valley's axis winds west to east
    thickness = 6.0 + 18.0 * np.clip(1.0 - ((y - axis) / 0.55) ** 2, 0.0, 1.0)
    return {"conductivity": conductivity, "thickness": thickness[None]}


def fields() -> dict[str, dict]:
    """Every demo field: its array ``(L, M, N)``, cell size (m), layer thickness and story.

    A field on a grid of its own also gives its ``origin`` (west and north edges, m).
    """
    lognormal_gauss = gaussian_field((256, 256), (6.0, 12.0), seed=73_019_241)
    outside = _outline((256, 256))
    lognormal = 150.0 * np.exp(1.0 * lognormal_gauss)
    porosity = np.clip(0.18 + 0.035 * lognormal_gauss, 0.04, 0.32)
    lognormal[outside] = NODATA
    porosity[outside] = NODATA

    three_d = lognormal_field(
        (16, 96, 96), (2.0, 6.0, 10.0), geometric_mean=60.0, sigma_ln=1.2, seed=52_884_107
    )
    three_d *= np.geomspace(0.5, 2.0, 16)[:, None, None]  # coarsening-upward trend
    mudstone = lognormal_field((2, 96, 96), (1.0, 8.0, 8.0), geometric_mean=0.02, sigma_ln=0.5,
                               seed=52_884_108)  # fmt: skip
    three_d[8:10] = np.where(_windows((96, 96)), three_d[8:10], mudstone)  # layers 9-10
    three_d[:, _outline((96, 96))] = NODATA

    realizations = {
        f"ensemble/marrowfen_r{r + 1:02d}.tif": {
            "values": lognormal_field((1, 128, 128), (1.0, 6.0, 12.0), geometric_mean=150.0,
                                      sigma_ln=1.0, seed=61_305_000 + r),  # fmt: skip
            "cell_size": 10.0,
            "dz": None,
            "unit": "mD",
            "story": f"Realization {r + 1} of {ENSEMBLE_SIZE} of the Ostrella Sandstone: the "
            "statistics of marrowfen_lognormal.tif on a 128 x 128 grid, seeds differ.",
        }
        for r in range(ENSEMBLE_SIZE)
    }
    return {
        "marrowfen_lognormal.tif": {
            "values": lognormal[None],
            "cell_size": 10.0,
            "dz": None,
            "unit": "mD",
            "story": "2D map of the Ostrella Sandstone: lognormal k, geometric mean 150 mD, "
            "sigma(ln k) = 1, exponential correlation 120 m (x) by 60 m (y); "
            "the north-east corner lies outside the model (nodata).",
        },
        "marrowfen_porosity.tif": {
            "values": porosity[None],
            "cell_size": 10.0,
            "dz": None,
            "unit": "fraction",
            "story": "Porosity on the grid of marrowfen_lognormal.tif, correlated with its ln k.",
        },
        "marrowfen_channels.tif": {
            "values": channel_field(
                (256, 256), channels=6, width=10, k_sand=800.0, k_shale=0.8, seed=88_120_533
            ),
            "cell_size": 5.0,
            "dz": None,
            "unit": "mD",
            "story": "2D map of a channel belt: sinuous sand channels (800 mD) along x in "
            "shale (0.8 mD), a 1000:1 contrast.",
        },
        "marrowfen_layered.tif": {
            "values": layered_field(
                (20, 64, 64),
                layer_k=[300.0, 80.0, 500.0, 40.0],
                barrier_every=5,
                k_barrier=0.01,
                seed=40_377_915,
            ),
            "cell_size": 25.0,
            "dz": 1.0,
            "unit": "mD",
            "story": "3D layer cake, 20 layers of 1 m: sands of 40-500 mD with a 0.01 mD "
            "shale barrier every fifth layer (use --dz 1).",
        },
        "marrowfen_3d.tif": {
            "values": three_d,
            "cell_size": 20.0,
            "dz": 2.0,
            "unit": "mD",
            "story": "3D lognormal model, 16 layers of 2 m, geometric mean 60 mD coarsening "
            "upward, sigma(ln k) = 1.2, cut by a 4 m mudstone (layers 9-10, about 0.02 mD) that the "
            "sands cross only in two erosional windows; the north-east corner is outside the model "
            "(use --dz 2).",
        },
        **_geometry_fields(),
        **realizations,
    }


def _geometry_fields() -> dict[str, dict]:
    """The demo fields with a geometry: the dome model and the valley aquifer."""
    dome, aquifer = _dome(), _aquifer()
    return {
        "marrowfen_dome.tif": {
            "values": dome["k"],
            "cell_size": 25.0,
            "dz": None,
            "unit": "mD",
            "story": "3D model of the Ostrella Sandstone over a gentle dome, 8 layers of about 3 m "
            "(marrowfen_dome_surfaces.tif): lognormal sands, geometric mean 80 mD, sigma(ln k) = 1, "
            "and in layer 5 a 0.01 mD shale wedge that pinches out eastward.",
        },
        "marrowfen_dome_surfaces.tif": {
            "values": dome["surfaces"],
            "cell_size": 25.0,
            "dz": None,
            "unit": "m",
            "story": "Elevations of the dome model's surfaces, m, positive up: the top of each of its "
            "8 layers and the base of the last (use --surfaces); layer 5 is 3 m thick at the west "
            "edge and 0 m (pinched out) beyond 880-1000 m east of it; dips below 3 degrees.",
        },
        "marrowfen_dome_porosity.tif": {
            "values": dome["porosity"],
            "cell_size": 50.0,
            "origin": (_ORIGIN[0] - 25.0, _ORIGIN[1] + 25.0),
            "dz": None,
            "unit": "fraction",
            "story": "Porosity of the dome model on another grid: cells of 50 m (twice the model's), "
            "origin 25 m west and north of it (use --resample average).",
        },
        "marrowfen_aquifer_conductivity.tif": {
            "values": aquifer["conductivity"],
            "cell_size": 50.0,
            "dz": None,
            "unit": "m/day",
            "story": "2D map of the Marrowfen Gravels, a valley aquifer of sand and gravel: lognormal "
            "hydraulic conductivity, geometric mean 35 m/day, sigma(ln K) = 0.9.",
        },
        "marrowfen_aquifer_thickness.tif": {
            "values": aquifer["thickness"],
            "cell_size": 50.0,
            "dz": None,
            "unit": "m",
            "story": "Saturated thickness of the Marrowfen Gravels on the grid of their conductivity "
            "map, 6-24 m, thickest along the winding axis of the buried valley (use --thickness).",
        },
    }


def write_demo_fields(folder: str | Path, overwrite: bool = False) -> list[str]:
    """Write every demo field as a float32 GeoTIFF into `folder`, with a listing.

    Parameters
    ----------
    folder : str or Path
        Destination folder.
    overwrite : bool
        Replace demo files already in the folder.

    Returns
    -------
    list of str
        Names of the rasters written (the wells tables beside them are listed in the listing).
    """
    from rasterio.crs import CRS

    crs = CRS.from_proj4(_CRS)
    listing = {}
    with staged_folder(folder, overwrite, marker=LISTING) as stage:
        for name, spec in fields().items():
            values = spec["values"]
            size = spec["cell_size"]
            west, north = spec.get("origin", _ORIGIN)
            grid = Grid(
                dz=np.full(values.shape[0], spec["dz"] or 1.0),
                dy=np.full(values.shape[1], size),
                dx=np.full(values.shape[2], size),
                transform=Affine(size, 0.0, west, 0.0, -size, north),
                crs=crs,
            )
            (stage / name).parent.mkdir(exist_ok=True)
            write_property(
                stage / name,
                values,
                grid,
                name.removesuffix(".tif"),
                spec["unit"],
                tags={"scenario": "Marrowfen Basin (fictional)"},
                dtype="float32",
                nodata=NODATA,
            )
            listing[name] = {
                "story": spec["story"],
                "shape": list(values.shape),
                "cell_size_m": size,
                "dz_m": spec["dz"],
                "unit": spec["unit"],
            }
        for name, table in WELLS.items():
            (stage / name).write_text(table)
        story = ("Test wells of marrowfen_channels.tif: injector OST-I1 and producer OST-P1 in one sand "
                 "channel, producer OST-P2 in the shale beside it (docs/wells.md).")
        text = {"scenario": __doc__.splitlines()[0], "files": list(listing), "fields": listing,
                "wells": dict.fromkeys(WELLS, story)}  # fmt: skip
        (stage / LISTING).write_text(json.dumps(text, indent=2) + "\n")
    return list(listing)
