"""The HTML page of an ensemble: the spread over the realizations as a table and figures.

Self-contained like the page of one field (`upscale.report.html`): base64
PNG images, inline styles, no script, user text escaped.
"""

from __future__ import annotations

from typing import Any

from .figures import Plot
from .html import _e, document, figures_html, notices_html


def ensemble_page(job: dict[str, Any], head: list[str], rows: list[list[str]],
                  images: list[tuple[Plot, bytes]]) -> str:  # fmt: skip
    """The page.

    Parameters
    ----------
    job : dict
        ``title``, ``verdict`` (one sentence, plain text), ``warning`` and
        ``note`` (plain text shown prominently under it, or None), ``what`` (what the
        table shows, plain text), ``command`` (list of str),
        ``working_folder``, ``realizations``
        (list of dicts with ``name``, ``path``, ``sha256``), ``block`` (one
        line), ``percentiles`` (how they are defined), ``representative``
        (one sentence naming the representative realization, or None; optional),
        ``caution``, ``versions`` (dict).
    head : list of str
        The table's column titles.
    rows : list of list of str
        The table's rows (the first cell names the row).
    images : list of (Plot, bytes)
        Each figure with its PNG bytes.

    Returns
    -------
    str
    """
    table = "\n".join("<tr>" + "".join(f"<td>{_e(c)}</td>" for c in row) + "</tr>" for row in rows)
    realizations = "\n".join(
        f"<tr><td>{_e(r['name'])}</td><td class='text'>{_e(r['path'])}</td>"
        f"<td class='text'><code>{_e(r['sha256'] or '–')}</code></td></tr>"
        for r in job["realizations"]
    )
    chosen = job.get("representative")
    representative = f'<p id="representative">{_e(chosen)}</p>\n' if chosen else ""
    notices = notices_html(job["warning"], job["note"])
    return document(job["title"], f"""<p>{_e(job["verdict"])}</p>
{representative}{notices}<h2>Spread over {len(job["realizations"])} realizations</h2>
<p>{_e(job["what"])} Percentiles: {_e(job["percentiles"])}. Blocks: {_e(job["block"])}.</p>
<table id="spread">
<tr>{"".join(f"<th>{_e(h)}</th>" for h in head)}</tr>
{table}
</table>
<h2>Figures</h2>
{figures_html(images)}
<h2>Realizations</h2>
<table>
<tr><th>name</th><th>file</th><th>SHA-256</th></tr>
{realizations}
</table>
""", job)
