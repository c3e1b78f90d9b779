"""The HTML page of a plan: how coarse each method can go within the largest error accepted.

Self-contained like the page of a comparison (`upscale.report.html`): base64
PNG images, inline styles, no script, user text escaped.
"""

from __future__ import annotations

from typing import Any

from ..analysis.plan_record import MethodPlan, PlanRecord
from .figures import Plot
from .html import _e, document, figures_html, inputs_html, layers_html, notices_html
from .verdict import no_block_warning, uneven_note


def plan_page(plan: PlanRecord, images: list[tuple[Plot, bytes]], job: dict[str, Any]) -> str:
    """The page.

    Parameters
    ----------
    plan : PlanRecord
        The content of ``plan.json``.
    images : list of (Plot, bytes)
        Each figure with its PNG bytes.
    job : dict
        ``title``, ``command`` (list of str), ``working_folder``, ``inputs``
        (list of dicts with ``role``, ``path``, ``sha256``), ``grid`` (one
        line), ``caution``, ``versions`` (dict).

    Returns
    -------
    str
    """
    limit = f"{100 * plan.max_error:g} %"
    head = ["method", *(f"error at {b.name}" for b in plan.blocks), f"coarsest within {limit}"]
    rows = "\n".join(_row(m) for m in plan.methods)
    rules = plan.rules
    return document(job["title"], f"""{verdict_html(plan)}
{inputs_html(job["inputs"])}
<p>Fine grid: {_e(job["grid"])}. Permeability unit: {_e(plan.unit)}. Block rules: remainder
{_e(rules["remainder"])}, min-active {_e(rules["min_active"])}, zero-k {_e(rules["zero_k"])}.</p>
<h2>Largest check error at each block size</h2>
<p>Every method is upscaled with every block size and its coarse model checked against the same fine
solves — solved once, since the fine model does not change with the block. The error of a method at a
block is its largest |k_coarse − k_fine| / k_fine over the checked flows; the coarsest block whose
error is within {_e(limit)} is the answer, shown in bold in its row.{_side_by_side(plan)}</p>
<table id="plan">
<tr>{"".join(f"<th>{_e(h)}</th>" for h in head)}</tr>
{rows}
</table>
{_failures(plan)}{"".join(layers_html(b.layers) for b in plan.blocks)}
<h2>Figures</h2>
{figures_html(images)}
""", job)


def _side_by_side(plan: PlanRecord) -> str:
    """The rule for blocks as coarse as one another, when some block groups its layers (else nothing)."""
    if not any(isinstance(b.z, list) for b in plan.blocks):
        return ""
    return (" Blocks with grouped layers count their mean fine cells per coarse cell; blocks as coarse as "
            "one another (the same coarse cells, other layer boundaries) stand side by side, and between "
            "them the one with the smaller error is the answer.")  # fmt: skip


def _failures(plan: PlanRecord) -> str:
    """A paragraph per method and block that did not run, with the reason."""
    return "".join(f'<p class="failed">{_e(m.name)} did not run at {_e(b.block)}: {_e(b.error)}</p>\n'
                   for m in plan.methods for b in m.blocks if b.error)  # fmt: skip


def _row(method: MethodPlan) -> str:
    cells = [f"<td>{_e(method.name)}</td>"]
    for check in method.blocks:
        text = "–" if check.largest_error is None else f"{100 * check.largest_error:.2f} %"
        text = "did not run" if check.error else text
        strong = check.block == method.coarsest
        cells.append(f"<td>{'<strong>' if strong else ''}{_e(text)}{'</strong>' if strong else ''}</td>")
    cells.append(f"<td>{_e(method.coarsest or 'none')}</td>")
    return '<tr class="method">' + "".join(cells) + "</tr>"


def verdict_html(plan: PlanRecord) -> str:
    """The opening: the coarsest block of each method, a warning when none passes, a note on uneven errors."""
    limit = f"{100 * plan.max_error:g} %"
    answers = "; ".join(f"{m.name}: {m.coarsest or 'no block'}" for m in plan.methods)
    sentence = f"Coarsest block within {limit}, per method — {answers}."
    return f"<p>{_e(sentence)}</p>\n" + notices_html(no_block_warning(plan), uneven_note(plan))
