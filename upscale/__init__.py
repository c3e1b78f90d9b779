"""Upscale heterogeneous permeability fields to coarse simulation grids.

The package follows the data through numbered stages:

1. ``io``       read rasters (GeoTIFF first) or ``.npy`` arrays into a `Field`
2. ``grid``     partition the fine grid into coarse blocks (`BlockSpec`)
3. ``methods``  coarse block properties: averages and bounds, one module per family;
                ``coarsen`` applies a method to a whole field, chunk by chunk with dask
5. ``check``    the same pressure drop on the fine and the coarse grid, per axis
7. ``export``   write coarse GeoTIFFs and the run summary, staged so nothing is half-written

Shared pieces: ``flow`` (two-point flux engine), ``field`` (arrays + grid),
``units``, ``stats`` (value scans), ``parallel`` (NumPy/dask block mapping),
``errors``, ``demo`` (synthetic fields), ``cli`` (the ``upscale`` command).

Examples
--------
>>> import numpy as np, upscale
>>> fine = upscale.Field.from_arrays(np.array([[1.0, 100.0], [1.0, 100.0]]), cell_size=(5.0, 5.0))
>>> result = upscale.coarsen(fine, "2x2", method="harmonic")
>>> float(result.coarse.kx[0, 0, 0])
1.9801980198019802
"""

from importlib.metadata import PackageNotFoundError, version

from .caution import CAUTION
from .check import check_flow
from .errors import InputError, UpscaleError
from .export import write_result
from .field import Field, Grid
from .grid import BlockSpec
from .io import read_field
from .methods.registry import METHODS
from .upscaled import Upscaled, coarsen

try:
    __version__ = version("upscale")
except PackageNotFoundError:  # running from a source tree that is not installed
    __version__ = "0+unknown"

__all__ = [
    "CAUTION",
    "METHODS",
    "BlockSpec",
    "Field",
    "Grid",
    "InputError",
    "UpscaleError",
    "Upscaled",
    "check_flow",
    "coarsen",
    "read_field",
    "write_result",
]
