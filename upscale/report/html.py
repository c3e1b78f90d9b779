"""One self-contained HTML page: the job, the ranked methods, the figures, how to reproduce, the cautions.

Images are embedded as base64 PNG, styles are inline and there is no
script, so the page opens offline in any browser and can be mailed as one
file. Every piece of text that comes from the user (file names, options,
the command line) is escaped.
"""

from __future__ import annotations

import base64
import html
import shlex
from typing import Any

import numpy as np

from ..analysis.compare import Comparison, Entry
from ..analysis.layers import choice_lines
from ..check.axis import HELD_OUT, check_names, flow_label
from ..field import PERMEABILITY
from ..units import property_label, quantity_name
from .figures import Plot
from .verdict import bound_mark, bound_note, one_method, outside_band

_STYLE = """
body { font-family: system-ui, sans-serif; max-width: 1100px; margin: 2em auto; padding: 0 1em;
       color: #1a1a1a; line-height: 1.45; }
h1 { font-size: 1.6em; } h2 { font-size: 1.25em; margin-top: 1.8em; border-bottom: 1px solid #ccc; }
table { border-collapse: collapse; font-size: 0.92em; }
th, td { padding: 0.3em 0.7em; border-bottom: 1px solid #e0e0e0; text-align: right; }
th:first-child, td:first-child, td.text { text-align: left; }
td { white-space: nowrap; } td.text { white-space: normal; }
tr.best td { font-weight: bold; } tr.failed td { color: #8a1c1c; }
.bound { font-size: 0.85em; font-weight: normal; color: #555; }
figure { margin: 1.5em 0; } figure img { max-width: 100%; height: auto; border: 1px solid #eee; }
figcaption { font-size: 0.92em; color: #333; } p code { white-space: nowrap; }
pre { background: #f4f4f4; padding: 0.7em; overflow-x: auto; white-space: pre-wrap; }
.caution { background: #fff6e0; border-left: 4px solid #e69f00; padding: 0.6em 1em; }
.warning { background: #fbe9e9; border-left: 4px solid #8a1c1c; padding: 0.6em 1em; font-weight: bold; }
.note { background: #eef4fb; border-left: 4px solid #0072b2; padding: 0.6em 1em; }
"""


def _e(value: Any) -> str:
    return html.escape(str(value), quote=True)


def _percent(value: float | None) -> str:
    return "–" if value is None or value != value else f"{100 * value:+.2f} %"


def _number(value: float) -> str:
    return "–" if value != value else f"{value:.4g}"


def figures_html(images: list[tuple[Plot, bytes]]) -> str:
    """Each figure as an embedded PNG with its caption."""
    return "\n".join(
        f'<figure id="{_e(plot.name)}"><img alt="{_e(plot.caption)}" '
        f'src="data:image/png;base64,{base64.b64encode(png).decode()}">'
        f"<figcaption>{_e(plot.caption)}</figcaption></figure>"
        for plot, png in images
    )


def reproduce(command: list[str], folder: str | None) -> str:
    """The shell line that repeats a run: ``cd`` into the folder it ran in, then the command, quoted.

    Examples
    --------
    >>> reproduce(["upscale", "run", "my map.tif", "--out", "o"], "/data/field A")
    "cd '/data/field A' && upscale run 'my map.tif' --out o"
    >>> reproduce(["upscale", "info", "m.tif"], None)
    'upscale info m.tif'
    """
    line = shlex.join(command)
    return line if folder is None else f"cd {shlex.quote(folder)} && {line}"


def notices_html(warning: str | None, note: str | None) -> str:
    """A warning (plain text) and a note as prominent paragraphs under the verdict; nothing for None."""
    return "".join(f'<p class="{kind}">{_e(text)}</p>\n'
                   for kind, text in (("warning", warning), ("note", note)) if text)  # fmt: skip


def inputs_html(inputs: list[dict[str, Any]]) -> str:
    """The heading "Job and inputs" and the table of the input files (``role``, ``path``, ``sha256``)."""
    rows = "\n".join(
        f"<tr><td>{_e(i['role'])}</td><td class='text'>{_e(i['path'])}</td>"
        f"<td class='text'><code>{_e(i['sha256'] or '–')}</code></td></tr>"
        for i in inputs
    )
    return f"""<h2>Job and inputs</h2>
<table>
<tr><th>role</th><th>file</th><th>SHA-256</th></tr>
{rows}
</table>"""


def document(title: str, body: str, job: dict[str, Any]) -> str:
    """A whole page: `body` (HTML) after the title, then how to reproduce, the versions, the cautions.

    `job` holds ``command`` (list of str), ``working_folder`` (the folder the
    command ran in, or None), ``versions`` (dict) and ``caution``.
    """
    versions = ", ".join(f"{_e(k)} {_e(v)}" for k, v in job["versions"].items())
    return f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{_e(title)}</title>
<style>{_STYLE}</style>
</head>
<body>
<h1>{_e(title)}</h1>
{body}
<h2>Reproduce</h2>
<pre><code>{_e(reproduce(job["command"], job.get("working_folder")))}</code></pre>
<p>Versions: {versions}.</p>
<h2>Cautions</h2>
<p class="caution">{_e(job["caution"])}</p>
</body>
</html>
"""


def _row(entry: Entry, axes: tuple[str, ...], best: Entry | None, ranked: bool, wells: bool) -> str:
    label = _e(entry.candidate.label)
    mark = bound_mark(entry.candidate.method)
    if mark:
        label += f' <span class="bound">{_e(mark)}</span>'
    if entry.error is not None:
        span = 2 * len(axes) + len(HELD_OUT) + 1 + wells
        reason = f'<td class="text" colspan="{span}">did not run: {_e(entry.error)}</td>'
        cells = [f"<td>{label}</td>", "<td>–</td>", reason]
        return f'<tr class="method failed">{"".join(cells)}</tr>'
    coarse = entry.result.coarse
    means = [_number(float(_mean(getattr(coarse, PERMEABILITY[a])))) for a in axes]
    errors = [_percent(entry.checks[a].rel_error) for a in check_names(axes)]
    errors += [_percent(entry.wells.rel_error)] if wells else []
    cells = [label, *([str(entry.rank)] if ranked else []), *means, *errors]
    kind = "method best" if entry is best else "method"
    return (f'<tr class="{kind}">' + "".join(f"<td>{c}</td>" for c in cells)
            + f'<td class="time">{entry.seconds:.2f}</td></tr>')  # the one cell that varies between runs


def _mean(values: np.ndarray) -> float:
    finite = values[np.isfinite(values)]
    return float(finite.mean()) if finite.size else float("nan")


def report_page(comparison: Comparison, images: list[tuple[Plot, bytes]], job: dict[str, Any]) -> str:
    """The HTML page of a comparison (or of one run: that method's check, nothing ranked).

    Parameters
    ----------
    comparison : Comparison
        The ranked methods and the shared fine solves.
    images : list of (Plot, bytes)
        Each figure with its PNG bytes.
    job : dict
        ``title``, ``command`` (list of str), ``working_folder``, ``inputs``
        (list of dicts with ``role``, ``path``, ``sha256``), ``unit``,
        ``grid`` (one line), ``block`` (one line), ``caution``, ``versions`` (dict).

    Returns
    -------
    str
        The page.
    """
    axes = comparison.fine.axes
    unit = _e(job["unit"])
    quantity = quantity_name(job["unit"]).capitalize()
    ranked = not one_method(comparison)
    wells = any(e.wells is not None for e in comparison.ranked)
    and_wells = ", and the wells" if wells else ""
    names = [property_label(PERMEABILITY[a], job["unit"]) for a in axes]
    head = ["method", *(["rank"] if ranked else []), *(f"{name} mean ({unit})" for name in names),
            *(f"error {flow_label(a)}" for a in check_names(axes)), *(["error wells"] if wells else []),
            "time (s)"]  # fmt: skip
    best = comparison.best
    rows = "\n".join(_row(e, axes, best if ranked else None, ranked, wells) for e in comparison.entries)
    heading = (f"Methods, ranked by the largest check error over the axes and corner to corner{and_wells}"
               if ranked else f"The check of {_e(comparison.entries[0].candidate.label)}")  # fmt: skip
    return document(job["title"], f"""{_verdict(comparison, ranked)}
{inputs_html(job["inputs"])}
<p>Fine grid: {_e(job["grid"])}. Blocks: {_e(job["block"])}. {quantity} unit: {unit}.</p>
{layers_html(None if comparison.layers is None else comparison.layers.summary())}<h2>{heading}</h2>
<p>The check applies the same pressure drop across each axis to the fine and the coarse model
(closed sides) and compares their effective permeabilities: error = (k_coarse − k_fine) / k_fine.
It also applies a held-out flow no method is fitted to: pressure fixed on the outer faces of one
corner region of whole blocks, the opposite corner at zero, the other faces closed (corner to corner;
k is its rate over the rate of k = 1 on the same grid).{_WELLS if wells else ""}</p>
<table id="ranking">
<tr>{"".join(f"<th>{h}</th>" for h in head)}</tr>
{rows}
</table>
{"".join(f'<p class="zero-k">Blocks with k = 0: {_e(line)}.</p>' for line in comparison.zero_k_notes())}
<h2>Figures</h2>
{figures_html(images)}
""", job)


_WELLS = """
With wells, each model is also driven by the wells of the wells file (Peaceman's well index in each
fine cell; each coarse block connected by near-well upscaling or Peaceman's formula, as the check records;
docs/wells.md): error wells is the error of the total well rate."""


def layers_html(layers: dict[str, Any] | None) -> str:
    """How automatic layers were chosen (`LayerChoice.summary`) as HTML; empty for None.

    The grouping and its loss in a paragraph, then each boundary's reason in a list.
    """
    if layers is None:
        return ""
    head, *boundaries = choice_lines(layers)
    items = "".join(f"<li>{_e(line)}</li>" for line in boundaries)
    return f"<p>Layers: {_e(head)}.</p>\n" + (f"<ul>{items}</ul>\n" if items else "")


def _verdict(comparison: Comparison, ranked: bool) -> str:
    """The opening: the best method (or the one method's check), then warnings on the band and bounds."""
    best = comparison.best
    if best is None:
        return "<p>No method ran on this field.</p>"
    label = best.candidate.label
    wells = ", and the wells" if best.wells is not None else ""
    size = (f"largest check error {100 * best.worst_error:.2f} % over the axes and the corner-to-corner "
            f"flow{wells}.")
    sentence = (f"Best on this field: <strong>{_e(label)}</strong>, {size}" if ranked
                else f"<strong>{_e(label)}</strong> on this field: {size}")  # fmt: skip
    warning = outside_band(label, best.worst_error, several=ranked)
    note = bound_note(best.candidate.method, label) if ranked else None
    per_axis = _per_axis(comparison.per_axis if ranked else None)
    return f"<p>{sentence}</p>\n" + per_axis + notices_html(warning, note)


def _per_axis(entry: Entry | None) -> str:
    """The best method per axis with its check errors, and how to run it; empty when not sought."""
    if entry is None:
        return ""
    errors = ", ".join(f"{flow} {100 * check.rel_error:+.2f} %" for flow, check in entry.checks.items())
    return (f"<p>Best method per axis: <strong>{_e(entry.candidate.label)}</strong> (check error {errors}); "
            f"<code>upscale run</code> with <code>--method {_e(entry.candidate.method)}</code> makes it "
            "(the whole command is in compare.json, <code>per_axis</code>).</p>\n")
