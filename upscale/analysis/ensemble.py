"""Ensembles of equiprobable realizations: the same job on each, and the spread of the results.

Each spread holds the 10th, 50th and 90th percentiles of the values over
the realizations, computed by `numpy.percentile` with linear interpolation
between order statistics (Hyndman & Fan 1996, "Sample quantiles in
statistical packages", definition 7), and is written under the names of the
reading asked for (`upscale.analysis.percentiles`: non-exceedance by
default, or the exceedance reading in which P10 is the 90th percentile).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..caution import CAUTION
from ..check.axis import HELD_OUT, flow_order
from .compare import TIE
from .comparison_record import ComparisonRecord
from .ensemble_maps import REPRESENTATIVE_RULE, STD_LN_NOTE, representative
from .percentiles import PERCENTILES, note, refuse_convention
from .records import Leaf, Spread, check_flows, working_folder
from .summary import MethodUsed, RunSummary

QUANTITIES = ("k_fine", "k_coarse", "rel_error")


@dataclass(frozen=True)
class InputRef(Leaf):
    """One input of a realization: its ``role``, ``path`` as given and ``sha256``."""

    role: str
    path: str
    sha256: str | None


@dataclass(frozen=True)
class RealizationCheck:
    """One realization's check: per axis k_fine, k_coarse (the field's unit) and rel_error (a fraction).

    Attributes
    ----------
    name : str
        The realization's folder.
    inputs : tuple of InputRef
    k_fine, k_coarse, rel_error : dict of str to (float or None)
        Per axis; empty when the whole model was not checked.
    """

    name: str
    inputs: tuple[InputRef, ...]
    k_fine: dict[str, float | None]
    k_coarse: dict[str, float | None]
    rel_error: dict[str, float | None]

    def to_dict(self) -> dict[str, Any]:
        """A realization of ``ensemble.json``."""
        return {"name": self.name, "inputs": [i.to_dict() for i in self.inputs], "k_fine": self.k_fine,
                "k_coarse": self.k_coarse, "rel_error": self.rel_error}  # fmt: skip

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> RealizationCheck:
        """A realization of ``ensemble.json``."""
        return cls(data["name"], tuple(InputRef.from_dict(i) for i in data["inputs"]), data["k_fine"],
                   data["k_coarse"], data["rel_error"])  # fmt: skip


@dataclass(frozen=True)
class EnsembleSummary:
    """One method run on every realization: the content of the ensemble's ``ensemble.json``.

    Attributes
    ----------
    realizations : tuple of RealizationCheck
    statistics : dict of str to dict of str to (Spread or None)
        Per quantity (`QUANTITIES`) and axis, the spread over the realizations.
    convention : {'nonexceedance', 'exceedance'}
        How the percentiles are named (`upscale.analysis.percentiles`).
    method : MethodUsed
    block : dict
        The block partition (`upscale.BlockSpec.summary`).
    command : list of str
    working_folder : str or None
    representative : str or None
        The realization nearest the median (`upscale.analysis.ensemble_maps.representative`);
        None without a check.
    maps : dict of str to dict of str to str
        Per permeability, the per-block maps written (statistic key -> file, e.g.
        ``p10_nonexceed`` -> ``maps/kx_p10_nonexceed.tif``); empty until written.
    files : tuple of str
        Written beside ``ensemble.json`` (empty until written).
    caution : str
    """

    realizations: tuple[RealizationCheck, ...]
    statistics: dict[str, dict[str, Spread | None]]
    convention: str
    method: MethodUsed
    block: dict[str, Any]
    command: list[str]
    working_folder: str | None
    representative: str | None = None
    maps: dict[str, dict[str, str]] = field(default_factory=dict)
    files: tuple[str, ...] = ()
    caution: str = CAUTION

    @property
    def percentiles(self) -> str:
        """How the percentiles are named and computed (`upscale.analysis.percentiles.note`)."""
        return note(self.convention)

    @property
    def axes(self) -> str:
        """The axes checked on some realization, e.g. ``"xy"`` (empty without a check)."""
        return "".join(a for a in self.statistics["k_fine"] if a in ("x", "y", "z"))

    def to_dict(self) -> dict[str, Any]:
        """The content of ``ensemble.json``, key for key."""
        return {"realizations": [r.to_dict() for r in self.realizations],
                "statistics": {q: {a: _plain(s, self.convention) for a, s in by_axis.items()}
                               for q, by_axis in self.statistics.items()},
                "percentile_convention": self.convention, "percentiles": self.percentiles,
                "method": self.method.to_dict(), "block": self.block,
                "command": self.command, "working_folder": self.working_folder,
                "representative": None if self.representative is None else
                {"name": self.representative, "by": "k_fine", "rule": REPRESENTATIVE_RULE},
                "maps": {"files": self.maps, "std_ln": STD_LN_NOTE} if self.maps else None,
                "files": list(self.files), "caution": self.caution}  # fmt: skip

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> EnsembleSummary:
        """The record of an ensemble run's ``ensemble.json``."""
        convention = data["percentile_convention"]
        statistics = {q: {a: _spread_of(s, convention) for a, s in by_axis.items()}
                      for q, by_axis in data["statistics"].items()}  # fmt: skip
        chosen, maps = data["representative"], data["maps"]
        return cls(tuple(RealizationCheck.from_dict(r) for r in data["realizations"]), statistics,
                   convention, MethodUsed.from_dict(data["method"]), data["block"], data["command"],
                   data["working_folder"], representative=chosen and chosen["name"],
                   maps=maps["files"] if maps else {}, files=tuple(data["files"]),
                   caution=data["caution"])  # fmt: skip


def ensemble_summary(names: list[str], summaries: list[RunSummary], *, command: list[str],
                     convention: str = "nonexceedance") -> EnsembleSummary:  # fmt: skip
    """Per-realization check results and their percentiles over the ensemble.

    Parameters
    ----------
    names : list of str
        Realization names.
    summaries : list of RunSummary
        Each realization's summary (one method and block for all).
    command : list of str
        The command line.
    convention : {'nonexceedance', 'exceedance'}
        How the percentiles are named (`upscale.analysis.percentiles`).

    Returns
    -------
    EnsembleSummary
        Per quantity and axis the spread is None when no realization has a value.
    """
    refuse_convention(convention)
    rows = []
    for name, summary in zip(names, summaries):
        checks = summary.check.axes if summary.check is not None else {}
        inputs = tuple(InputRef(i.role, i.path, i.sha256) for i in summary.provenance.inputs)
        per_axis = ({axis: getattr(c, quantity) for axis, c in checks.items()} for quantity in QUANTITIES)
        rows.append(RealizationCheck(name, inputs, *per_axis))
    axes = sorted({axis for row in rows for axis in row.k_fine}, key=flow_order)
    statistics = {quantity: {axis: spread([getattr(r, quantity).get(axis) for r in rows]) for axis in axes}
                  for quantity in QUANTITIES}  # fmt: skip
    first = summaries[0]
    chosen = representative({r.name: r.k_fine for r in rows})
    return EnsembleSummary(tuple(rows), statistics, convention, first.method, first.block, command,
                           working_folder(command), chosen)  # fmt: skip


def spread(values: list[float | None]) -> Spread | None:
    """10th, 50th, 90th percentiles, mean, min, max and count of the finite values (None if there are none).

    Examples
    --------
    >>> found = spread([1.0, None, 3.0, float("nan")])
    >>> found.q50, found.count
    (2.0, 2)
    >>> spread([None]) is None
    True
    """
    finite = np.array([np.nan if v is None else v for v in values], dtype=float)
    finite = finite[np.isfinite(finite)]
    if finite.size == 0:
        return None
    q10, q50, q90 = (float(v) for v in np.percentile(finite, PERCENTILES))
    return Spread(q10, q50, q90, float(finite.mean()), float(finite.min()), float(finite.max()),
                  int(finite.size))  # fmt: skip


def _plain(found: Spread | None, convention: str) -> dict[str, float] | None:
    return None if found is None else found.to_dict(convention)


def _spread_of(data: dict[str, Any] | None, convention: str) -> Spread | None:
    return None if data is None else Spread.from_dict(data, convention)


@dataclass(frozen=True)
class RealizationError(Leaf):
    """One method's check errors on one realization.

    Attributes
    ----------
    worst : float or None
        Largest ``|rel_error|`` over the axes and the held-out flows (a fraction); None when one is undefined.
    rel_error : dict of str to (float or None)
        Per axis, then per held-out flow, ``(k_coarse - k_fine) / k_fine``.
    """

    worst: float | None
    rel_error: dict[str, float | None]


@dataclass(frozen=True)
class RankCount(Leaf):
    """How a method ranked in the realizations' own comparisons: ``mean`` rank, times ``first``."""

    mean: float | None
    first: int


@dataclass(frozen=True)
class MethodSpread:
    """One method compared over an ensemble: its check errors over the realizations.

    Attributes
    ----------
    name : str
        Label, as in each comparison.
    method : str
        Method name.
    ran, failed : int
        Realizations it ran on and failed on.
    worst_error : Spread or None
        Spread of the largest ``|rel_error|`` over the axes and the held-out
        flows (fractions), the quantity each comparison ranks by; None when it ran nowhere.
    rel_error : dict of str to (Spread or None)
        Spread of the check error per axis, then per held-out flow.
    rank_in_realizations : RankCount
    by_realization : dict of str to (RealizationError or None)
        Per realization; None where the method did not run.
    rank : int or None
        Over the ensemble (None when it ran nowhere).
    """

    name: str
    method: str
    ran: int
    failed: int
    worst_error: Spread | None
    rel_error: dict[str, Spread | None]
    rank_in_realizations: RankCount
    by_realization: dict[str, RealizationError | None]
    rank: int | None = None

    def to_dict(self, convention: str = "nonexceedance") -> dict[str, Any]:
        """The method's object in ``ensemble.json``, its percentiles named in `convention`."""
        return {"name": self.name, "method": self.method, "ran": self.ran, "failed": self.failed,
                "worst_error": _plain(self.worst_error, convention),
                "rel_error": {a: _plain(s, convention) for a, s in self.rel_error.items()},
                "rank_in_realizations": self.rank_in_realizations.to_dict(),
                "by_realization": {n: None if r is None else r.to_dict()
                                   for n, r in self.by_realization.items()},
                "rank": self.rank}  # fmt: skip

    @classmethod
    def from_dict(cls, data: dict[str, Any], convention: str = "nonexceedance") -> MethodSpread:
        """A method's object of ``ensemble.json``, its percentiles named in `convention`."""
        return cls(data["name"], data["method"], data["ran"], data["failed"],
                   _spread_of(data["worst_error"], convention),
                   {a: _spread_of(s, convention) for a, s in data["rel_error"].items()},
                   RankCount.from_dict(data["rank_in_realizations"]),
                   {n: None if r is None else RealizationError.from_dict(r)
                    for n, r in data["by_realization"].items()}, data["rank"])  # fmt: skip


def method_spread(names: list[str], comparisons: list[ComparisonRecord]) -> list[MethodSpread]:
    """Every method's check errors over the realizations, ranked by their median.

    Parameters
    ----------
    names : list of str
        Realization names.
    comparisons : list of ComparisonRecord
        Each realization's comparison (the same methods in each).

    Returns
    -------
    list of MethodSpread
        One per method, best first. Ranked by the median of ``worst_error``
        (ties within 1e-9 keep the order of the comparison), the methods that
        ran on every realization first, then by how many realizations a
        method failed on; methods that ran nowhere come last, unranked.
    """
    axes = comparisons[0].axes
    methods = []
    for label in [m.name for m in comparisons[0].methods]:
        entries = {name: c.method(label) for name, c in zip(names, comparisons)}
        ran = {name: e for name, e in entries.items() if e.error is None and e.check}
        by_realization = {
            name: RealizationError(e.largest_error(axes),
                                   {a: e.check[a].rel_error for a in check_flows(axes, e.check)})
            for name, e in ran.items()
        }
        flows = sorted({a for r in by_realization.values() for a in r.rel_error} | set(axes), key=flow_order)
        ranks = [e.rank for e in ran.values()]
        methods.append(MethodSpread(
            label, entries[names[0]].method, len(ran), len(entries) - len(ran),
            spread([r.worst for r in by_realization.values()]),
            {a: spread([r.rel_error.get(a) for r in by_realization.values()]) for a in flows},
            RankCount(float(np.mean(ranks)) if ran else None, sum(r == 1 for r in ranks)),
            {name: by_realization.get(name) for name in names},
        ))  # fmt: skip
    # a method that failed on some realizations ranks after every one that ran on all
    ranked = sorted((m for m in methods if m.worst_error),
                    key=lambda m: (m.failed, round(m.worst_error.q50 / TIE) * TIE))  # fmt: skip
    return ([dataclasses.replace(m, rank=rank) for rank, m in enumerate(ranked, start=1)]
            + [m for m in methods if not m.worst_error])  # fmt: skip


@dataclass(frozen=True)
class RealizationRecord(Leaf):
    """One realization of an ensemble: its folder ``name``, its input's ``path`` and ``sha256``."""

    name: str
    path: str
    sha256: str | None


@dataclass(frozen=True)
class EnsembleRanking:
    """Methods compared over an ensemble: the content of the ensemble's ``ensemble.json``.

    Attributes
    ----------
    realizations : tuple of RealizationRecord
    axes : str
        The flow axes, e.g. ``"xy"``.
    block : dict
        The block partition (`upscale.BlockSpec.summary`).
    command : list of str
        The command line.
    working_folder : str or None
        The folder it ran in.
    ranking : str
        How the methods are ranked.
    convention : {'nonexceedance', 'exceedance'}
        How the percentiles are named (`upscale.analysis.percentiles`).
    methods : tuple of MethodSpread
        Best first.
    best : str or None
        Label of the top method (None when none ran).
    files : tuple of str
        Written beside ``ensemble.json`` (empty until written).
    caution : str
        The caution every output carries.
    """

    realizations: tuple[RealizationRecord, ...]
    axes: str
    block: dict[str, Any]
    command: list[str]
    working_folder: str | None
    ranking: str
    convention: str
    methods: tuple[MethodSpread, ...]
    best: str | None
    files: tuple[str, ...] = ()
    caution: str = CAUTION

    @property
    def percentiles(self) -> str:
        """How the percentiles are named and computed (`upscale.analysis.percentiles.note`)."""
        return note(self.convention)

    def to_dict(self) -> dict[str, Any]:
        """The content of ``ensemble.json``, key for key."""
        return {"realizations": [r.to_dict() for r in self.realizations], "axes": self.axes,
                "block": self.block, "command": self.command, "working_folder": self.working_folder,
                "ranking": self.ranking, "percentile_convention": self.convention,
                "percentiles": self.percentiles,
                "methods": [m.to_dict(self.convention) for m in self.methods], "best": self.best,
                "files": list(self.files),
                "caution": self.caution}  # fmt: skip

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> EnsembleRanking:
        """The record of an ensemble comparison's ``ensemble.json``."""
        convention = data["percentile_convention"]
        return cls(tuple(RealizationRecord.from_dict(r) for r in data["realizations"]), data["axes"],
                   data["block"], data["command"], data["working_folder"], data["ranking"], convention,
                   tuple(MethodSpread.from_dict(m, convention) for m in data["methods"]),
                   data["best"], tuple(data["files"]), data["caution"])  # fmt: skip


#: How an ensemble ranks its methods, recorded beside the ranking.
ENSEMBLE_RANKING = ("median over the realizations of the largest |rel_error| over the axes and the held-out "
                    "corner flow, smallest first")  # fmt: skip


def ensemble_ranking(names: list[str], comparisons: list[ComparisonRecord], *, command: list[str],
                     convention: str = "nonexceedance") -> EnsembleRanking:  # fmt: skip
    """The methods of every realization's comparison ranked over the ensemble (`method_spread`).

    Parameters
    ----------
    names : list of str
        Realization names (their folders).
    comparisons : list of ComparisonRecord
        Each realization's comparison.
    command : list of str
        The command line.
    convention : {'nonexceedance', 'exceedance'}
        How the percentiles are named (`upscale.analysis.percentiles`).
    """
    refuse_convention(convention)
    methods = method_spread(names, comparisons)
    realizations = tuple(RealizationRecord(name, c.provenance.inputs[0].path, c.provenance.inputs[0].sha256)
                         for name, c in zip(names, comparisons))  # fmt: skip
    return EnsembleRanking(realizations, comparisons[0].axes, comparisons[0].block, command,
                           working_folder(command), ENSEMBLE_RANKING, convention, tuple(methods),
                           methods[0].name if methods and methods[0].rank else None)  # fmt: skip


def csv_rows(ensemble: EnsembleSummary) -> tuple[list[str], list[list[Any]]]:
    """Header and rows of ``ensemble.csv``: one row per realization."""
    axes = [a for a in ("x", "y", "z", *HELD_OUT) if any(a in r.k_fine for r in ensemble.realizations)]
    header = ["name", *(f"{q}_{a}" for a in axes for q in QUANTITIES)]
    rows = [[r.name, *(getattr(r, q).get(a) for a in axes for q in QUANTITIES)]
            for r in ensemble.realizations]  # fmt: skip
    return header, rows
