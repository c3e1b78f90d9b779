"""Lazy, window-by-window access to rasters and arrays on disk.

A raster larger than memory is never read whole: `RasterWindows` reads the
rectangle of bands, rows and columns that dask asks for, opening the file
for each read (so it works from threads and from distributed workers that
can reach the same path), and turns nodata into NaN on the way.
"""

from __future__ import annotations

import logging
import os
import threading
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError

#: Largest default chunk: beyond it chunks only add memory (docs/performance.md).
MAX_CHUNK_BYTES = 128 * 2**20


def default_chunk_bytes() -> int:
    """Chunk size from the memory available now: a 64th of it per chunk, 16 MiB to 128 MiB.

    A chunk is copied a few times while it is processed (float64 values,
    half-cell transmissibilities, the coarse result) and every dask thread
    holds one; a 64th leaves room for all of that on every core of a
    workstation (our rule). Above 128 MiB larger chunks save no time
    and only add memory: on a 1.6 GB raster, 256 MiB chunks peaked at up to
    1.01 GiB and 128 MiB chunks at 0.87 GiB (docs/performance.md).

    Examples
    --------
    >>> 16 * 2**20 <= default_chunk_bytes() <= 128 * 2**20
    True
    """
    return int(min(MAX_CHUNK_BYTES, max(16 * 2**20, available_memory() // 64)))


def available_memory() -> int:
    """Bytes this process can still allocate.

    The least of three rooms:

    * the machine's available memory (psutil's ``virtual_memory().available``:
      free memory plus what the kernel can reclaim);
    * the memory limit (`memory_limit`, found as dask's distributed finds
      it) less this process's resident memory. What other processes of the
      same container hold is not counted: this process is taken as the one
      that fills it;
    * an address-space limit (``RLIMIT_AS``, ``ulimit -v``), which dask does
      not read, less this process's virtual size.

    A free amount, not a total, because both callers need what is left now:
    the default chunk size (`default_chunk_bytes`) and the refusal of a flow
    check whose largest solve would not fit.
    """
    import psutil

    held = psutil.Process().memory_info()
    rooms = [psutil.virtual_memory().available, memory_limit() - held.rss]
    try:
        import resource
    except ImportError:  # pragma: no cover - Windows has no address-space limits
        return max(0, int(min(rooms)))
    soft, _ = resource.getrlimit(resource.RLIMIT_AS)
    if soft != resource.RLIM_INFINITY:
        rooms.append(soft - held.vms)
    return max(0, int(min(rooms)))



#: The cgroup limits read, at the top of ``/sys/fs/cgroup``: v1 hard and soft, v2 hard, soft, softest.
CGROUP_LIMITS = ("memory/memory.limit_in_bytes", "memory/memory.soft_limit_in_bytes", "memory.max",
                 "memory.high", "memory.low")  # fmt: skip


def memory_limit() -> int:
    """Bytes of memory this machine or container allows, as `distributed.system.memory_limit` finds them.

    The least of the machine's total memory, the cgroup limits of
    `CGROUP_LIMITS` that hold a positive number, and the hard ``RLIMIT_RSS``.
    The top of ``/sys/fs/cgroup`` is a container's own cgroup (Docker,
    Podman, Kubernetes): its limit counts. A cgroup deeper in the host's
    tree, seen without a cgroup namespace (a batch scheduler's job cgroup on
    the host), is not read. Dask's rule, read here so that its distributed
    package (a third of a second to import) is not loaded to start every
    command.

    Examples
    --------
    >>> import psutil
    >>> 0 < memory_limit() <= psutil.virtual_memory().total
    True
    """
    import psutil

    limits = [psutil.virtual_memory().total]
    for name in CGROUP_LIMITS:
        try:
            limits.append(int(Path("/sys/fs/cgroup", name).read_text()))
        except (OSError, ValueError):  # absent, or "max": no limit
            continue
    try:
        import resource
    except ImportError:  # pragma: no cover - Windows has no resource limits
        return min(limit for limit in limits if limit > 0)
    limits.append(resource.getrlimit(resource.RLIMIT_RSS)[1])
    return min(limit for limit in limits if limit > 0)

_reading = threading.local()
#: Held while this module changes the process's warning filters (`open_raster`).
_FILTERS_LOCK = threading.Lock()


#: Words of GDAL's reports that mean the file is damaged (its others are remarks).
DAMAGE_SIGNS = ("IO error", "Incorrect count", "apparently corrupt")
log = logging.getLogger(__name__)


class _CollectDamage(logging.Filter):
    """Keep GDAL's reports off the log while `open_raster` is open in this thread; collect damage.

    GDAL reports through rasterio's logger in the thread that called it, so a
    thread-local list collects the reports of the file this thread reads.
    """

    def filter(self, record: logging.LogRecord) -> bool:
        found = getattr(_reading, "damage", None)
        if found is None:
            return True
        message = record.getMessage()
        if any(sign in message for sign in DAMAGE_SIGNS):
            found.append(message)
        else:
            log.debug("%s", message)  # other remarks of GDAL on this file: with -vv only
        return False


logging.getLogger("rasterio._env").addFilter(_CollectDamage())


@contextmanager
def georeference_optional() -> Iterator[None]:
    """Hide rasterio's warning about a raster with no georeference, around an open only.

    rasterio warns when a raster is opened (to read or to write) without a
    geotransform; the tool takes such rasters with a given cell size. The
    warning filters are process-wide and ``catch_warnings`` restores them on
    exit, so two threads must not interleave their saves and restores: hence
    the lock, held for the open alone.
    """
    from rasterio.errors import NotGeoreferencedWarning

    with _FILTERS_LOCK, warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        yield


@contextmanager
def open_raster(path: str) -> Iterator[Any]:
    """Open a raster read-only; any failure to read it becomes one `InputError`.

    A raster without georeference is legitimate input here (the cell size is
    then given by the user), so rasterio's warning about it is not passed on.
    """
    import rasterio
    from rasterio.errors import RasterioError

    outer = getattr(_reading, "damage", None)
    _reading.damage = damage = []
    try:
        with georeference_optional():
            opened = rasterio.open(path)
        with opened as src:
            if damage:
                raise InputError(f"{path}: cannot be read as a raster, the file is truncated or "
                                 f"damaged ({damage[0]})")  # fmt: skip
            yield src
    except RasterioError as exc:
        # rasterio's own text may be 'Read failed. See previous exception for details.'
        raise InputError(f"{path}: cannot be read as a raster ({exc.__cause__ or exc})") from None
    finally:
        _reading.damage = outer


def clean_values(data: np.ndarray, nodata: float | None, scale: str) -> np.ndarray:
    """Turn raw cell values into floats with NaN for inactive cells.

    Parameters
    ----------
    data : ndarray
        Raw values as stored (any real dtype).
    nodata : float or None
        The value that marks inactive cells, besides NaN.
    scale : {'linear', 'log10', 'ln'}
        How values are stored: the permeability itself or its logarithm.

    Returns
    -------
    ndarray
        float32 for float32 input stored linearly, float64 otherwise.
    """
    out = data if data.dtype in (np.float32, np.float64) else data.astype(np.float64)
    if nodata is not None and not np.isnan(nodata):
        missing = data == nodata
        if missing.any():
            out = np.where(missing, np.nan, out)
    if scale == "log10":
        out = np.power(10.0, out, dtype=np.float64)
    elif scale == "ln":
        out = np.exp(out, dtype=np.float64)
    return out


def value_dtype(stored: np.dtype, scale: str) -> np.dtype:
    """The dtype `clean_values` returns for `stored` values on `scale`."""
    if scale == "linear" and stored == np.float32:
        return np.dtype(np.float32)
    return np.dtype(np.float64)


#: Rules of `Warp`, rasterio's (GDAL's) resampling of the same names.
RESAMPLING_RULES = ("nearest", "average", "bilinear")


@dataclass(frozen=True)
class Warp:
    """A grid to resample a raster onto as it is read (GDAL's warper through rasterio's `WarpedVRT`).

    Source cells equal to nodata (or outside the source's extent) are left
    out: ``nearest`` keeps them nodata, ``average`` takes the mean of the
    valid source cells under a target cell (nodata when there are none),
    ``bilinear`` weighs the valid neighbours only (GDAL's warper).

    Parameters
    ----------
    crs : str
        The target CRS as WKT.
    transform : tuple of float
        The target's affine coefficients (a, b, c, d, e, f).
    rows, columns : int
        The target's size in cells.
    rule : {'nearest', 'average', 'bilinear'}
        The resampling rule (`RESAMPLING_RULES`).
    """

    crs: str
    transform: tuple[float, ...]
    rows: int
    columns: int
    rule: str

    @contextmanager
    def opened(self, src: Any, nodata: float | None) -> Iterator[Any]:
        """`src` seen through this warp: float64 values with NaN where nothing valid falls."""
        from affine import Affine
        from rasterio.enums import Resampling
        from rasterio.vrt import WarpedVRT

        extra = {} if nodata is None else {"src_nodata": nodata}
        with WarpedVRT(src, crs=self.crs, transform=Affine(*self.transform), height=self.rows,
                       width=self.columns, resampling=Resampling[self.rule], nodata=np.nan,
                       dtype="float64", **extra) as vrt:  # fmt: skip
            yield vrt


class RasterWindows:
    """Array-like ``(bands, rows, columns)`` view of a raster that reads on demand.

    Parameters
    ----------
    path : str
        Raster path.
    shape : (int, int, int)
        ``(band count, height, width)``.
    stored : numpy.dtype
        The raster's data type.
    nodata : float or None
        Value marking inactive cells.
    scale : str
        See `clean_values`.
    use_mask : bool
        Also treat cells outside the raster's own validity mask as inactive.
    warp : Warp, optional
        Read the raster resampled onto this grid; `shape` is then the
        target's, and the values float64 (the source's nodata is NaN).
    """

    def __init__(
        self,
        path: str,
        shape: tuple[int, int, int],
        stored: np.dtype,
        nodata: float | None,
        scale: str,
        use_mask: bool,
        warp: Warp | None = None,
    ) -> None:
        self.path = path
        self.shape = shape
        self.stored = np.dtype(np.float64 if warp is not None else stored)
        self.dtype = value_dtype(self.stored, scale)
        self.ndim = 3
        self.nodata = nodata
        self.scale = scale
        self.use_mask = use_mask
        self.warp = warp

    def __dask_tokenize__(self) -> tuple:
        stat = os.stat(self.path)
        return (self.path, stat.st_size, stat.st_mtime_ns, self.nodata, self.scale, self.use_mask,
                self.warp)  # fmt: skip

    def __getitem__(self, key: tuple[slice, slice, slice]) -> np.ndarray:
        from rasterio.windows import Window

        bands, rows, cols = (s.indices(n) for s, n in zip(key, self.shape))
        indexes = list(range(bands[0] + 1, bands[1] + 1))
        window = Window(cols[0], rows[0], cols[1] - cols[0], rows[1] - rows[0])
        with open_raster(self.path) as src:
            if self.warp is not None:
                with self.warp.opened(src, self.nodata) as vrt:
                    return clean_values(vrt.read(indexes, window=window), None, self.scale)
            data = src.read(indexes, window=window)
            values = clean_values(data, self.nodata, self.scale)
            if self.use_mask:
                valid = src.read_masks(indexes, window=window) > 0
                values = np.where(valid, values, np.nan).astype(self.dtype, copy=False)
        return values


def choose_chunks(
    shape: tuple[int, int, int],
    itemsize: int = 8,
    chunk_bytes: int | None = None,
    multiple: tuple[int, int, int] = (1, 1, 1),
) -> tuple[int, int, int]:
    """Chunk shape for a ``(L, M, N)`` array: whole rows first, then whole layers.

    Parameters
    ----------
    shape : (int, int, int)
        Array shape.
    itemsize : int
        Bytes per value.
    chunk_bytes : int, optional
        Target bytes per chunk (default `default_chunk_bytes`).
    multiple : (int, int, int)
        Chunk sizes are rounded to multiples of these (the coarse block).

    Returns
    -------
    (int, int, int)

    Examples
    --------
    >>> choose_chunks((1, 10_000, 1_000), itemsize=8, chunk_bytes=8_000_000, multiple=(1, 8, 8))
    (1, 1000, 1000)
    """
    budget = max(1, (chunk_bytes or default_chunk_bytes()) // itemsize)
    L, M, N = shape
    bz, by, bx = multiple

    def fit(n: int, per_unit: int, b: int) -> int:
        units = max(b, (budget // per_unit) // b * b)
        return min(n, units)

    if N * M <= budget:
        return (fit(L, N * M, bz), M, N)
    if N * by * bz <= budget:
        return (min(L, bz), fit(M, N * bz, by), N)
    return (min(L, bz), min(M, by), fit(N, by * bz, bx))
