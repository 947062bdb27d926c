"""Build a schema-v1 peer panel from the SEC's Financial Statement Data Sets.

The U.S. Securities and Exchange Commission publishes every filer's XBRL statement facts as
quarterly bulk files (``sub.txt`` one row per submission, ``num.txt`` one row per fact).
:func:`import_sec` turns any number of quarters into one row per firm and fiscal year, and
records for every number the tag or formula it came from.

Rules
-----
Submissions
    ``form`` in ``forms`` (10-K by default) and ``fp`` = ``FY``, or ``fp`` empty (the SEC
    leaves it empty on some 10-K filings; the form itself makes them annual reports). One
    submission per (``cik``, ``period``): the latest ``filed`` (then ``accepted``, then
    ``adsh``) when ``restated=True``, the earliest otherwise, across all quarters given.
Fiscal year
    From the period end (``period``), not from the SEC's ``fy``: the calendar year of the
    period end, except that a period ending in January to May counts as the previous year
    (a fiscal year ending 31 January 2010 is fiscal 2009). This is the convention of the
    common research databases (common practice; recalled from memory, not re-read). Should
    two periods of one firm fall in one fiscal year (a change of fiscal year end), the later
    period is kept and a warning names the firm.
Facts
    Consolidated entity only (empty ``segments`` and ``coreg``), standard taxonomy
    (``version`` starting ``us-gaap/`` or ``dei/``; when ``tag.txt`` is present, tags it
    marks custom or abstract are not used either), non-empty ``value``, ``ddate`` equal to
    the period end, ``qtrs`` 0 for balance-sheet items and 4 for flows, ``uom`` USD (shares
    for share counts). Cover-page facts: ``dei:EntityCommonStockSharesOutstanding`` on the
    latest cover date on or after the period end, summed over share classes (facts with no
    segment; in the current layout, when there are none, facts whose only segment is a
    class of stock); a sum of zero is treated as missing. ``dei:EntityPublicFloat`` on the
    latest date on or before the period end. The tag precedence of each column is in
    :mod:`levgap.ingest.sec_tags`. Items the data sets do not hold stay missing, never zero.
Market equity
    With a price file: the latest price of the firm's CIK dated from 31 days before to 7
    days after the period end, times ``shares_outstanding`` (``market_equity_source`` =
    ``"price_file"``). Otherwise, or when no price matches, the cover-page public float, the
    market value of the equity held by non-affiliates at the end of the second fiscal
    quarter: a proxy, flagged ``"public_float_proxy"``. Missing when neither exists.
Identifiers
    ``firm_id`` is the CIK as text without leading zeros; ``firm_name`` is ``name`` and
    ``industry`` is ``sic`` of sub.txt, as four-digit text (zero-padded; missing when empty or
    0). The submission behind every number is in the sources table (``adsh``).
Units
    Money in U.S. dollars as filed (``currency`` = ``USD``); shares in shares.

``pre.txt``, when present, adds to each source row the statements on which the filing
presented the tags used (``BS`` balance sheet, ``IS`` income statement, ``CF`` cash flows,
...; a trailing ``*`` marks a parenthetical presentation).
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from levgap.errors import ConfigError, SchemaError
from levgap.ingest.sec_files import BatchFilter, Quarter, locate_quarter, read_filtered
from levgap.ingest.sec_tags import (
    COVER_SHARES,
    DEI_TAGS,
    NEEDED_TAGS,
    PUBLIC_FLOAT,
    TAG_KINDS,
    build_columns,
)
from levgap.schema import BY_NAME

__all__ = [
    "SecImport",
    "fiscal_year_of",
    "import_sec",
    "parse_sic_ranges",
    "read_prices",
    "write_sec_import",
]

#: Period-end months counted in the previous fiscal year (January to May).
LAST_MONTH_OF_PREVIOUS_YEAR = 5

#: Forms an import may keep.
ANNUAL_FORMS: tuple[str, ...] = ("10-K", "10-K/A", "10-KT", "10-KT/A")

#: Panel columns, in schema order, then the flag of the market-equity source.
PANEL_COLUMNS: tuple[str, ...] = (
    "firm_id", "fiscal_year", "industry", "total_assets", "total_debt", "ppe_net", "ebitda",
    "book_equity", "firm_name", "market_equity", "shares_outstanding", "share_price",
    "revenue", "cash", "interest_expense", "rd_expense", "lease_liabilities", "currency",
    "market_equity_source",
)
#: Columns of the sources table.
SOURCE_COLUMNS: tuple[str, ...] = (
    "firm_id", "fiscal_year", "column", "source", "adsh", "form", "period", "filed", "statement",
)
#: Columns of the exclusion table of the SIC filter.
EXCLUDED_COLUMNS: tuple[str, ...] = (
    "firm_id", "firm_name", "industry", "sic_range", "firm_years",
)

#: How ``market_equity`` was obtained.
MARKET_EQUITY_SOURCES: dict[str, str] = {
    "price_file": "share price from the user's price file times shares_outstanding",
    "public_float_proxy": "dei:EntityPublicFloat, non-affiliate float at mid-year (a proxy)",
}

_SUB_COLUMNS = ("adsh", "cik", "name", "sic", "form", "period", "fp", "filed", "accepted")
_NUM_COLUMNS = ("adsh", "tag", "version", "ddate", "qtrs", "uom", "segments", "coreg", "value")
_CLASS_SEGMENT = re.compile(r"^(ClassOfStock|StatementClassOfStockAxis)=[^;]*;?$")
_SIC_ITEM = re.compile(r"^\s*(\d{1,4})\s*(?:-\s*(\d{1,4})\s*)?$")
_TAG_IN_LABEL = re.compile(r"(?:dei:)?[A-Z][A-Za-z0-9]+")


@dataclass(frozen=True, slots=True)
class SecImport:
    """A peer panel built from the SEC data sets, with its audit trail.

    Parameters
    ----------
    panel : pandas.DataFrame
        One row per firm and fiscal year in schema v1 (``PANEL_COLUMNS``), plus
        ``market_equity_source`` (``"price_file"``, ``"public_float_proxy"`` or missing).
        Money in U.S. dollars.
    sources : pandas.DataFrame
        One row per non-missing number of the panel (``SOURCE_COLUMNS``): the tag or formula
        that produced it and the submission (``adsh``) it came from.
    excluded : pandas.DataFrame
        Firms removed by the SIC filter (``EXCLUDED_COLUMNS``), with how many firm-years each.
    warnings : tuple of str
        What the import had to work around or leave out, one line each.
    """

    panel: pd.DataFrame
    sources: pd.DataFrame
    excluded: pd.DataFrame
    warnings: tuple[str, ...]

    @property
    def n_excluded_firms(self) -> int:
        """Firms removed by the SIC filter."""
        return len(self.excluded)

    def tidy(self) -> pd.DataFrame:
        """The panel (the table every later step reads)."""
        return self.panel

    def _repr_html_(self) -> str:
        from html import escape

        head = (f"<p>SEC import: {len(self.panel)} firm-years, {len(self.sources)} sourced "
                f"values, {self.n_excluded_firms} firms excluded by SIC, "
                f"{len(self.warnings)} notes.</p>")
        notes = "".join(f"<li>{escape(w)}</li>" for w in self.warnings)
        return head + (f"<ul>{notes}</ul>" if notes else "") + self.panel.head(10).to_html()


def fiscal_year_of(period_end: pd.Series) -> pd.Series:
    """Fiscal year of a period end: its calendar year, one less for January to May.

    Parameters
    ----------
    period_end : pandas.Series of datetime64
        Period-end dates.

    Returns
    -------
    pandas.Series of int64

    Examples
    --------
    >>> fiscal_year_of(pd.Series(pd.to_datetime(["2010-01-31", "2009-06-30", "2009-12-31"])))
    ... # doctest: +NORMALIZE_WHITESPACE
    0    2009
    1    2009
    2    2009
    dtype: int64
    """
    year = period_end.dt.year.astype("int64")
    early = period_end.dt.month <= LAST_MONTH_OF_PREVIOUS_YEAR
    return (year - early.astype("int64")).astype("int64")


def parse_sic_ranges(text: str) -> tuple[tuple[int, int], ...]:
    """Parse ``"6000-6999,4900-4999"``-style SIC ranges (single codes allowed).

    Parameters
    ----------
    text : str
        Comma-separated items, each a SIC code or two codes joined by ``-``, low first.

    Returns
    -------
    tuple of (int, int)
        Inclusive ranges, in the order given.

    Raises
    ------
    ConfigError
        On an empty string, a non-numeric item, a code of more than four digits or a range
        whose low end exceeds its high end.
    """
    items = [s for s in str(text).split(",")]
    ranges: list[tuple[int, int]] = []
    for item in items:
        m = _SIC_ITEM.match(item)
        lo = hi = -1
        if m:
            lo = int(m.group(1))
            hi = int(m.group(2)) if m.group(2) is not None else lo
        if not m or lo > hi:
            raise ConfigError(
                f"exclude_sic must be comma-separated SIC codes or ranges like "
                f"'6000-6999,4900-4999'; got {item.strip()!r} in {text!r}. Write each range "
                "as LOW-HIGH with up to four digits, low first."
            )
        ranges.append((lo, hi))
    return tuple(ranges)


def read_prices(path: str | Path) -> pd.DataFrame:
    """Read a price file: one row per CIK and date.

    Parameters
    ----------
    path : str or pathlib.Path
        CSV with a header holding ``cik``, ``date`` (``YYYY-MM-DD`` or ``YYYYMMDD``) and
        ``price`` (>= 0, in U.S. dollars per share), in any order and case; other columns
        are ignored.

    Returns
    -------
    pandas.DataFrame
        Columns ``firm_id`` (CIK without leading zeros, text), ``date`` (datetime64),
        ``price`` (float), sorted by date.

    Raises
    ------
    SchemaError
        Naming the file, the 1-based data row and the column of the first bad cell.
    """
    p = Path(path)
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise SchemaError(
            f"{p}: price file must be a readable CSV file; got {exc.strerror or exc}. "
            "Check the path."
        ) from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        text = raw.decode("latin-1")
    from io import StringIO

    try:
        frame = pd.read_csv(StringIO(text), dtype=str, keep_default_na=False, sep=None,
                            engine="python")
    except (pd.errors.ParserError, pd.errors.EmptyDataError, csv_error()) as exc:
        raise SchemaError(
            f"{p}: price file must be a CSV with columns cik, date, price; got an unreadable "
            f"file ({str(exc).splitlines()[0] if str(exc) else exc}). Fix the file."
        ) from None
    frame.columns = [str(c).strip().lower() for c in frame.columns]
    for col in ("cik", "date", "price"):
        if col not in frame.columns:
            raise SchemaError(
                f"{p}: price file must have columns cik, date, price; column {col!r} is "
                f"missing (header: {list(frame.columns)}). Add it."
            )
    cik = frame["cik"].str.strip()
    ok_cik = cik.str.fullmatch(r"\d{1,10}").fillna(False).astype(bool)
    _bad_cell(p, ok_cik, cik, "cik", "a CIK of up to 10 digits")
    date_text = frame["date"].str.strip()
    date = pd.to_datetime(date_text, format="%Y-%m-%d", errors="coerce")
    compact = pd.to_datetime(date_text, format="%Y%m%d", errors="coerce")
    date = date.fillna(compact)
    _bad_cell(p, date.notna(), date_text, "date", "a date YYYY-MM-DD or YYYYMMDD")
    price_text = frame["price"].str.strip()
    price = pd.to_numeric(price_text, errors="coerce")
    _bad_cell(p, price.notna() & (price >= 0) & np.isfinite(price.fillna(0)), price_text,
              "price", "a number >= 0")
    out = pd.DataFrame({
        "firm_id": cik.str.lstrip("0").replace("", "0").astype(str),
        "date": date.astype("datetime64[ns]"),
        "price": price.astype(float),
    })
    dup = out.duplicated(["firm_id", "date"], keep="first")
    if dup.any():
        row = int(np.flatnonzero(dup.to_numpy())[0]) + 1
        raise SchemaError(
            f"{p}: price file must hold one price per cik and date; got a second price for "
            f"cik {out['firm_id'].iloc[row - 1]} on {date_text.iloc[row - 1]} at data row {row}, "
            "column date. Remove the duplicate."
        )
    return out.sort_values("date", kind="stable").reset_index(drop=True)


def csv_error() -> type[Exception]:
    """The csv module's parse error (raised by pandas' python engine)."""
    import csv

    return csv.Error


def _bad_cell(path: Path, ok: pd.Series, text: pd.Series, column: str, expected: str) -> None:
    bad = ~ok.to_numpy(dtype=bool)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise SchemaError(
            f"{path}: price file column {column} must be {expected}; got {text.iloc[i]!r} at "
            f"data row {i + 1}, column {column}. Fix that cell."
        )


def import_sec(
    paths: Sequence[str | Path],
    *,
    forms: Sequence[str] = ("10-K",),
    restated: bool = True,
    prices: str | Path | None = None,
    exclude_sic: str | None = None,
) -> SecImport:
    """Build a schema-v1 panel from quarters of the SEC Financial Statement Data Sets.

    Parameters
    ----------
    paths : sequence of str or pathlib.Path
        Quarterly zips (``2010q1.zip``) or folders holding their extracted files, in either
        layout; several quarters are combined.
    forms : sequence of str, default=("10-K",)
        Forms kept, among ``ANNUAL_FORMS`` (e.g. ``("10-K", "10-K/A", "10-KT")``).
    restated : bool, default=True
        For each firm and period keep the latest filed submission (restated figures);
        ``False`` keeps the first filed.
    prices : str or pathlib.Path, optional
        Price file (see :func:`read_prices`) for market equity; without it the cover-page
        public float serves as a flagged proxy.
    exclude_sic : str, optional
        SIC ranges to leave out, e.g. ``"6000-6999,4900-4999"`` (financials and utilities).

    Returns
    -------
    SecImport

    Raises
    ------
    ConfigError
        On an unknown form, no paths or a bad SIC range string.
    SchemaError
        When a quarter lacks ``sub.txt`` or ``num.txt`` or a required column, cannot be
        parsed, or the price file is malformed.

    Notes
    -----
    The rules (submissions, fiscal year, facts, market equity) are in the module docstring.
    ``num.txt`` is filtered while it streams, so memory grows with the facts kept, not with
    the size of the quarter.
    """
    forms_t = _check_forms(forms)
    if isinstance(paths, str | Path):
        paths = [paths]
    if not paths:
        raise ConfigError(
            "paths must name at least one SEC quarter (zip or folder); got none. Give a path."
        )
    ranges = parse_sic_ranges(exclude_sic) if exclude_sic is not None else ()
    price_table = read_prices(prices) if prices is not None else None

    notes: list[str] = []
    quarters = [locate_quarter(p) for p in paths]
    subs = _read_submissions(quarters, notes)
    chosen = _choose_submissions(subs, forms_t, restated, notes)
    facts, pre = _read_facts(quarters, chosen, notes)
    wide = _wide_facts(facts, chosen, notes)
    panel, sources, meta = _assemble(chosen, wide)
    panel, sources = _market_equity(panel, sources, meta, wide, price_table, chosen)
    sources = _add_statements(sources, pre)
    panel, sources, excluded = _filter_sic(panel, sources, ranges, exclude_sic)
    _coverage_notes(panel, notes)
    return SecImport(panel=panel, sources=sources, excluded=excluded, warnings=tuple(notes))


def _check_forms(forms: Sequence[str]) -> tuple[str, ...]:
    if isinstance(forms, str):
        forms = [f for f in forms.split(",")]
    out = tuple(dict.fromkeys(str(f).strip().upper() for f in forms if str(f).strip()))
    bad = [f for f in out if f not in ANNUAL_FORMS]
    if bad or not out:
        raise ConfigError(
            f"forms must be among {list(ANNUAL_FORMS)}; got {list(forms)}. Use e.g. "
            "10-K,10-K/A,10-KT."
        )
    return out


def _read_submissions(quarters: Sequence[Quarter], notes: list[str]) -> pd.DataFrame:
    frames = []
    for i, q in enumerate(quarters):
        table, report = read_filtered(q, "sub", _SUB_COLUMNS)
        notes.extend(report.messages(q.where("sub")))
        frame = table.to_pandas()
        frame = frame.astype({c: object for c in frame.columns})
        frame["quarter"] = i
        frames.append(frame)
    subs = pd.concat(frames, ignore_index=True)
    for c in _SUB_COLUMNS:
        subs[c] = subs[c].astype(object).fillna("").map(str).str.strip()
    dup = subs.duplicated("adsh", keep="first")
    if dup.any():
        notes.append(
            f"{int(dup.sum())} submissions appear in more than one quarter given; each was "
            "used once."
        )
        subs = subs.loc[~dup]
    return subs.reset_index(drop=True)


def _choose_submissions(
    subs: pd.DataFrame, forms: tuple[str, ...], restated: bool, notes: list[str]
) -> pd.DataFrame:
    form = subs["form"].str.upper()
    annual = form.isin(forms) & subs["fp"].str.upper().isin(["FY", ""])
    sel = subs.loc[annual].copy()
    period = pd.to_datetime(sel["period"], format="%Y%m%d", errors="coerce")
    bad = period.isna()
    if bad.any():
        notes.append(
            f"{int(bad.sum())} annual submissions have no valid period (YYYYMMDD) in sub.txt "
            f"and were left out (first: adsh {sel.loc[bad, 'adsh'].iloc[0]})."
        )
    sel["period_end"] = period
    sel = sel.loc[~bad]
    cik = pd.to_numeric(sel["cik"], errors="coerce")
    bad = cik.isna()
    if bad.any():
        notes.append(
            f"{int(bad.sum())} annual submissions have no numeric cik and were left out "
            f"(first: adsh {sel.loc[bad, 'adsh'].iloc[0]})."
        )
    sel = sel.loc[~bad]
    sel["firm_id"] = cik.loc[~bad].astype("int64").astype(str)
    sel = sel.sort_values(["firm_id", "period_end", "filed", "accepted", "adsh"], kind="stable")
    keep = "last" if restated else "first"
    dup = sel.duplicated(["firm_id", "period_end"], keep=keep)
    if dup.any():
        which = "later" if not restated else "earlier"
        notes.append(
            f"{int(dup.sum())} {which}-filed submissions for a firm and period already covered "
            f"were not used ({'latest' if restated else 'first'} filed kept)."
        )
    sel = sel.loc[~dup].copy()
    sel["fiscal_year"] = fiscal_year_of(sel["period_end"])
    clash = sel.duplicated(["firm_id", "fiscal_year"], keep="last")
    if clash.any():
        firms = ", ".join(sorted(sel.loc[clash, "firm_id"].unique())[:5])
        notes.append(
            f"{int(clash.sum())} firm-years had two period ends in one fiscal year (a change of "
            f"fiscal year end); the later period was kept (CIK {firms})."
        )
        sel = sel.loc[~clash]
    return sel.reset_index(drop=True)


def _fact_filters(adsh_set: pa.Array) -> tuple[BatchFilter, BatchFilter]:
    """Block filters of num.txt and pre.txt: the chosen submissions and the needed tags.

    Consolidated facts only (empty ``coreg``; empty ``segments``, except for the cover-page
    share count, which some filers give per class of stock) with a non-empty value.
    """
    tag_set = pa.array(list(NEEDED_TAGS), pa.string())
    shares_tag = DEI_TAGS[0]

    def keep_num(batch: pa.RecordBatch) -> pa.Array:
        names = batch.schema.names
        col = lambda c: batch.column(names.index(c))  # noqa: E731
        mask = pc.and_(pc.is_in(col("adsh"), value_set=adsh_set),
                       pc.is_in(col("tag"), value_set=tag_set))
        mask = pc.and_(mask, pc.not_equal(col("value"), ""))
        mask = pc.and_(mask, pc.equal(col("coreg"), ""))
        if "segments" in names:
            seg_ok = pc.or_(pc.equal(col("segments"), ""), pc.equal(col("tag"), shares_tag))
            mask = pc.and_(mask, seg_ok)
        return mask

    def keep_pre(batch: pa.RecordBatch) -> pa.Array:
        names = batch.schema.names
        col = lambda c: batch.column(names.index(c))  # noqa: E731
        return pc.and_(pc.is_in(col("adsh"), value_set=adsh_set),
                       pc.is_in(col("tag"), value_set=tag_set))

    return keep_num, keep_pre


def _tag_filter(batch: pa.RecordBatch) -> pa.Array:
    names = batch.schema.names
    return pc.is_in(batch.column(names.index("tag")),
                    value_set=pa.array(list(NEEDED_TAGS), pa.string()))


def _read_facts(
    quarters: Sequence[Quarter], chosen: pd.DataFrame, notes: list[str]
) -> tuple[pd.DataFrame, pd.DataFrame]:
    facts, pres, hidden = [], [], []
    for i, q in enumerate(quarters):
        # Each submission's facts are read from the quarter its sub.txt row came from, so a
        # quarter given twice is not counted twice; a quarter with nothing chosen is skipped.
        mine = chosen.loc[chosen["quarter"] == i, "adsh"].to_numpy(dtype=str)
        if not len(mine):
            continue
        keep_num, keep_pre = _fact_filters(pa.array(mine, pa.string()))
        table, report = read_filtered(q, "num", _NUM_COLUMNS, keep_num)
        notes.extend(report.messages(q.where("num")))
        facts.append(table)
        if "pre" in q.members:
            table, report = read_filtered(q, "pre", ("adsh", "tag", "stmt", "inpth"), keep_pre)
            notes.extend(report.messages(q.where("pre")))
            pres.append(table)
        if "tag" in q.members:
            table, report = read_filtered(q, "tag", ("tag", "version", "custom", "abstract"),
                                          _tag_filter)
            notes.extend(report.messages(q.where("tag")))
            t = table.to_pandas()
            flagged = (t["custom"].astype(str).str.strip() == "1") | (
                t["abstract"].astype(str).str.strip() == "1")
            hidden.append(t.loc[flagged & t["tag"].isin(NEEDED_TAGS), ["tag", "version"]])
    if not facts:
        facts = [pa.table({c: pa.array([], pa.string()) for c in _NUM_COLUMNS})]
    fact_frame = pa.concat_tables(facts).to_pandas()
    fact_frame = fact_frame.astype({c: object for c in fact_frame.columns})
    if hidden:
        h = pd.concat(hidden, ignore_index=True).drop_duplicates().astype(object)
        h["_hidden"] = True
        fact_frame = fact_frame.merge(h, on=["tag", "version"], how="left")
        fact_frame = fact_frame.loc[fact_frame["_hidden"].isna()].drop(columns="_hidden")
    if pres:
        pre = pa.concat_tables(pres).to_pandas().astype(object)
    else:
        pre = pd.DataFrame({c: pd.Series(dtype=object) for c in ("adsh", "tag", "stmt", "inpth")})
    return fact_frame.reset_index(drop=True), pre


def _wide_facts(facts: pd.DataFrame, chosen: pd.DataFrame, notes: list[str]) -> pd.DataFrame:
    """One row per chosen submission, one column per tag (cover-page facts prefixed dei:)."""
    f = facts.merge(chosen[["adsh", "period"]], on="adsh", how="inner")
    value = pd.to_numeric(f["value"], errors="coerce")
    bad = value.isna()
    if bad.any():
        notes.append(f"{int(bad.sum())} facts with a non-numeric value were not used.")
    f = f.assign(value=value.astype(float)).loc[~bad]
    version = f["version"].astype(str)
    standard = version.str.startswith("us-gaap/") | version.str.startswith("dei/")
    f = f.loc[standard]
    qtrs = pd.to_numeric(f["qtrs"], errors="coerce")
    ddate = f["ddate"].astype(str)
    period = f["period"].astype(str)
    kind = f["tag"].map(TAG_KINDS)
    is_dei = version.loc[f.index].str.startswith("dei/")
    want_qtrs = kind.map({"instant": 0, "flow": 4, "shares_instant": 0, "shares_flow": 4})
    want_uom = kind.map({"instant": "USD", "flow": "USD",
                         "shares_instant": "shares", "shares_flow": "shares"})
    gaap_ok = (~is_dei & kind.notna() & (qtrs == want_qtrs) & (f["uom"] == want_uom)
               & (ddate == period) & (f["segments"] == ""))
    g = f.loc[gaap_ok]
    dup = g.duplicated(["adsh", "tag"], keep="first")
    if dup.any():
        notes.append(
            f"{int(dup.sum())} facts repeated a tag already found for the same submission and "
            "date; the first in num.txt was used."
        )
    wide = g.loc[~dup].pivot(index="adsh", columns="tag", values="value")

    # Cover page: shares outstanding on the latest cover date on or after the period end,
    # summed over share classes; public float on the latest date on or before it.
    dei = f.loc[is_dei & (qtrs == 0)]
    shares = dei.loc[(dei["tag"] == DEI_TAGS[0]) & (dei["uom"] == "shares")
                     & (dei["ddate"].astype(str) >= dei["period"].astype(str))]
    plain = shares["segments"] == ""
    by_class = shares["segments"].astype(str).str.match(_CLASS_SEGMENT)
    has_plain = plain.groupby(shares["adsh"]).transform("any").astype(bool)
    shares = shares.loc[(plain & has_plain) | (by_class & ~has_plain)]
    shares = shares.loc[shares["ddate"] == shares.groupby("adsh")["ddate"].transform("max")]
    cover = shares.groupby("adsh")["value"].sum()
    cover = cover.where(cover > 0)
    pf = dei.loc[(dei["tag"] == DEI_TAGS[1]) & (dei["uom"] == "USD")
                 & (dei["segments"] == "")
                 & (dei["ddate"].astype(str) <= dei["period"].astype(str))]
    pf = pf.loc[pf["ddate"] == pf.groupby("adsh")["ddate"].transform("max")]
    floats = pf.groupby("adsh")["value"].sum()

    wide = wide.reindex(chosen["adsh"].to_numpy())
    wide[COVER_SHARES] = cover.reindex(wide.index).to_numpy(dtype=float)
    wide[PUBLIC_FLOAT] = floats.reindex(wide.index).to_numpy(dtype=float)
    wide.columns.name = None
    return wide.astype(float)


def _assemble(
    chosen: pd.DataFrame, wide: pd.DataFrame
) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    fy = chosen["fiscal_year"].to_numpy(dtype="int64")
    cols = build_columns(wide, fy)
    sic = chosen["sic"].astype(str).str.strip()
    sic = sic.where(sic.str.fullmatch(r"\d+") & (pd.to_numeric(sic, errors="coerce") > 0))
    panel = pd.DataFrame({
        "firm_id": chosen["firm_id"].astype(str).to_numpy(),
        "fiscal_year": fy,
        "industry": sic.str.zfill(4).to_numpy(dtype=object),
        "firm_name": chosen["name"].astype(str).to_numpy(dtype=object),
        "currency": "USD",
    })
    for name, (values, _) in cols.items():
        panel[name] = values
    panel["market_equity"] = np.nan
    panel["share_price"] = np.nan
    panel["market_equity_source"] = pd.Series([None] * len(panel), dtype=object)
    long = []
    for name, (_, labels) in cols.items():
        part = pd.DataFrame({"row": np.arange(len(panel)), "column": name, "source": labels})
        long.append(part.loc[part["source"] != ""])
    sources = pd.concat(long, ignore_index=True) if long else pd.DataFrame(
        columns=["row", "column", "source"])
    meta = pd.DataFrame({
        "firm_id": panel["firm_id"],
        "fiscal_year": panel["fiscal_year"],
        "adsh": chosen["adsh"].to_numpy(dtype=object),
        "form": chosen["form"].to_numpy(dtype=object),
        "period": chosen["period_end"].dt.strftime("%Y-%m-%d").to_numpy(dtype=object),
        "filed": pd.to_datetime(chosen["filed"], format="%Y%m%d", errors="coerce")
        .dt.strftime("%Y-%m-%d").to_numpy(dtype=object),
    })
    sources = sources.join(meta, on="row")
    return panel, sources, meta


def _market_equity(
    panel: pd.DataFrame,
    sources: pd.DataFrame,
    meta: pd.DataFrame,
    wide: pd.DataFrame,
    prices: pd.DataFrame | None,
    chosen: pd.DataFrame,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    panel = panel.copy()
    n = len(panel)
    price = np.full(n, np.nan)
    price_date = np.full(n, "", dtype=object)
    if prices is not None and n:
        # Latest price from 31 days before to 7 days after the period end.
        left = pd.DataFrame({
            "row": np.arange(n),
            "firm_id": panel["firm_id"].astype(str).to_numpy(),
            "key": (chosen["period_end"] + pd.Timedelta(days=7)).astype("datetime64[ns]")
            .to_numpy(),
        }).sort_values("key", kind="stable")
        right = prices.rename(columns={"date": "key"}).assign(
            price_date=prices["date"].dt.strftime("%Y-%m-%d"))
        right["firm_id"] = right["firm_id"].astype(str)
        matched = pd.merge_asof(left, right, on="key", by="firm_id", direction="backward",
                                tolerance=pd.Timedelta(days=38)).sort_values("row")
        price = matched["price"].to_numpy(dtype=float)
        price_date = matched["price_date"].astype(object).fillna("").to_numpy(dtype=object)
    shares = panel["shares_outstanding"].to_numpy(dtype=float)
    from_price = ~np.isnan(price) & ~np.isnan(shares)
    floats = wide[PUBLIC_FLOAT].to_numpy(dtype=float)
    from_float = ~from_price & ~np.isnan(floats)
    panel["share_price"] = np.where(~np.isnan(price), price, np.nan)
    panel["market_equity"] = np.where(from_price, price * shares,
                                      np.where(from_float, floats, np.nan))
    panel["market_equity_source"] = pd.Series(
        np.where(from_price, "price_file", np.where(from_float, "public_float_proxy", None)),
        dtype=object,
    )
    rows = np.arange(n)
    extra = []
    if from_price.any() or (~np.isnan(price)).any():
        have_price = ~np.isnan(price)
        extra.append(pd.DataFrame({
            "row": rows[have_price], "column": "share_price",
            "source": "price file " + price_date[have_price].astype(object),
        }))
        extra.append(pd.DataFrame({
            "row": rows[from_price], "column": "market_equity",
            "source": "share_price x shares_outstanding",
        }))
    extra.append(pd.DataFrame({
        "row": rows[from_float], "column": "market_equity",
        "source": f"{PUBLIC_FLOAT} (proxy)",
    }))
    add = pd.concat(extra, ignore_index=True)
    add = add.join(meta, on="row")
    sources = pd.concat([sources, add], ignore_index=True)
    return panel, sources


def _add_statements(sources: pd.DataFrame, pre: pd.DataFrame) -> pd.DataFrame:
    sources = sources.copy()
    if pre.empty or sources.empty:
        sources["statement"] = ""
        return sources
    p = pre.assign(
        stmt=pre["stmt"].astype(str).str.strip()
        + np.where(pre["inpth"].astype(str).str.strip() == "1", "*", ""),
        tag=pre["tag"].astype(str),
    )
    p = p.drop_duplicates(["adsh", "tag", "stmt"])
    tags = sources[["adsh", "source"]].assign(
        tag=sources["source"].astype(str).str.findall(_TAG_IN_LABEL))
    tags = tags.explode("tag").dropna(subset=["tag"])
    tags = tags.reset_index().merge(p[["adsh", "tag", "stmt"]], on=["adsh", "tag"])
    stmt = (tags.drop_duplicates(["index", "stmt"]).sort_values(["index", "stmt"])
            .groupby("index")["stmt"].agg(";".join))
    sources["statement"] = stmt.reindex(sources.index).fillna("").astype(object).to_numpy()
    return sources


def _filter_sic(
    panel: pd.DataFrame,
    sources: pd.DataFrame,
    ranges: tuple[tuple[int, int], ...],
    text: str | None,
) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    sic = pd.to_numeric(panel["industry"], errors="coerce").to_numpy(dtype=float)
    matched = np.full(len(panel), "", dtype=object)
    for lo, hi in reversed(ranges):
        inside = (sic >= lo) & (sic <= hi)
        matched = np.where(inside, f"{lo:04d}-{hi:04d}", matched)
    out = matched != ""
    dropped = panel.loc[out].assign(sic_range=matched[out])
    excluded = (
        dropped.groupby("firm_id", sort=False)
        .agg(firm_name=("firm_name", "last"), industry=("industry", "last"),
             sic_range=("sic_range", "first"), firm_years=("fiscal_year", "size"))
        .reset_index()
    )
    excluded = excluded.reindex(columns=list(EXCLUDED_COLUMNS))
    excluded["firm_years"] = excluded["firm_years"].astype("int64")
    keep_rows = np.flatnonzero(~out)
    new_row = np.full(len(panel), -1)
    new_row[keep_rows] = np.arange(len(keep_rows))
    panel = panel.iloc[keep_rows]
    sources = sources.loc[~out[sources["row"].to_numpy(dtype=int)]]
    sources = sources.assign(row=new_row[sources["row"].to_numpy(dtype=int)])

    # Stable output order: firm (numeric CIK), fiscal year; sources by schema column order.
    order = np.lexsort((panel["fiscal_year"].to_numpy(),
                        panel["firm_id"].astype("int64").to_numpy()))
    rank = np.empty(len(order), dtype=int)
    rank[order] = np.arange(len(order))
    panel = panel.iloc[order].reset_index(drop=True)
    panel = panel.reindex(columns=list(PANEL_COLUMNS))
    panel = panel.astype({
        "firm_id": object, "industry": object, "firm_name": object,
        "currency": object, "market_equity_source": object, "fiscal_year": "int64",
        **{c: float for c in PANEL_COLUMNS if c in BY_NAME and BY_NAME[c].kind == "number"},
    })
    col_rank = {c: i for i, c in enumerate(PANEL_COLUMNS)}
    sources = sources.assign(
        _r=rank[sources["row"].to_numpy(dtype=int)],
        _c=sources["column"].map(col_rank),
    ).sort_values(["_r", "_c"], kind="stable")
    sources = sources.reindex(columns=list(SOURCE_COLUMNS)).reset_index(drop=True)
    sources = sources.astype({c: object for c in SOURCE_COLUMNS if c != "fiscal_year"})
    sources["fiscal_year"] = sources["fiscal_year"].astype("int64")
    return panel, sources, excluded.reset_index(drop=True)


def _coverage_notes(panel: pd.DataFrame, notes: list[str]) -> None:
    if panel.empty:
        notes.append("No annual submission matched the forms asked for; the panel is empty.")
        return
    no_sic = int(panel["industry"].isna().sum())
    if no_sic:
        notes.append(f"{no_sic} firm-years have no SIC code in sub.txt (industry missing).")
    for col in PANEL_COLUMNS:
        spec = BY_NAME.get(col)
        if spec is None or spec.kind != "number" or spec.minimum is None:
            continue
        values = panel[col]
        below = int((values <= spec.minimum).sum() if spec.strict
                    else (values < spec.minimum).sum())
        if below:
            notes.append(
                f"{col} is {'at or ' if spec.strict else ''}below {spec.minimum:g} for {below} "
                "firm-years (a filer's sign convention or inconsistent tags); kept as "
                "computed, the panel check will flag them."
            )
    for col in ("total_assets", "total_debt", "ppe_net", "ebitda", "book_equity"):
        missing = int(panel[col].isna().sum())
        if missing:
            notes.append(
                f"{col} is missing for {missing} of {len(panel)} firm-years (no matching tag "
                "in the data sets; left missing, not zero)."
            )


def write_sec_import(result: SecImport, out_path: str | Path) -> tuple[Path, Path]:
    """Write the panel and its sources beside it, each atomically.

    Parameters
    ----------
    result : SecImport
    out_path : str or pathlib.Path
        ``PANEL.csv`` or ``PANEL.parquet``; the sources go to ``PANEL.sources.csv``.

    Returns
    -------
    (pathlib.Path, pathlib.Path)
        The panel file and the sources file.

    Raises
    ------
    ConfigError
        When the suffix is neither ``.csv`` nor ``.parquet``.
    OutputError
        When a file cannot be written.
    """
    out = Path(out_path)
    suffix = out.suffix.lower()
    if suffix not in (".csv", ".parquet"):
        raise ConfigError(
            f"out must end in .csv or .parquet; got {str(out)!r}. Name the panel file e.g. "
            "panel.csv."
        )
    sources_path = out.with_name(out.stem + ".sources.csv")
    # The project's one atomic writer (temporary name beside the target, then os.replace)
    # and its formula neutraliser for CSV cells.
    from levgap.outputs import atomic_file, neutralise

    with atomic_file(out) as tmp:
        if suffix == ".csv":
            neutralise(result.panel).to_csv(tmp, index=False)
        else:
            result.panel.to_parquet(tmp, index=False)
    with atomic_file(sources_path) as tmp:
        neutralise(result.sources).to_csv(tmp, index=False)
    return out, sources_path
