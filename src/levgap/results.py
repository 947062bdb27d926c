"""A results folder for the analyst: screen it, look at one firm, its history and its peers.

``levgap.open_results(DIR)`` reads a folder written by ``levgap analyze`` (checked with
``levgap.outputs.verify_run``) and answers the questions ``levgap screen`` and ``levgap explain``
answer on the terminal, as data frames::

    res = levgap.open_results("results/")
    res.screen(firms=["TR0069", "TR0250"])      # the coverage list, furthest first
    view = res.firm("TR0069")                   # its row, drivers, history, flags in words
    peers = res.peers("TR0069")                 # the peers behind its peer median
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from levgap.errors import ConfigError

HISTORY_VIEW = ("fiscal_year", "actual", "target", "band_low", "band_high", "gap", "gap_z",
                "status", "years_outside", "flags")


@dataclass(frozen=True, slots=True)
class FirmView:
    """One firm-year and measure, with everything ``explain`` shows.

    Parameters
    ----------
    row : dict
        Its targets row.
    drivers : pandas.DataFrame
        ``driver, firm_value, raw_value, peer_value, contribution``.
    history : pandas.DataFrame
        The firm's rows of the measure over the years the run wrote (``HISTORY_VIEW``).
    flags : list of (str, str)
        Each flag of the row and its meaning in words (``levgap.codes``).
    industry_name : str
        Readable name of its industry ("" when none is known).
    """

    row: dict[str, Any]
    drivers: pd.DataFrame
    history: pd.DataFrame
    flags: list[tuple[str, str]]
    industry_name: str = ""

    def steps(self) -> pd.DataFrame:
        """The bridge from peer median to actual (``levgap.report.terminal.driver_steps``)."""
        from levgap.report.terminal import driver_steps

        d = self.drivers.assign(firm_id=self.row["firm_id"], fiscal_year=self.row["fiscal_year"],
                                measure=self.row["measure"])
        return driver_steps(self.row, d)


@dataclass(frozen=True, slots=True)
class PeerSet:
    """The peers behind one firm-year's peer median and driver profile.

    Parameters
    ----------
    basis : str
        ``peer group``, ``parent group``, ``whole year``, ``whole panel``, ``listed`` or
        ``none``.
    table : pandas.DataFrame
        One row per peer: ``firm_id, firm_name, industry, actual`` and each driver's value.
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
        return float(np.median(self.table["actual"])) if len(self.table) else float("nan")


@dataclass(frozen=True, slots=True)
class Results:
    """The tables of one run, read back; see the module docstring.

    Parameters
    ----------
    folder : pathlib.Path
    targets, drivers : pandas.DataFrame
    manifest : dict
        ``run.json``.
    model : dict
        ``model.json`` (empty for a folder without one).
    """

    folder: Path
    targets: pd.DataFrame
    drivers: pd.DataFrame
    manifest: dict[str, Any]
    model: dict[str, Any]

    @property
    def industry_names(self) -> dict[str, str]:
        """Industry label -> readable name, as the run recorded them."""
        return dict(self.manifest.get("industry_names") or {})

    def screen(self, *, measure: str = "book", status: str | None = None,
               industry: str | None = None, firm: str | None = None,
               firms: Sequence[str] = (), year: int | None = None, new: bool = False,
               persistent: bool = False, sort: str | None = None,
               top: int | None = None) -> pd.DataFrame:
        """The rows ``levgap screen`` shows, with the same options (``top=None``: all).

        Raises
        ------
        ConfigError
            An industry or firm that matches nothing (with suggestions).
        """
        from levgap.report.quick import ScreenQuery, read_targets, screen_rows

        query = ScreenQuery(measure=measure, status=status, industry=industry, firm=firm,
                            firms=tuple(firms), year=year, new=new, persistent=persistent,
                            sort=sort, top=top)
        result = screen_rows(read_targets(self.folder), query, self.industry_names)
        frame = pd.DataFrame(result.rows)
        frame.attrs["absent"] = [w for w, _ in result.absent]
        return frame

    def firm_id(self, text: str) -> str:
        """The firm id ``text`` names: an id as typed or ignoring case, or the one firm whose
        name contains it.

        Raises
        ------
        ConfigError
            No firm or several, with suggestions.
        """
        from levgap.matching import did_you_mean, resolve

        ids = list(dict.fromkeys(self.targets["firm_id"].astype(str)))
        hit = resolve(text, ids)
        if hit is not None:
            return hit
        names = self.targets.drop_duplicates("firm_id")
        named = names[names["firm_name"].astype(str).str.contains(text, case=False,
                                                                  regex=False)]
        if len(named) == 1:
            return str(named["firm_id"].iloc[0])
        if len(named) > 1:
            shown = ", ".join(named["firm_id"].astype(str).head(5))
            raise ConfigError(f"FIRM_ID must name one firm; got {text!r}, in the names of "
                              f"{len(named)} firms ({shown}). Give the id.")
        raise ConfigError(f"FIRM_ID must be a firm of {self.folder} (an id, or part of a "
                          f"name); got {text!r}." + did_you_mean(text, ids))

    def _row(self, firm_id: str, year: int | None, measure: str) -> pd.Series:
        firm_rows = self.targets[self.targets["firm_id"].astype(str) == firm_id]
        t = firm_rows[firm_rows["measure"] == measure]
        yr = int((t if len(t) else firm_rows)["fiscal_year"].max()) if year is None else year
        row = t[t["fiscal_year"] == yr]
        if row.empty:
            other = firm_rows[firm_rows["fiscal_year"] == yr]
            if len(other):
                raise ConfigError(
                    f"firm {firm_id} {yr} has no {measure} leverage row (it was excluded from "
                    f"that measure; see exclusions); try --measure {other['measure'].iloc[0]}.")
            years = ", ".join(str(int(y)) for y in sorted(firm_rows["fiscal_year"].unique()))
            raise ConfigError(f"--year must be a fiscal year of firm {firm_id}; got {yr}. It "
                              f"has {years}.")
        return row.iloc[0]

    def firm(self, firm: str, *, year: int | None = None, measure: str = "book") -> FirmView:
        """One firm-year and measure (default: the firm's latest year)."""
        from levgap.codes import flag_words
        from levgap.matching import unneutralise

        firm_id = self.firm_id(firm)
        row = self._row(firm_id, year, measure)
        yr = int(row["fiscal_year"])
        d = self.drivers
        d = d[(d["firm_id"].astype(str) == firm_id) & (d["fiscal_year"] == yr)
              & (d["measure"] == measure)]
        hist = self.targets[(self.targets["firm_id"].astype(str) == firm_id)
                            & (self.targets["measure"] == measure)]
        return FirmView(
            row=row.to_dict(),
            drivers=d[["driver", "firm_value", "raw_value", "peer_value", "contribution"]]
            .reset_index(drop=True),
            history=hist.sort_values("fiscal_year")[list(HISTORY_VIEW)].reset_index(drop=True),
            flags=flag_words(row["flags"]),
            industry_name=self.industry_names.get(unneutralise(str(row["industry"])), ""),
        )

    def history(self, firm: str, *, measure: str = "book") -> pd.DataFrame:
        """The firm's rows of one measure over every year the run wrote."""
        return self.firm(firm, measure=measure).history

    def peers(self, firm: str, *, year: int | None = None, measure: str = "book") -> PeerSet:
        """The peers whose median is the firm-year's ``peer_median``, with their drivers."""
        from levgap.peers import peer_rows

        firm_id = self.firm_id(firm)
        row = self._row(firm_id, year, measure)
        t = self.targets[self.targets["measure"] == measure].reset_index(drop=True)
        index = int(np.flatnonzero((t["firm_id"].astype(str) == firm_id).to_numpy()
                                   & (t["fiscal_year"] == row["fiscal_year"]).to_numpy())[0])
        basis, rows = peer_rows(t, index, model=self.model)
        peers = t.iloc[rows][["firm_id", "firm_name", "industry", "fiscal_year", "actual"]]
        d = self.drivers[self.drivers["measure"] == measure]
        key = pd.MultiIndex.from_frame(peers[["firm_id", "fiscal_year"]].astype(
            {"firm_id": str}))
        dk = pd.MultiIndex.from_frame(d[["firm_id", "fiscal_year"]].astype({"firm_id": str}))
        sub = d[dk.isin(key)]
        wide = sub.pivot_table(index=["firm_id", "fiscal_year"], columns="driver",
                               values="firm_value", sort=False).reset_index()
        wide["firm_id"] = wide["firm_id"].astype(str)
        table = peers.astype({"firm_id": str}).merge(wide, on=["firm_id", "fiscal_year"],
                                                     how="left")
        own = d[(d["firm_id"].astype(str) == firm_id)
                & (d["fiscal_year"] == row["fiscal_year"])]
        names = list(dict.fromkeys(own["driver"]))
        table = table[["firm_id", "firm_name", "industry", "fiscal_year", "actual",
                       *[n for n in names if n in table.columns]]]
        return PeerSet(basis=basis,
                       table=table.sort_values("actual", kind="stable").reset_index(drop=True),
                       peer_median=float(row["peer_median"]),
                       peer_values=dict(zip(own["driver"], own["peer_value"].astype(float),
                                            strict=True)))


def open_results(out_dir: str | Path) -> Results:
    """Read a results folder written by ``levgap analyze``.

    Parameters
    ----------
    out_dir : str or pathlib.Path

    Returns
    -------
    Results

    Raises
    ------
    OutputError
        The folder does not hold one complete run, or a table is damaged.
    """
    from levgap.outputs import saved_model_file
    from levgap.report.tables import read_outputs

    tables, manifest = read_outputs(out_dir, names=["targets", "drivers"])
    model: dict[str, Any] = {}
    path = saved_model_file(out_dir)
    if path.is_file():
        from levgap.models.saved import load_model

        model = load_model(out_dir).record
    for name in ("targets", "drivers"):
        if name not in tables:
            raise ConfigError(f"{out_dir} must hold a {name} table; got none.")
    return Results(folder=Path(out_dir), targets=tables["targets"], drivers=tables["drivers"],
                   manifest=manifest, model=model)
