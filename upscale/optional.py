"""The optional libraries, the extras that install them, and their import on first use.

``pip install .`` installs the core: reading fields, coarsening, the flow
check and the coarse GeoTIFFs. Extras add the rest (``pip install
".[all]"`` adds figures, formats and cluster, as the README's Quickstart does):

* ``figures`` — matplotlib: the figures and the HTML reports (``--plot``,
  ``--report``, ``upscale compare``);
* ``formats`` — pyarrow, netCDF4, pyproj and pyevtk: the coarse-grid package (CSV,
  Parquet, NetCDF-CF, VTK), written by every run and read by ``upscale check``;
* ``xarray`` — xarray and rioxarray: `Field.to_xarray`, `Field.from_xarray`,
  `Upscaled.to_xarray` and `coarsen` of a DataArray (not in ``all``: the
  command line does not use them);
* ``cluster`` — distributed: a local cluster or an existing scheduler.

None of them is imported by ``import upscale``; a module that needs one
imports it through `require`, or holds a `lazy` stand-in that imports it at
its first use. Either way a missing library is one `MissingLibraryError`
naming the extra to install, not an ``ImportError`` deep in a traceback.
"""

from __future__ import annotations

import importlib
from types import ModuleType
from typing import Any

from .errors import MissingLibraryError

#: Extra -> (what needs it, the libraries it installs by import name).
EXTRAS: dict[str, tuple[str, tuple[str, ...]]] = {
    "figures": ("the figures and the HTML report need", ("matplotlib",)),
    "formats": ("the coarse-grid package (CSV, Parquet, NetCDF, VTK) needs",
                ("pyarrow", "netCDF4", "pyproj", "pyevtk")),
    "cluster": ("a dask cluster (workers or a scheduler) needs", ("distributed",)),
    "xarray": ("the conversions to and from xarray need", ("xarray", "rioxarray")),
}


def require(module: str, extra: str) -> ModuleType:
    """Import `module`, a library of the optional `extra` (or one of its submodules).

    Parameters
    ----------
    module : str
        Dotted import name, e.g. ``"pyarrow.parquet"``.
    extra : {'figures', 'formats', 'cluster', 'xarray'}
        The extra of ``pyproject.toml`` that installs it.

    Returns
    -------
    module

    Raises
    ------
    MissingLibraryError
        If the library is not installed, with the line that installs it.

    Examples
    --------
    >>> require("no_such_library_here", "figures")
    Traceback (most recent call last):
    ...
    upscale.errors.MissingLibraryError: the figures and the HTML report need no_such_library_here, \
which is not installed; install the extra 'figures': pip install "upscale[figures]"
    """
    top = module.split(".")[0]
    try:
        return importlib.import_module(module)
    except ModuleNotFoundError as exc:
        if exc.name is None or exc.name.split(".")[0] != top:
            raise  # the library is there but one of its own dependencies is broken: not ours to explain
        raise MissingLibraryError(
            f"{EXTRAS[extra][0]} {top}, which is not installed; "
            f'install the extra {extra!r}: pip install "upscale[{extra}]"'
        ) from None


def require_extra(extra: str) -> None:
    """Import every library of `extra`, before work whose end needs them.

    Raises
    ------
    MissingLibraryError
        If one of them is not installed.
    """
    for module in EXTRAS[extra][1]:
        require(module, extra)


class lazy:  # noqa: N801 - stands where a module's name would
    """A module imported at its first attribute access, through `require`.

    ``pa = lazy("pyarrow", "formats")`` at the top of a module keeps
    ``pa.table(...)`` as written while importing pyarrow only when it runs.

    Examples
    --------
    >>> json = lazy("json", "formats")
    >>> json.dumps([1])
    '[1]'
    """

    def __init__(self, module: str, extra: str) -> None:
        self._module, self._extra = module, extra

    def __getattr__(self, name: str) -> Any:
        return getattr(require(self._module, self._extra), name)

    def __repr__(self) -> str:
        return f"lazy({self._module!r}, {self._extra!r})"
