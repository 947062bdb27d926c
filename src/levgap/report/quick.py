"""Reading the targets table with pyarrow alone, for the commands that must answer at once.

``levgap screen`` only filters and sorts ``targets``; importing pandas would cost more than
the whole answer, so this module reads and filters the table with pyarrow and nothing else.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from levgap.errors import ConfigError, OutputError


def read_targets(out_dir: str | Path, columns: Sequence[str] | None = None) -> Any:
    """The ``targets`` table a run wrote, as a ``pyarrow.Table``
    (``levgap.report.reading.read_run_tables``).

    Parameters
    ----------
    out_dir : str or pathlib.Path
        A folder written by ``levgap analyze``; checked first with
        ``levgap.outputs.verify_run``.
    columns : sequence of str, optional
        Columns to read; default all.

    Raises
    ------
    OutputError
        The folder does not hold one complete run, or the table cannot be read, lacks a
        contract column or holds a wrong type (the message names the file and column).
    """
    table, _ = read_run_targets(out_dir)
    return table.select(list(columns)) if columns else table


SORTS: dict[str, str] = {"gap": "gap", "gap_z": "gap_z", "debt": "debt_to_target",
                        "change": "gap_change"}
"""``--sort`` choices and the column each orders by (largest size first)."""


@dataclass(frozen=True, slots=True)
class ScreenQuery:
    """What a screen keeps and how it orders it.

    Parameters
    ----------
    measure : str, default="book"
    status : str or None
        ``over``, ``within`` or ``under``.
    industry : str or None
        An industry code (ignoring case) or part of an industry name.
    firm : str or None
        A firm id (ignoring case) or part of a firm name.
    firms : tuple of str
        A coverage list: only these firm ids (ignoring case).
    year : int or None
        Fiscal year; default the latest of the measure.
    new : bool
        Only firms that moved outside their band this year (flag ``newly_outside``).
    persistent : bool
        Only firms outside on the same side for three years or more (flag ``persistent``).
    sort : str or None
        A key of ``SORTS``; default ``gap`` with a status, else ``gap_z``.
    top : int or None
        At most this many rows; None: every row.
    """

    measure: str = "book"
    status: str | None = None
    industry: str | None = None
    firm: str | None = None
    firms: tuple[str, ...] = ()
    year: int | None = None
    new: bool = False
    persistent: bool = False
    sort: str | None = None
    top: int | None = 10


@dataclass(frozen=True, slots=True)
class Screen:
    """The rows of a screen, in order, with what the query could not find.

    Parameters
    ----------
    rows : list of dict
        The rows shown (``top`` at most), each a targets row plus ``industry_name``.
    matched : int
        Rows that passed the filters (before ``top``).
    year : int or None
        The fiscal year screened; None when the measure has no row.
    absent : tuple of (str, str)
        Listed firm ids with no row of that measure and year, and a "did you mean" note.
    """

    rows: list[dict[str, Any]]
    matched: int
    year: int | None
    absent: tuple[tuple[str, str], ...] = ()


def keep_rows(t: Any, column: str, wanted: Sequence[Any]) -> Any:
    """Rows whose ``column`` holds one of ``wanted`` (in the table's order).

    Compared with Arrow values taken from the column itself: turning a Python value into an
    Arrow scalar or array makes pyarrow import pandas, which costs more than the whole screen.
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    levels = pc.unique(t[column])
    want = set(wanted)
    hits = [levels.slice(i, 1) for i, v in enumerate(levels.to_pylist()) if v in want]
    if not hits:
        return t.slice(0, 0)
    return t.filter(pc.is_in(t[column], value_set=pa.concat_arrays(hits)))


def screen_rows(table: Any, query: ScreenQuery,
                names: Mapping[str, str] | None = None) -> Screen:
    """Rows of one measure and year, filtered and ordered for a screen.

    Order: by the size of the ``sort`` column, largest first (a gap of -30 pp before one of
    +20 pp); blanks last.

    Raises
    ------
    ConfigError
        An industry or firm that matches nothing, with suggestions.
    """
    import pyarrow.compute as pc

    from levgap.matching import did_you_mean, unneutralise

    names = names or {}
    t = keep_rows(table, "measure", [query.measure])
    if t.num_rows == 0:
        return Screen([], 0, None)
    yr = int(pc.max(t["fiscal_year"]).as_py()) if query.year is None else int(query.year)
    held = t
    t = keep_rows(t, "fiscal_year", [yr])
    if t.num_rows == 0:  # a year the results do not hold is not an empty filter
        lo, hi = (int(pc.min(held["fiscal_year"]).as_py()),
                  int(pc.max(held["fiscal_year"]).as_py()))
        raise ConfigError(f"--year must be a fiscal year of the {query.measure} leverage "
                          f"results ({lo}-{hi}); got {yr}.")
    if query.industry is not None:
        codes = [c for c in pc.unique(t["industry"]).to_pylist() if c is not None]
        want = query.industry.strip().casefold()
        hit = [c for c in codes if unneutralise(c).casefold() == want
               or want in names.get(unneutralise(c), "").casefold()]
        if not hit and not want.isdigit():  # a text label: part of it, as part of a name
            hit = [c for c in codes if want in unneutralise(c).casefold()]
        if not hit:
            shown = [unneutralise(c) for c in codes] + [names[c] for c in map(unneutralise, codes)
                                                         if c in names]
            raise ConfigError(f"--industry must name an industry of {query.measure} leverage "
                              f"in {yr} (a code, or part of a name); got {query.industry!r}."
                              + did_you_mean(query.industry, shown))
        t = keep_rows(t, "industry", hit)
    if query.firm is not None:
        t = _filter_firm(t, query.firm, query.measure, yr)
    absent: list[tuple[str, str]] = []
    if query.firms:
        ids = [c for c in pc.unique(t["firm_id"]).to_pylist() if c is not None]
        by_fold: dict[str, list[str]] = {}
        for c in ids:
            by_fold.setdefault(unneutralise(c).casefold(), []).append(c)
        keep: list[str] = []
        for wanted in query.firms:
            exact = [c for c in by_fold.get(wanted.casefold(), []) if unneutralise(c) == wanted]
            found = exact or by_fold.get(wanted.casefold(), [])
            if found:
                keep += found
            else:
                absent.append((wanted, did_you_mean(wanted, ids)))
        t = keep_rows(t, "firm_id", keep)
    if query.status is not None:
        t = keep_rows(t, "status", [query.status])
    for flag, on in (("newly_outside", query.new), ("persistent", query.persistent)):
        if on:
            t = t.filter(pc.match_substring_regex(t["flags"], f"(^|;){flag}(;|$)"))
    column = SORTS[query.sort or ("gap" if query.status in ("over", "under") else "gap_z")]
    t = t.append_column("_size", pc.abs(t[column])).sort_by(
        [("_size", "descending"), ("firm_id", "ascending")])
    t = t.drop_columns(["_size"])
    shown = t if query.top is None else t.slice(0, query.top)
    rows = shown.to_pylist()
    for r in rows:
        r["industry_name"] = names.get(unneutralise(str(r["industry"])), "")
    return Screen(rows, t.num_rows, yr, tuple(absent))


def _filter_firm(t: Any, firm: str, measure: str, year: int) -> Any:
    import pyarrow.compute as pc

    from levgap.matching import did_you_mean, resolve

    ids = [c for c in pc.unique(t["firm_id"]).to_pylist() if c is not None]
    exact = resolve(firm, ids)
    if exact is not None:
        return keep_rows(t, "firm_id", [exact])
    named = t.filter(pc.match_substring(t["firm_name"], firm.strip(), ignore_case=True))
    if named.num_rows:
        return named
    raise ConfigError(f"--firm must be a firm id or part of a firm name of {measure} leverage "
                      f"in {year}; got {firm!r}." + did_you_mean(firm, ids))


def read_run_targets(out_dir: str | Path) -> tuple[Any, dict[str, Any]]:
    """The targets table (as :func:`read_targets`) and the run's ``run.json``."""
    from levgap.report.reading import read_run_tables

    tables, run = read_run_tables(out_dir, ["targets"])
    if "targets" not in tables:
        raise OutputError(f"{Path(out_dir)}: the folder must hold a targets table; got none.")
    return tables["targets"], run.manifest
