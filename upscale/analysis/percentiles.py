"""The two readings of an ensemble's percentiles, and the names each one gives them.

Every spread over realizations is held as the 10th, 50th and 90th
percentiles of the values (`numpy.percentile`, linear interpolation between
order statistics: Hyndman & Fan 1996, "Sample quantiles in statistical
packages", definition 7). What changes with the reading is only their names:

* ``nonexceedance`` (the default, the statisticians' reading): the 10th
  percentile is the value that 10 % of the realizations fall below, and it
  is named so — key ``p10_nonexceed``, label "10th percentile";
* ``exceedance`` (the reading of many reservoir engineers, common
  practice): Pn is the value *exceeded* by n % of the realizations, so P10
  is the 90th percentile — key ``p10_exceed``, label "P10 (exceeded by 10 %)".

Each key and label says which reading it uses, so that no table can be read
the other way round.
"""

from __future__ import annotations

from ..errors import InputError

#: The readings: the first is the default.
CONVENTIONS = ("nonexceedance", "exceedance")
#: The percentiles held, in numpy's (non-exceedance) sense, low to high.
PERCENTILES = (10, 50, 90)
_SUFFIX = {"nonexceedance": "nonexceed", "exceedance": "exceed"}


def refuse_convention(convention: str) -> None:
    """Refuse, before any work, a reading that is neither of `CONVENTIONS`."""
    if convention not in CONVENTIONS:
        raise InputError(f"`percentiles` is nonexceedance or exceedance, got {convention!r}")


def level(q: int, convention: str) -> int:
    """The number in the name of numpy's `q`-th percentile in `convention` (P10 exceeded = the 90th).

    Examples
    --------
    >>> level(90, "nonexceedance"), level(90, "exceedance")
    (90, 10)
    """
    return q if convention == "nonexceedance" else 100 - q


def key(q: int, convention: str) -> str:
    """The JSON and CSV key of numpy's `q`-th percentile in `convention`.

    Examples
    --------
    >>> key(10, "nonexceedance"), key(90, "exceedance")
    ('p10_nonexceed', 'p10_exceed')
    """
    return f"p{level(q, convention)}_{_SUFFIX[convention]}"


def label(q: int, convention: str) -> str:
    """The label of numpy's `q`-th percentile in `convention`, for pages and figures.

    Examples
    --------
    >>> label(10, "nonexceedance"), label(10, "exceedance")
    ('10th percentile', 'P90 (exceeded by 90 %)')
    """
    if convention == "nonexceedance":
        return f"{q}th percentile"
    n = level(q, convention)
    return f"P{n} (exceeded by {n} %)"


def short_label(q: int, convention: str) -> str:
    """The column title of numpy's `q`-th percentile in `convention` in a terminal table (no spaces).

    Examples
    --------
    >>> short_label(10, "nonexceedance"), short_label(10, "exceedance")
    ('10th-pct', 'P90-exc')
    """
    return f"{q}th-pct" if convention == "nonexceedance" else f"P{level(q, convention)}-exc"


def note(convention: str) -> str:
    """How the percentiles of `convention` are named and computed: one sentence for captions and JSON.

    Examples
    --------
    >>> note("exceedance").split(", ")[1]
    'P10 is the 90th percentile (numpy.percentile'
    """
    if convention == "nonexceedance":
        return ("non-exceedance: 10 % of the realizations fall below the 10th percentile "
                "(numpy.percentile, linear)")  # fmt: skip
    return ("exceedance: Pn is exceeded by n % of the realizations, P10 is the 90th percentile "
            "(numpy.percentile, linear)")  # fmt: skip


def bar_text(convention: str) -> str:
    """What the bar and the tick of a spread figure span, named in `convention`.

    Examples
    --------
    >>> bar_text("nonexceedance")
    'bar from the 10th to the 90th percentile, tick at the median'
    """
    if convention == "nonexceedance":
        return "bar from the 10th to the 90th percentile, tick at the median"
    return "bar from P90 to P10 (exceeded by 90 % and 10 %), tick at the median"
