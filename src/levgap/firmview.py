"""One firm of a written run, from the run's Arrow tables: what ``levgap explain`` shows.

The firm is named by its id (as typed, or ignoring case) or by part of its name, with "did you
mean" suggestions; its row is the measure's row of the year asked (default its latest). Only
the firm's rows are taken out of ``targets`` and ``drivers`` (filtered with pyarrow, never
with a Python value turned into an Arrow one, which would import pandas), so that
``levgap explain FOLDER FIRM`` answers without pandas. ``levgap.results`` returns the same
views as data frames, and :func:`peer_set` (``explain --peers``, which recomputes the peers
from the saved model) is the one part that uses pandas.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from levgap.errors import ConfigError
from levgap.report.quick import keep_rows
from levgap.report.reading import TEXT_COLUMNS

if TYPE_CHECKING:
    import pandas as pd

HISTORY_VIEW = ("fiscal_year", "actual", "target", "band_low", "band_high", "gap", "gap_z",
                "status", "years_outside", "flags")
DRIVER_VIEW = ("driver", "firm_value", "raw_value", "peer_value", "contribution")


@dataclass(frozen=True, slots=True)
class FirmRows:
    """One firm-year and measure, as plain values.

    Parameters
    ----------
    row : dict
        Its targets row (blank numbers as NaN, blank text as ``""``).
    drivers : dict of str to list
        The columns ``DRIVER_VIEW``, one entry per driver in the order of ``drivers``.
    history : dict of str to list
        The columns ``HISTORY_VIEW`` of the firm's rows of the measure, by fiscal year.
    flags : list of (str, str)
        Each flag of the row and its meaning in words (``levgap.codes``).
    industry_name : str
        Readable name of its industry ("" when none is known).
    """

    row: dict[str, Any]
    drivers: dict[str, list[Any]]
    history: dict[str, list[Any]]
    flags: list[tuple[str, str]]
    industry_name: str = ""

    def steps(self) -> dict[str, list[Any]]:
        """The bridge from peer median to actual (``levgap.report.terminal.bridge_steps``)."""
        from levgap.report.terminal import bridge_steps

        return bridge_steps(self.row, self.drivers["driver"], self.drivers["contribution"])


@dataclass(frozen=True, slots=True)
class PeerSet:
    """The peers behind one firm-year's peer median and driver profile.

    Parameters
    ----------
    basis : str
        ``peer group``, ``parent group``, ``whole year``, ``whole panel``, ``listed`` or
        ``none``.
    table : pandas.DataFrame
        One row per peer: ``firm_id, firm_name, industry, fiscal_year, actual`` and each
        driver's value, by leverage.
    peer_median : float
        The run's ``peer_median`` of the firm-year.
    peer_values : dict of str to float
        The run's peer value of each driver.
    """

    basis: str
    table: pd.DataFrame
    peer_median: float
    peer_values: dict[str, float] = field(default_factory=dict)

    @property
    def median(self) -> float:
        """The median leverage of the peers listed (equals ``peer_median``)."""
        import numpy as np

        return float(np.median(self.table["actual"])) if len(self.table) else float("nan")


def records(table: Any) -> list[dict[str, Any]]:
    """The rows of a (small) Arrow table as dicts: blank numbers NaN, blank text ``""``."""
    rows = table.to_pylist()
    nan = float("nan")
    for r in rows:
        for k, v in r.items():
            if v is None:
                r[k] = "" if k in TEXT_COLUMNS else nan
    return rows


def find_firm(targets: Any, text: str, folder: str | Path) -> str:
    """The firm id ``text`` names in ``targets``: an id as typed or ignoring case, or the one
    firm whose name contains it (ignoring case).

    Raises
    ------
    ConfigError
        No firm or several, with suggestions.
    """
    import pyarrow.compute as pc

    from levgap.matching import did_you_mean, resolve

    ids = pc.unique(targets["firm_id"]).to_pylist()  # in order of first appearance
    hit = resolve(text, ids)
    if hit is not None:
        return str(hit)
    contains = pc.match_substring(targets["firm_name"], text, ignore_case=True).to_pylist()
    first: dict[str, int] = {}
    for i, f in enumerate(targets["firm_id"].to_pylist()):
        first.setdefault(f, i)
    named = [f for f, i in first.items() if contains[i]]  # each firm's first row's name
    if len(named) == 1:
        return str(named[0])
    if len(named) > 1:
        raise ConfigError(f"FIRM_ID must name one firm; got {text!r}, in the names of "
                          f"{len(named)} firms ({', '.join(named[:5])}). Give the id.")
    raise ConfigError(f"FIRM_ID must be a firm of {folder} (an id, or part of a name); got "
                      f"{text!r}." + did_you_mean(text, ids))


def firm_row(targets: Any, firm_id: str, year: int | None, measure: str) -> dict[str, Any]:
    """The targets row of one firm (an id of ``targets``), year (default: its latest of the
    measure) and measure.

    Raises
    ------
    ConfigError
        The firm has no row of that measure in that year (naming the measure it has, or its
        years).
    """
    rows = records(keep_rows(targets, "firm_id", [firm_id]))
    t = [r for r in rows if r["measure"] == measure]
    yr = max(r["fiscal_year"] for r in (t or rows)) if year is None else year
    row = [r for r in t if r["fiscal_year"] == yr]
    if not row:
        other = [r for r in rows if r["fiscal_year"] == yr]
        if other:
            raise ConfigError(
                f"firm {firm_id} {yr} has no {measure} leverage row (it was excluded from "
                f"that measure; see exclusions); try --measure {other[0]['measure']}.")
        years = ", ".join(str(int(y)) for y in sorted({r["fiscal_year"] for r in rows}))
        raise ConfigError(f"--year must be a fiscal year of firm {firm_id}; got {yr}. It "
                          f"has {years}.")
    return row[0]


def firm_rows(targets: Any, drivers: Any, firm: str, *, year: int | None = None,
              measure: str = "book", names: Mapping[str, str] | None = None,
              folder: str | Path = "") -> FirmRows:
    """One firm-year and measure of a run (default: the firm's latest year).

    Parameters
    ----------
    targets, drivers : pyarrow.Table
        The run's tables (``levgap.report.reading.read_run_tables``).
    firm : str
        An id (as typed or ignoring case) or part of one firm's name.
    year : int, optional
    measure : str, default="book"
    names : mapping of str to str, optional
        Industry label -> readable name (``run.json``'s ``industry_names``).
    folder : str or pathlib.Path
        The run's folder, for messages.

    Raises
    ------
    ConfigError
        An unknown firm, several firms, or no row of that measure and year.
    """
    from levgap.codes import flag_words
    from levgap.matching import unneutralise

    firm_id = find_firm(targets, firm, folder)
    row = firm_row(targets, firm_id, year, measure)
    yr = row["fiscal_year"]
    own = [r for r in records(keep_rows(drivers, "firm_id", [firm_id]))
           if r["fiscal_year"] == yr and r["measure"] == measure]
    hist = sorted((r for r in records(keep_rows(targets, "firm_id", [firm_id]))
                   if r["measure"] == measure), key=lambda r: r["fiscal_year"])
    return FirmRows(
        row=row,
        drivers={c: [r[c] for r in own] for c in DRIVER_VIEW},
        history={c: [r[c] for r in hist] for c in HISTORY_VIEW},
        flags=flag_words(row["flags"]),
        industry_name=(names or {}).get(unneutralise(str(row["industry"])), ""),
    )


def peer_set(targets: Any, drivers: Any, firm: str, *, year: int | None = None,
             measure: str = "book", model: Mapping[str, Any] | None = None,
             folder: str | Path = "") -> PeerSet:
    """The peers whose median is the firm-year's ``peer_median``, with their drivers, found
    as ``analyze`` found them (``levgap.peers.peer_rows``, from the saved model's industries).

    Parameters are those of :func:`firm_rows`; ``model`` is the run's ``model.json``.
    """
    import numpy as np
    import pandas as pd

    from levgap.peers import peer_rows
    from levgap.report.reading import to_frame

    firm_id = find_firm(targets, firm, folder)
    row = firm_row(targets, firm_id, year, measure)
    t = to_frame(keep_rows(targets, "measure", [measure]))
    index = int(np.flatnonzero((t["firm_id"] == firm_id).to_numpy()
                               & (t["fiscal_year"] == row["fiscal_year"]).to_numpy())[0])
    basis, rows = peer_rows(t, index, model=model or {})
    peers = t.iloc[rows][["firm_id", "firm_name", "industry", "fiscal_year", "actual"]]
    d = keep_rows(keep_rows(drivers, "measure", [measure]), "firm_id",
                  [firm_id, *peers["firm_id"]])
    d = to_frame(d)
    key = pd.MultiIndex.from_frame(peers[["firm_id", "fiscal_year"]])
    sub = d[pd.MultiIndex.from_frame(d[["firm_id", "fiscal_year"]]).isin(key)]
    wide = sub.pivot_table(index=["firm_id", "fiscal_year"], columns="driver",
                           values="firm_value", sort=False).reset_index()
    wide["firm_id"] = wide["firm_id"].astype(str)
    table = peers.astype({"firm_id": str}).merge(wide, on=["firm_id", "fiscal_year"], how="left")
    own = d[(d["firm_id"] == firm_id) & (d["fiscal_year"] == row["fiscal_year"])]
    names = list(dict.fromkeys(own["driver"]))
    table = table[["firm_id", "firm_name", "industry", "fiscal_year", "actual",
                   *[n for n in names if n in table.columns]]]
    return PeerSet(basis=basis,
                   table=table.sort_values("actual", kind="stable").reset_index(drop=True),
                   peer_median=float(row["peer_median"]),
                   peer_values=dict(zip(own["driver"], own["peer_value"].astype(float),
                                        strict=True)))
