"""Tests of `upscale.export.staging`: outputs appear complete or not at all.

The staged folder is driven through its real control flow: files are
written inside ``with staged_folder(...)``, and a failing writer is an
exception raised inside that block. Checks that a new folder appears only
when complete, that existing results are refused without ``overwrite`` and
replaced with it (stale files listed in the old ``summary.json`` removed,
the user's own files kept), that a failure leaves the previous output
byte-identical (a closed pipe passing through as itself, not as a failure
to write), and that the folder's permissions follow the umask.
"""

from __future__ import annotations

import json
import os
import stat

import pytest
from conftest import partial_leftovers, snapshot

from upscale.errors import OutputError, OutputExistsError
from upscale.export import check_destination
from upscale.export.staging import MARKER, staged_folder


def _write_result(stage, files: dict[str, str]) -> None:
    """Write `files` (name -> text) and the marker listing them into `stage`."""
    for name, text in files.items():
        (stage / name).write_text(text)
    (stage / MARKER).write_text(json.dumps({"files": sorted(files)}) + "\n")


@pytest.fixture
def previous(tmp_path):
    """An output folder holding a complete earlier result plus a file of the user's."""
    out = tmp_path / "out"
    with staged_folder(out) as stage:
        _write_result(stage, {"kx.tif": "old kx", "ky.tif": "old ky", "kz.tif": "old kz"})
    (out / "notes.txt").write_text("the user's own notes")
    return out


def test_new_folder_appears_only_when_complete(tmp_path):
    out = tmp_path / "nested" / "out"
    with staged_folder(out) as stage:
        assert stage.parent == out.parent and ".out.partial-" in stage.name
        _write_result(stage, {"kx.tif": "kx", "ky.tif": "ky"})
        assert not out.exists()  # nothing visible until the block ends
    assert snapshot(out) == {
        "kx.tif": b"kx",
        "ky.tif": b"ky",
        MARKER: b'{"files": ["kx.tif", "ky.tif"]}\n',
    }
    assert partial_leftovers(out.parent) == []


def test_existing_empty_folder_is_used(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    with staged_folder(out) as stage:
        _write_result(stage, {"kx.tif": "kx"})
    assert sorted(p.name for p in out.iterdir()) == ["kx.tif", MARKER]
    assert partial_leftovers(tmp_path) == []


def test_non_empty_folder_is_refused_without_overwrite(previous):
    before = snapshot(previous)
    entered = False
    with pytest.raises(OutputExistsError, match=r"already holds files .*`overwrite=True`") as info:
        with staged_folder(previous) as stage:
            entered = True
            _write_result(stage, {"kx.tif": "new"})
    assert not entered
    assert str(previous) in str(info.value)
    assert info.value.exit_code == 2
    assert snapshot(previous) == before
    assert partial_leftovers(previous.parent) == []


def test_a_file_in_place_of_the_folder_is_refused(tmp_path):
    target = tmp_path / "out"
    target.write_text("not a folder")
    with pytest.raises(OutputExistsError, match="exists and is not a folder"):
        check_destination(target, overwrite=True)
    with pytest.raises(OutputExistsError, match="exists and is not a folder"):
        with staged_folder(target, overwrite=True):
            pass
    assert target.read_text() == "not a folder"


def test_overwrite_replaces_results_removes_stale_ones_and_keeps_user_files(previous):
    with staged_folder(previous, overwrite=True) as stage:
        _write_result(stage, {"kx.tif": "new kx", "ky.tif": "new ky"})
    assert snapshot(previous) == {
        "kx.tif": b"new kx",
        "ky.tif": b"new ky",
        MARKER: b'{"files": ["kx.tif", "ky.tif"]}\n',
        "notes.txt": b"the user's own notes",
    }  # kz.tif was listed by the old summary and is gone; notes.txt never was
    assert partial_leftovers(previous.parent) == []


def test_stale_names_outside_the_folder_are_never_removed(tmp_path):
    out = tmp_path / "out"
    (out / "sub").mkdir(parents=True)
    outside = tmp_path / "precious.txt"
    outside.write_text("keep me")
    (out / "sub" / "inner.txt").write_text("keep me too")
    listed = ["../precious.txt", str(outside), "sub/inner.txt", 7, "kx.tif"]
    (out / MARKER).write_text(json.dumps({"files": listed}))
    with staged_folder(out, overwrite=True) as stage:
        _write_result(stage, {"kx.tif": "kx"})
    assert outside.read_text() == "keep me"
    assert (out / "sub" / "inner.txt").read_text() == "keep me too"
    assert (out / "kx.tif").read_text() == "kx"


def test_unreadable_old_marker_removes_nothing_else(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "kz.tif").write_text("old")
    (out / MARKER).write_text("{not json")
    with staged_folder(out, overwrite=True) as stage:
        _write_result(stage, {"kx.tif": "kx"})
    assert sorted(p.name for p in out.iterdir()) == ["kx.tif", "kz.tif", MARKER]
    assert json.loads((out / MARKER).read_text()) == {"files": ["kx.tif"]}


@pytest.mark.parametrize("overwrite", [False, True])
def test_failing_writer_leaves_the_previous_output_byte_identical(previous, overwrite):
    before = snapshot(previous)
    if not overwrite:  # an empty destination: the failure must not create it either
        target = previous.parent / "fresh"
    else:
        target = previous
    with pytest.raises(RuntimeError, match="writer failed half way"):
        with staged_folder(target, overwrite=overwrite) as stage:
            (stage / "kx.tif").write_text("half of a new kx")
            (stage / "ky.tif").write_text("half of a new ky")
            raise RuntimeError("writer failed half way")
    assert snapshot(previous) == before
    if not overwrite:
        assert not target.exists()
    assert partial_leftovers(previous.parent) == []


def test_os_error_in_a_writer_becomes_an_output_error(previous):
    before = snapshot(previous)
    with pytest.raises(OutputError, match="nothing was changed there") as info:
        with staged_folder(previous, overwrite=True) as stage:
            (stage / "kx.tif").write_text("new")
            (stage / "missing-folder" / "ky.tif").write_text("cannot be written")
    assert info.value.exit_code == 1
    assert str(previous) in str(info.value)
    assert snapshot(previous) == before
    assert partial_leftovers(previous.parent) == []


def test_a_closed_progress_pipe_is_no_output_error(previous):
    # the reader of the progress lines went away mid-run: not a failure to write the results, so the
    # command line can end quietly instead of saying "writing ... failed (Broken pipe)"
    before = snapshot(previous)
    with pytest.raises(BrokenPipeError):
        with staged_folder(previous, overwrite=True) as stage:
            (stage / "kx.tif").write_text("new")
            raise BrokenPipeError(32, "Broken pipe")
    assert snapshot(previous) == before
    assert partial_leftovers(previous.parent) == []


@pytest.mark.parametrize("umask", [0o022, 0o027, 0o002])
def test_new_folder_permissions_follow_the_umask(tmp_path, umask):
    old = os.umask(umask)
    try:
        with staged_folder(tmp_path / "out") as stage:
            _write_result(stage, {"kx.tif": "kx"})
    finally:
        os.umask(old)
    mode = stat.S_IMODE((tmp_path / "out").stat().st_mode)
    assert mode == 0o777 & ~umask
    assert mode != 0o700
