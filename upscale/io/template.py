"""Read the grid of a template raster (``--grid-like``): its geotransform, CRS and size, not its values."""

from __future__ import annotations

from pathlib import Path

from ..errors import InputError
from ..grid.template import Template
from .read import sha256
from .windows import open_raster


def read_template(path: str | Path) -> Template:
    """The grid of the raster in `path`, whose cells are to be the coarse blocks.

    Parameters
    ----------
    path : str or Path
        Any raster rasterio opens; only its header is read (and its bytes, once, for the SHA-256).

    Returns
    -------
    Template

    Raises
    ------
    InputError
        A missing or unreadable file, or a raster without a geotransform.
    """
    if not Path(path).is_file():
        raise InputError(f"{path}: no such file")
    with open_raster(str(path)) as src:
        transform, crs, rows, columns = src.transform, src.crs, src.height, src.width
    if transform.is_identity and crs is None:
        raise InputError(f"{path}: the template has no georeference (geotransform), so its cells cannot "
                         "be placed on the field")  # fmt: skip
    return Template(str(path), sha256(path), transform, crs, rows, columns)
