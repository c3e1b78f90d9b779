"""Upscale heterogeneous permeability fields to coarse simulation grids.

The package follows the data through numbered stages, one folder each:

1. ``io``        read rasters (GeoTIFF first) or ``.npy`` arrays into a `Field`; realizations
2. ``grid``      partition the fine grid into coarse blocks (`BlockSpec`) and its activity rules
3. ``methods``   coarse block properties, one module per family; ``coarsen`` applies one to a
                 whole field, chunk by chunk with dask, and the zero-k rule to its blocks
4. ``flow``      the two-point flux engine: transmissibilities by the harmonic half-cell rule
                 (coarse ones too, through `Upscaled.transmissibilities`), solvers, local solves
5. ``check``     the same pressure drop on the fine and the coarse model, per axis
6. ``analysis``  methods compared and ranked, ensembles summarised, tensors described;
   ``report``    figures and the HTML page, as bytes
7. ``export``    coarse GeoTIFFs, the coarse-grid package and the summaries, staged

``jobs`` turns files into finished folders for the command line (``cli``) and
Python alike. Shared below the stages: ``parallel`` (NumPy/dask block
mapping), ``stats`` (value scans), ``gallery`` (model fields), ``field``,
``units``, ``errors``. ``tests/test_layers.py`` checks that imports only
point down this list.

Examples
--------
>>> import numpy as np, upscale
>>> fine = upscale.Field.from_arrays(np.array([[1.0, 100.0], [1.0, 100.0]]), cell_size=(5.0, 5.0))
>>> result = upscale.coarsen(fine, "2x2", method="harmonic")
>>> float(result.coarse.kx[0, 0, 0])
1.9801980198019802
"""

from .caution import CAUTION
from .errors import InputError, UpscaleError

#: The public names that live in the computing modules, each with its module: imported at first use
#: (PEP 562), so that ``import upscale`` and the command line's start-up load neither numba, scipy nor
#: dask, nor any writer of Parquet, NetCDF or VTK. tests/cli/test_startup.py checks what it loads.
_LAZY = {
    "BlockSpec": ".grid",
    "Field": ".field",
    "Geometry": ".geometry",
    "Grid": ".field",
    "METHODS": ".methods.registry",
    "Upscaled": ".methods.coarsen",
    "check_flow": ".check.axis",
    "coarsen": ".methods.coarsen",
    "read_field": ".io",
    "write_result": ".export",
}


def __getattr__(name: str):
    if name == "__version__":
        value = _version()
    elif name in _LAZY:
        from importlib import import_module

        value = getattr(import_module(_LAZY[name], __name__), name)
    else:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted({*globals(), *_LAZY, "__version__"})


def _version() -> str:
    """The installed distribution's version (``importlib.metadata`` is read only when asked)."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("upscale")
    except PackageNotFoundError:  # running from a source tree that is not installed
        return "0+unknown"


__all__ = [
    "CAUTION",
    "METHODS",
    "BlockSpec",
    "Field",
    "Geometry",
    "Grid",
    "InputError",
    "UpscaleError",
    "Upscaled",
    "check_flow",
    "coarsen",
    "read_field",
    "write_result",
]
