"""Stage 6: figures and the HTML report of a comparison (or of one run).

* ``style``   — colour maps, the shared log scale and its ends, how no value is drawn;
* ``coordinates`` — true cell edges of maps and sections, coordinates written in full;
* ``layout``  — panel grids, font sizes and titles readable at the report's width;
* ``verdict`` — how methods are named, the ±5 % band and bounds, in pages, figures, terminal;
* ``flux``    — where a coarse model errs: coarse-face flux minus the fine flux through it;
* ``maps``    — fine and coarse fields, pressures and flux mismatches as maps;
* ``charts``  — check errors, effective k against the bounds, histograms of k;
* ``figures`` — every figure of a comparison with its caption;
* ``html``    — one self-contained HTML page (images embedded).

Figures are built with `matplotlib.figure.Figure` (no pyplot, no display),
so they render headless on any machine.
"""

from .figures import Plot, build_figures

__all__ = ["Plot", "build_figures"]
