"""The demo's wells table: bundled as `upscale demo` writes it, and where its story says.

What is tested
--------------
* ``demo-fields/marrowfen_wells.csv`` and the listing ``fields.json`` are
  the bytes `upscale.demo.scenario.write_demo_fields` writes.
* Its wells read and connect to the channel map (`upscale.io.wells`,
  `upscale.check.wells.place_wells`): the injector and the first producer
  sit in one four-connected body of sand (k > 100 mD) — one channel — and the second
  producer in the shale (k < 10 mD), as README.md and fields.json say.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from scipy import ndimage

from upscale.check.wells import place_wells
from upscale.io.read import read_field
from upscale.io.wells import read_wells

ROOT = Path(__file__).resolve().parents[2]


def test_bundled_wells_table_is_what_the_demo_writes(demo_dir):
    for name in ("marrowfen_wells.csv", "fields.json"):
        assert (ROOT / "demo-fields" / name).read_bytes() == (demo_dir / name).read_bytes(), name


def test_demo_wells_sit_where_their_story_says(demo_dir):
    field = read_field(demo_dir / "marrowfen_channels.tif")
    wells = read_wells(demo_dir / "marrowfen_wells.csv")
    assert [w.name for w in wells] == ["OST-I1", "OST-P1", "OST-P2"]
    k = np.asarray(field.kx)
    cells = {w.name: np.unravel_index(c.cells[0], k.shape) for w, c in zip(wells, place_wells(field, wells))}
    assert k[tuple(cells["OST-I1"])] > 100 and k[tuple(cells["OST-P1"])] > 100
    sand, _ = ndimage.label(k[0] > 100)  # four-connected sand bodies
    assert sand[cells["OST-I1"][1:]] == sand[cells["OST-P1"][1:]]  # one channel joins them
    assert k[tuple(cells["OST-P2"])] < 10
