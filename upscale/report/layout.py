"""Figures sized for the page: panel grids, font sizes and titles readable at the report's width.

The report shows a figure at most `PAGE_WIDTH_PX` wide, and figures are
rendered at `DPI`: a figure wider than ``PAGE_WIDTH_PX / DPI`` inches is
scaled down on the page, and its text with it. Widths here stay near that
limit and the font sizes are chosen so that every text is at least 8 points
on the page (`on_page_points`).
"""

from __future__ import annotations

import math

from matplotlib.axes import Axes
from matplotlib.figure import Figure

#: Resolution of the PNG files and of the figures embedded in the page (dots per inch).
DPI = 130
#: Widest a figure is shown on the report page (CSS pixels: the page's ``max-width``).
PAGE_WIDTH_PX = 1100
#: Font sizes (points in the figure): tick labels, axis labels and legends, panel titles, figure titles.
TICK, LABEL, TITLE, SUPTITLE = 8.5, 9.0, 9.5, 11.0
#: Widest figure (inches): a grid of panels is shrunk to fit, so its text stays readable.
MAX_WIDTH = 10.5
#: Height of one more line of a panel title (inches): the font size and matplotlib's line spacing, 1.2.
TITLE_LINE = 1.2 * TITLE / 72


def on_page_points(figure: Figure, size: float) -> float:
    """Size in points on the report page of a `size`-point text of `figure`.

    The PNG is `DPI` pixels per inch and the page scales it down to at most
    `PAGE_WIDTH_PX` CSS pixels (96 per inch, 72 points per inch).

    Examples
    --------
    >>> round(on_page_points(Figure(figsize=(PAGE_WIDTH_PX / DPI, 4)), 9.0), 2)  # shown at full size
    12.19
    >>> round(on_page_points(Figure(figsize=(2 * PAGE_WIDTH_PX / DPI, 4)), 9.0), 2)  # halved
    6.09
    """
    width_px = figure.get_figwidth() * DPI
    scale = min(1.0, PAGE_WIDTH_PX / width_px)
    return float(size * DPI / 96 * scale)


def panel_grid(count: int, *, width: float = 2.6, height: float | None = None, columns: int = 4,
               extra: tuple[float, float] = (1.0, 0.9), share: bool = False,
               title_lines: int = 1) -> tuple[Figure, list[Axes]]:  # fmt: skip
    """A figure of `count` panels, at most `columns` per row, unused cells hidden.

    Parameters
    ----------
    count : int
        Panels wanted (at least 1).
    width, height : float
        Size of one panel in inches (`height` defaults to `width`); shrunk
        together so the figure is at most `MAX_WIDTH` wide.
    columns : int
        Panels per row at most.
    extra : (float, float)
        Inches added across and down for the colour bar, labels and titles.
    share : bool
        Panels share their x and y axes (maps of one area; label them with
        `outer_labels`).
    title_lines : int
        Lines of the panels' titles: each line past the first adds its
        height to every row, so the panels keep their size and nothing is
        pushed off the canvas.

    Returns
    -------
    (Figure, list of Axes)
        The figure and its `count` visible panels, row by row.
    """
    cols = min(count, columns)
    rows = math.ceil(count / cols)
    height = width if height is None else height
    shrink = min(1.0, (MAX_WIDTH - extra[0]) / (width * cols))
    titles = (title_lines - 1) * rows * TITLE_LINE
    fig = Figure(figsize=(shrink * width * cols + extra[0], shrink * height * rows + extra[1] + titles),
                 layout="constrained")  # fmt: skip
    grid = fig.subplots(rows, cols, squeeze=False, sharex=share, sharey=share)
    axes = list(grid.ravel())
    for ax in axes[count:]:
        ax.set_visible(False)
    return fig, axes[:count]


def outer_labels(axes: list[Axes]) -> None:
    """Tick and axis labels of panels sharing their axes only on the outside of the grid.

    x labels stay where no panel of `axes` sits below, y labels in the first
    column (unlike `Axes.label_outer`, a hidden panel below counts as none).
    """
    places = {(ax.get_subplotspec().rowspan.start, ax.get_subplotspec().colspan.start) for ax in axes}
    for ax in axes:
        row, col = ax.get_subplotspec().rowspan.start, ax.get_subplotspec().colspan.start
        below = (row + 1, col) in places
        ax.tick_params(labelbottom=not below, labelleft=col == 0)
        if below:
            ax.set_xlabel("")
        if col > 0:
            ax.set_ylabel("")


def page_sizes(figure: Figure) -> None:
    """Tick labels, axis labels and titles of every axes of `figure` (colour bars too) in the page's sizes."""
    for ax in figure.axes:
        ax.tick_params(which="both", labelsize=TICK)
        ax.xaxis.label.set_fontsize(LABEL)
        ax.yaxis.label.set_fontsize(LABEL)
        ax.title.set_fontsize(TITLE)


def title(figure: Figure, text: str) -> None:
    """The figure's title, wrapped to the figure's width so it never runs off the canvas."""
    figure.suptitle(text, fontsize=SUPTITLE, wrap=True)


def legend_below(figure: Figure, ax: Axes) -> None:
    """The legend of `ax` centred below the panels, in one row if it fits the figure's width, else more.

    A one-method chart is narrow: its five or six entries in one row ran off
    both sides of the canvas ("5 %", "corner to" cut). The columns are cut
    until the legend's measured width fits.
    """
    handles, labels = ax.get_legend_handles_labels()
    for columns in range(len(handles), 0, -1):
        legend = figure.legend(handles, labels, loc="outside lower center", ncols=columns, fontsize=LABEL,
                               frameon=False)  # fmt: skip
        if columns == 1 or legend.get_window_extent().width <= figure.bbox.width:
            return
        legend.remove()
