"""Tests of the wells file reader (`upscale.io.wells`, format in docs/wells.md).

Every rule of the format (docs/wells.md) has a file that breaks it, and each
gives one `InputError` line naming the file, the line and the column; a good
file reads back field by field, defaults included.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from upscale.errors import InputError
from upscale.flow.wells import Well
from upscale.io.wells import read_wells

HEADER = "name,x,y,layers,control,value,radius,skin\n"


def _file(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "wells.csv"
    path.write_text(text, encoding="utf-8")
    return path


def test_a_good_file_with_defaults(tmp_path: Path) -> None:
    text = (
        "# injector and producer\n"
        + HEADER
        + "I1, 1250.5, -340,,rate,500,0.1,\n\nP1,2250,-1340,2-4,Pressure,0,0.08,1.5\n"
    )
    assert read_wells(_file(tmp_path, text)) == (
        Well("I1", 1250.5, -340.0, None, "rate", 500.0, 0.1, 0.0),
        Well("P1", 2250.0, -1340.0, (2, 4), "pressure", 0.0, 0.08, 1.5),
    )
    # optional columns may be left out, in any order
    short = "radius,value,control,y,x,name\n0.1,3,pressure,2,1,W\n"
    assert read_wells(_file(tmp_path, short)) == (Well("W", 1.0, 2.0, None, "pressure", 3.0, 0.1, 0.0),)
    assert read_wells(_file(tmp_path, "name,x,y,layers,control,value,radius\nW,1,2,3,rate,1,0.1\n"))[
        0
    ].layers == (3, 3)


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("", "no wells; the first line names the columns"),
        (HEADER, "no wells, only the header line"),
        ("name,x,y,control,value,radius,depth\n", "unknown column 'depth'"),
        ("name,x,y,control,value,radius,x\n", "the column 'x' appears twice"),
        ("name,x,y,control,value\n", r"the column\(s\) radius are missing"),
        (HEADER + "W,1,2,,rate,1\n", "line 2: 6 values for 8 columns"),
        (HEADER + ",1,2,,rate,1,0.1,\n", "line 2: the well has no name"),
        (HEADER + "W,east,2,,rate,1,0.1,\n", "line 2: x = 'east' is not a finite number"),
        (HEADER + "W,1,nan,,rate,1,0.1,\n", "line 2: y = 'nan' is not a finite number"),
        (HEADER + "W,1,2,,bhp,1,0.1,\n", "line 2: control 'bhp' must be pressure .* or rate"),
        (HEADER + "W,1,2,,rate,1,0,\n", "line 2: radius 0 must be a well radius in m"),
        (HEADER + "W,1,2,,rate,1,4.5,\n", "line 2: radius 4.5 must be a well radius in m"),
        (HEADER + "W,1,2,3-1,rate,1,0.1,\n", "line 2: layers '3-1' must be all, one layer"),
        (HEADER + "W,1,2,0,rate,1,0.1,\n", "line 2: layers '0' must be all"),
        (HEADER + "W,1,2,,rate,1,0.1,\nW,3,4,,pressure,0,0.1,\n",
         "line 3: the well name 'W' is used twice .first on line 2"),
    ],
)  # fmt: skip
def test_each_bad_file_is_one_line(tmp_path: Path, text: str, message: str) -> None:
    with pytest.raises(InputError, match=message) as caught:
        read_wells(_file(tmp_path, text))
    assert "\n" not in str(caught.value) and "wells.csv" in str(caught.value)


def test_an_unreadable_file(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="the wells file cannot be read"):
        read_wells(tmp_path / "missing.csv")
    (tmp_path / "latin.csv").write_bytes(HEADER.encode() + "Wé,1,2,,rate,1,0.1,\n".encode("latin-1"))
    with pytest.raises(InputError, match="the wells file cannot be read"):
        read_wells(tmp_path / "latin.csv")
