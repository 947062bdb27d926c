"""A results folder for the analyst: screen it, look at one firm, its history and its peers.

``levgap.open_results(DIR)`` reads a folder written by ``levgap analyze`` (checked with
``levgap.outputs.verify_run``) and answers the questions ``levgap screen`` and ``levgap explain``
answer on the terminal, as data frames::

    res = levgap.open_results("results/")
    res.screen(firms=["TR0069", "TR0250"])      # the coverage list, furthest first
    view = res.firm("TR0069")                   # its row, drivers, history, flags in words
    peers = res.peers("TR0069")                 # the peers behind its peer median

The answers come from the code the commands run (``levgap.report.quick`` for the screen,
``levgap.firmview`` for one firm and its peers); this module only turns them into data frames,
and imports pandas only then.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from levgap.errors import ConfigError
from levgap.firmview import HISTORY_VIEW, FirmRows, PeerSet

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["HISTORY_VIEW", "FirmView", "PeerSet", "Results", "open_results"]


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

    @classmethod
    def of(cls, rows: FirmRows) -> FirmView:
        """The view of :func:`levgap.firmview.firm_rows`, with data frames."""
        import pandas as pd

        return cls(row=rows.row, drivers=pd.DataFrame(rows.drivers),
                   history=pd.DataFrame(rows.history), flags=rows.flags,
                   industry_name=rows.industry_name)

    def steps(self) -> pd.DataFrame:
        """The bridge from peer median to actual (``levgap.report.terminal.bridge_steps``)."""
        import pandas as pd

        from levgap.report.terminal import STEP_COLUMNS, bridge_steps

        return pd.DataFrame(bridge_steps(self.row, self.drivers["driver"].tolist(),
                                         self.drivers["contribution"].tolist()),
                            columns=list(STEP_COLUMNS))


@dataclass(frozen=True, slots=True)
class Results:
    """The tables of one run, read back; see the module docstring.

    Parameters
    ----------
    folder : pathlib.Path
    tables : dict of str to pyarrow.Table
        ``targets`` and ``drivers`` as read (``levgap.report.reading``); the properties
        ``targets`` and ``drivers`` give them as data frames.
    manifest : dict
        ``run.json``.
    model : dict
        ``model.json`` (empty for a folder without one).
    """

    folder: Path
    tables: dict[str, Any]
    manifest: dict[str, Any]
    model: dict[str, Any]
    _frames: dict[str, Any] = field(default_factory=dict, repr=False, compare=False)

    @property
    def targets(self) -> pd.DataFrame:
        """The ``targets`` table (made once, on first use)."""
        return self._frame("targets")

    @property
    def drivers(self) -> pd.DataFrame:
        """The ``drivers`` table (made once, on first use)."""
        return self._frame("drivers")

    def _frame(self, name: str) -> pd.DataFrame:
        from levgap.report.reading import to_frame

        if name not in self._frames:
            self._frames[name] = to_frame(self.tables[name])
        return self._frames[name]

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
        import pandas as pd

        from levgap.report.quick import ScreenQuery, screen_rows

        query = ScreenQuery(measure=measure, status=status, industry=industry, firm=firm,
                            firms=tuple(firms), year=year, new=new, persistent=persistent,
                            sort=sort, top=top)
        result = screen_rows(self.tables["targets"], query, self.industry_names)
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
        from levgap.firmview import find_firm

        return find_firm(self.tables["targets"], text, self.folder)

    def firm(self, firm: str, *, year: int | None = None, measure: str = "book") -> FirmView:
        """One firm-year and measure (default: the firm's latest year)."""
        from levgap.firmview import firm_rows

        return FirmView.of(firm_rows(self.tables["targets"], self.tables["drivers"], firm,
                                     year=year, measure=measure, names=self.industry_names,
                                     folder=self.folder))

    def history(self, firm: str, *, measure: str = "book") -> pd.DataFrame:
        """The firm's rows of one measure over every year the run wrote."""
        return self.firm(firm, measure=measure).history

    def peers(self, firm: str, *, year: int | None = None, measure: str = "book") -> PeerSet:
        """The peers whose median is the firm-year's ``peer_median``, with their drivers."""
        from levgap.firmview import peer_set

        return peer_set(self.tables["targets"], self.tables["drivers"], firm, year=year,
                        measure=measure, model=self.model, folder=self.folder)


def open_results(out_dir: str | Path) -> Results:
    """Read a results folder written by ``levgap analyze`` (without pandas: the data frames
    are made when first asked for).

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
    from levgap.models.record import read_model_record
    from levgap.outputs import saved_model_file
    from levgap.report.reading import read_run_tables

    tables, run = read_run_tables(out_dir, ["targets", "drivers"])
    model: dict[str, Any] = {}
    if saved_model_file(out_dir).is_file():
        model = read_model_record(out_dir)
    for name in ("targets", "drivers"):
        if name not in tables:
            raise ConfigError(f"{out_dir} must hold a {name} table; got none.")
    return Results(folder=Path(out_dir), tables=tables, manifest=run.manifest, model=model)
