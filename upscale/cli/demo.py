"""``upscale demo``: regenerate the demo fields."""

from __future__ import annotations

import click

from ..demo.scenario import WELLS, write_demo_fields
from .settings import global_options


@click.command()
@click.option("--out", "out", default="demo-fields", show_default=True,
              type=click.Path(file_okay=False), help="Folder to write the demo fields into.")
@click.option("--overwrite", is_flag=True, help="Replace demo fields already in the folder.")
@global_options
@click.pass_context
def demo(ctx: click.Context, out: str, overwrite: bool) -> None:  # fmt: skip
    """Write the demo fields of the fictional Marrowfen Basin.

    The fields are generated from fixed seeds, so they are the same on every
    machine: a 2D lognormal map with its porosity, a 2D channel map, a 3D
    layer cake with shale barriers, a 3D lognormal model, a 3D model over a
    dome with a pinching layer (its surfaces, and its porosity on another
    grid), an aquifer's conductivity and thickness maps, and a table of test
    wells for the channel map. fields.json in the folder describes each.
    """
    names = write_demo_fields(out, overwrite=overwrite)
    if not ctx.obj["quiet"]:
        click.echo(f"wrote {len(names)} demo fields to {out}: {', '.join(names)}; wells: {', '.join(WELLS)}")
