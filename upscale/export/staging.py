"""Staged writes: results appear in the output folder complete or not at all.

Files are written into a hidden temporary folder beside the destination.
When every file is written, a new destination is created by renaming the
whole folder (atomic on one file system); an existing one is updated file by
file, with ``summary.json`` — the completion marker — removed first and
written last. An interrupted run leaves the previous results untouched.
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from ..errors import InputError, OutputError, OutputExistsError

#: Written last; its presence means the folder holds a complete result.
MARKER = "summary.json"


def check_destination(folder: str | Path, overwrite: bool) -> None:
    """Refuse a destination that holds files unless `overwrite` is set.

    Called before any work starts, so a refusal costs nothing.
    """
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise OutputExistsError(f"{folder} exists and is not a folder")
    if folder.is_dir() and not overwrite:
        present = sorted(p.name for p in folder.iterdir())
        if present:
            shown = ", ".join(present[:4]) + (", ..." if len(present) > 4 else "")
            raise OutputExistsError(
                f"{folder} already holds files ({shown}); choose another folder or pass `overwrite=True`"
            )


@contextmanager
def staged_folder(
    folder: str | Path, overwrite: bool = False, marker: str = MARKER
) -> Iterator[Path]:
    """Yield an empty temporary folder; on normal exit move its files into `folder`.

    Parameters
    ----------
    folder : str or Path
        Destination folder.
    overwrite : bool
        Allow replacing files in an existing, non-empty destination.
    marker : str
        Name of the JSON file, written last, that lists the files (key ``files``)
        and marks the folder complete.

    Raises
    ------
    OutputExistsError
        If `folder` holds files and `overwrite` is False.
    OutputError
        If a file cannot be written; the destination is then left as it was.
        A `BrokenPipeError` raised inside the block (the reader of the
        progress lines went away) passes through as itself, with the same
        clean-up.
    """
    folder = Path(folder)
    check_destination(folder, overwrite)
    try:
        folder.parent.mkdir(parents=True, exist_ok=True)
        stage = Path(tempfile.mkdtemp(prefix=f".{folder.name}.partial-", dir=folder.parent))
        stage.chmod(0o777 & ~_umask())  # mkdtemp makes it private; the result should not be
    except OSError as exc:
        raise OutputError(f"cannot write in {folder.parent}: {exc.strerror or exc}") from None
    try:
        try:
            yield stage
        except BrokenPipeError:
            raise  # the reader of the progress lines went away: not a failure to write here
        except OSError as exc:
            raise OutputError(
                f"writing {folder} failed ({exc.strerror or exc}); nothing was changed there"
            ) from None
        try:
            _commit(stage, folder, marker)
        except OSError as exc:
            raise OutputError(
                f"moving the results into {folder} failed ({exc.strerror or exc}); it has no "
                f"{marker}, so it does not hold a complete result — run again"
            ) from None
    finally:
        shutil.rmtree(stage, ignore_errors=True)


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def _commit(stage: Path, folder: Path, marker: str) -> None:
    if not folder.exists():
        os.rename(stage, folder)
        return
    old_marker = folder / marker
    stale = set()
    if old_marker.exists():
        try:
            stale = set(json.loads(old_marker.read_text()).get("files", []))
        except (ValueError, AttributeError, TypeError):
            stale = set()
        old_marker.unlink()
    names = sorted(p.name for p in stage.iterdir())
    for name in names:
        if name != marker:
            if (folder / name).is_dir() and not (folder / name).is_symlink():
                shutil.rmtree(folder / name)  # a folder of ours (figures/), replaced whole
            os.replace(stage / name, folder / name)
    for name in stale - set(names):
        if isinstance(name, str) and Path(name).name == name:  # plain names only
            old = folder / name
            if old.is_dir() and not old.is_symlink():
                shutil.rmtree(old)  # a realization's folder of the previous ensemble
            else:
                old.unlink(missing_ok=True)
    if marker in names:
        os.replace(stage / marker, folder / marker)


#: The figure formats a single figure file is written in, by the ending of its name.
FIGURE_FORMATS = {".png": "png", ".svg": "svg"}


def check_figure_file(path: str | Path, overwrite: bool) -> str:
    """The format of a figure to write to `path` (``png`` or ``svg``), refusing a path it cannot take.

    Called before any work starts, so a refusal costs nothing.

    Raises
    ------
    InputError
        If the name ends neither in ``.png`` nor in ``.svg`` (any case).
    OutputExistsError
        If `path` exists and `overwrite` is False.

    Examples
    --------
    >>> check_figure_file("profile.SVG", overwrite=False)
    'svg'
    """
    path = Path(path)
    kind = FIGURE_FORMATS.get(path.suffix.lower())
    if kind is None:
        raise InputError(f"{path}: a figure file is written as PNG or SVG by the ending of its name; "
                         "give a name ending in .png or .svg")  # fmt: skip
    if path.exists() and not overwrite:
        raise OutputExistsError(f"{path} already exists; choose another file name or pass `overwrite=True`")
    return kind


def write_file(path: str | Path, data: bytes) -> None:
    """Write `data` to `path` whole or not at all: into a hidden file beside it, then renamed over it.

    Raises
    ------
    OutputError
        If the file cannot be written; `path` is then left as it was.
    """
    path = Path(path)
    staged = path.with_name(f".{path.name}.partial")
    try:
        staged.write_bytes(data)
        os.replace(staged, path)
    except OSError as exc:
        staged.unlink(missing_ok=True)
        raise OutputError(f"cannot write in {path.parent}: {exc.strerror or exc}") from None
