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

from ..compare import Comparison, Entry
from ..field import PERMEABILITY
from .figures import Plot

_STYLE = """
body { font-family: system-ui, sans-serif; max-width: 1100px; margin: 2em auto; padding: 0 1em;
       color: #1a1a1a; line-height: 1.45; }
h1 { font-size: 1.6em; } h2 { font-size: 1.25em; margin-top: 1.8em; border-bottom: 1px solid #ccc; }
table { border-collapse: collapse; font-size: 0.92em; }
th, td { padding: 0.3em 0.7em; border-bottom: 1px solid #e0e0e0; text-align: right; }
th:first-child, td:first-child, td.text { text-align: left; }
tr.best td { font-weight: bold; } tr.failed td { color: #8a1c1c; }
figure { margin: 1.5em 0; } figure img { max-width: 100%; height: auto; border: 1px solid #eee; }
figcaption { font-size: 0.92em; color: #333; }
pre { background: #f4f4f4; padding: 0.7em; overflow-x: auto; white-space: pre-wrap; }
.caution { background: #fff6e0; border-left: 4px solid #e69f00; padding: 0.6em 1em; }
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


def document(title: str, body: str, job: dict[str, Any]) -> str:
    """A whole page: `body` (HTML) after the title, then how to reproduce, the versions, the cautions.

    `job` holds ``command`` (list of str), ``versions`` (dict) and ``caution``.
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
<pre><code>{_e(shlex.join(job["command"]))}</code></pre>
<p>Versions: {versions}.</p>
<h2>Cautions</h2>
<p class="caution">{_e(job["caution"])}</p>
</body>
</html>
"""


def _row(entry: Entry, axes: tuple[str, ...], best: Entry | None) -> str:
    label = _e(entry.candidate.label)
    if entry.error is not None:
        reason = f'<td class="text" colspan="{2 * len(axes) + 1}">did not run: {_e(entry.error)}</td>'
        cells = [f"<td>{label}</td>", "<td>–</td>", reason]
        return f'<tr class="method failed">{"".join(cells)}</tr>'
    coarse = entry.result.coarse
    means = [_number(float(_mean(getattr(coarse, PERMEABILITY[a])))) for a in axes]
    errors = [_percent(entry.checks[a].rel_error) for a in axes]
    cells = [label, str(entry.rank), *means, *errors]
    kind = "method best" if entry is best else "method"
    return (f'<tr class="{kind}">' + "".join(f"<td>{c}</td>" for c in cells)
            + f'<td class="time">{entry.seconds:.2f}</td></tr>')  # the one cell that varies between runs


def _mean(values: np.ndarray) -> float:
    finite = values[np.isfinite(values)]
    return float(finite.mean()) if finite.size else float("nan")


def report_page(comparison: Comparison, images: list[tuple[Plot, bytes]], job: dict[str, Any]) -> str:
    """The HTML page of a comparison (or of one run).

    Parameters
    ----------
    comparison : Comparison
        The ranked methods and the shared fine solves.
    images : list of (Plot, bytes)
        Each figure with its PNG bytes.
    job : dict
        ``title``, ``command`` (list of str), ``inputs`` (list of dicts with
        ``role``, ``path``, ``sha256``), ``unit``, ``grid`` (one line),
        ``block`` (one line), ``caution``, ``versions`` (dict).

    Returns
    -------
    str
        The page.
    """
    axes = comparison.fine.axes
    unit = _e(job["unit"])
    head = ["method", "rank", *(f"{PERMEABILITY[a]} mean ({unit})" for a in axes),
            *(f"error along {a}" for a in axes), "time (s)"]  # fmt: skip
    best = comparison.best
    rows = "\n".join(_row(e, axes, best) for e in comparison.entries)
    inputs = "\n".join(
        f"<tr><td>{_e(i['role'])}</td><td class='text'>{_e(i['path'])}</td>"
        f"<td class='text'><code>{_e(i['sha256'] or '–')}</code></td></tr>"
        for i in job["inputs"]
    )
    verdict = "No method ran on this field."
    if best:
        verdict = (f"Best on this field: <strong>{_e(best.candidate.label)}</strong>, largest check "
                   f"error {100 * best.worst_error:.2f} % over the axes.")  # fmt: skip
    return document(job["title"], f"""<p>{verdict}</p>
<h2>Job and inputs</h2>
<table>
<tr><th>role</th><th>file</th><th>SHA-256</th></tr>
{inputs}
</table>
<p>Fine grid: {_e(job["grid"])}. Blocks: {_e(job["block"])}. Permeability unit: {unit}.</p>
<h2>Methods, ranked by the largest check error over the axes</h2>
<p>The check applies the same pressure drop across each axis to the fine and the coarse model
(closed sides) and compares their effective permeabilities: error = (k_coarse − k_fine) / k_fine.</p>
<table id="ranking">
<tr>{"".join(f"<th>{h}</th>" for h in head)}</tr>
{rows}
</table>
<h2>Figures</h2>
{figures_html(images)}
""", job)
