"""``--well-connection`` on ``compare`` (and ``run``): how the coarse wells connect, chosen and recorded.

* A comparison shares one fine well solve and connects every method's
  coarse wells as the option says (``near-well`` by default, ``peaceman``
  on request); compare.json records it per method (``well_check.connection``
  and each well's ``set_by``).
* A value other than the two is refused by the option itself, in one line.
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import pytest
from conftest import ORIGIN, write_raster

from upscale import Field
from upscale.analysis.compare import candidates, compare_methods
from upscale.check.wells import fine_wells
from upscale.flow.wells import Well
from upscale.gallery.fields import lognormal_field

SEED = 2_957_340_118
X0, Y0 = ORIGIN
WELLS = [Well("I", 25.0, -25.0, None, "pressure", 1.0, 0.1),
         Well("P", 295.0, -295.0, None, "pressure", 0.0, 0.1)]  # fmt: skip


def _field():
    return lognormal_field((32, 32), (6.0, 6.0), geometric_mean=100.0, sigma_ln=1.0, seed=SEED)


def test_every_method_connects_its_wells_as_asked() -> None:
    field = Field.from_arrays(_field(), cell_size=(10.0, 10.0))
    shared = fine_wells(field, WELLS)
    chosen = candidates(["geometric", "flow-transmissibility"])
    for how in ("near-well", "peaceman"):
        found = compare_methods(field, "8x8", chosen, wells=dataclasses.replace(shared, connection=how))
        for entry in found.ranked:
            assert entry.wells.connection == how and entry.wells.fine is shared.flow
            assert {s for c in entry.wells.set_by.values() for s in c} == {how}


@pytest.mark.slow  # about 7 s: the figures and the page of a comparison
def test_compare_records_the_connection(run_cli, tmp_path: Path) -> None:
    path = write_raster(tmp_path / "k.tif", _field(), cell_size=10.0)
    wells = tmp_path / "wells.csv"
    wells.write_text(f"name,x,y,control,value,radius\nI,{X0 + 25},{Y0 - 25},pressure,1,0.1\n"
                     f"P,{X0 + 295},{Y0 - 295},pressure,0,0.1\n")  # fmt: skip
    code, _, stderr = run_cli("compare", path, "--block", "8x8", "--methods", "geometric", "--wells", wells,
                              "--well-connection", "peaceman", "--out", tmp_path / "cmp", "-q")  # fmt: skip
    assert code == 0, stderr
    [method] = json.loads((tmp_path / "cmp" / "compare.json").read_text())["methods"]
    assert method["well_check"]["connection"] == "peaceman"
    assert method["well_check"]["wells"]["I"]["coarse"]["set_by"] == ["peaceman"]


def test_an_unknown_connection_is_one_line(run_cli, tmp_path: Path) -> None:
    path = write_raster(tmp_path / "k.tif", _field(), cell_size=10.0)
    code, stdout, stderr = run_cli("run", path, "--block", "8x8", "--wells", tmp_path / "w.csv",
                                   "--well-connection", "radial", "--out", tmp_path / "out")  # fmt: skip
    assert code == 2 and stdout == "" and len(stderr.strip().splitlines()) == 1
    assert "Invalid value for '--well-connection'" in stderr
