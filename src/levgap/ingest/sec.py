"""Build a schema-v1 peer panel from the SEC's Financial Statement Data Sets.

The U.S. Securities and Exchange Commission publishes every filer's XBRL statement facts as
quarterly bulk files (``sub.txt`` one row per submission, ``num.txt`` one row per fact,
``pre.txt`` how each filing presented its statements). :func:`import_sec` turns any number
of quarters into one row per firm and fiscal year, records for every number the tag or
formula, filing, date and statement it came from, and lists every firm-year filed but not
in the panel with a reason.

The rules live beside the code that applies them:

* reading, layouts and the limits on hostile files: :mod:`levgap.ingest.sec_files`;
* submissions kept, entity, currency, fiscal years of facts, cover page:
  :mod:`levgap.ingest.sec_facts` and :mod:`levgap.ingest.sec_quarter` (10-K, 10-K/A,
  10-KT as asked, ``fp`` FY or empty; 20-F and 40-F to the ledger);
* debt from the balance sheet as presented: :mod:`levgap.ingest.sec_debt`;
* the other columns: :mod:`levgap.ingest.sec_tags`;
* several years, restated or first filed, item by item: :mod:`levgap.ingest.sec_years`;
* market equity and currencies: :mod:`levgap.ingest.sec_market`;
* subsidiaries and industries: :mod:`levgap.ingest.sec_ledger`.

Fiscal year
    The calendar year of the balance-sheet date, except that dates in January to May count
    as the previous year (a fiscal year ending 31 January 2010 is fiscal 2009). This is the
    convention of the common research databases (common practice; recalled from memory, not
    re-read).
Identifiers
    ``firm_id`` is the CIK as text without leading zeros; ``firm_name`` and ``industry``
    (``sic`` as four-digit text, missing when empty or 0) are those of the firm's latest
    filing; ``industry_name`` is the SEC's title of the SIC code
    (:func:`levgap.industries.sic_title`).
Units
    Money as filed (``currency``; U.S. dollars unless an exchange-rate file admits another
    currency, with ``fx_rate`` to U.S. dollars); shares in shares.
"""

from __future__ import annotations

import os
import re
from collections.abc import Sequence
from concurrent.futures import ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass
from multiprocessing import get_context
from pathlib import Path

import numpy as np
import pandas as pd

from levgap.errors import ConfigError
from levgap.ingest.sec_facts import fiscal_year_of
from levgap.ingest.sec_files import DEFAULT_LIMITS, ReadLimits
from levgap.ingest.sec_ledger import find_subsidiaries, industry_ranges, ledger_lines
from levgap.ingest.sec_market import (
    MARKET_EQUITY_SOURCES,
    market_equity,
    match_by_date,
    read_fx_rates,
    read_prices,
)
from levgap.ingest.sec_quarter import (
    ANNUAL_FORMS,
    FOREIGN_FORMS,
    QuarterExtract,
    extract_quarter,
)
from levgap.ingest.sec_years import LEDGER_COLUMNS, SOURCE_COLUMNS, assemble
from levgap.schema import BY_NAME, COLUMNS

__all__ = [
    "DEFAULT_EXCLUDE_SIC",
    "LEDGER_COLUMNS",
    "MARKET_EQUITY_SOURCES",
    "PANEL_COLUMNS",
    "SOURCE_COLUMNS",
    "SecImport",
    "fiscal_year_of",
    "import_sec",
    "parse_sic_ranges",
    "read_fx_rates",
    "read_prices",
    "write_sec_import",
]

#: SIC ranges left out unless the caller says otherwise: financials and utilities, whose
#: balance sheets answer to regulators (common practice in leverage studies).
DEFAULT_EXCLUDE_SIC = "6000-6999,4900-4999"

#: Inputs (zips or folders, bytes in all) from which quarters are read in parallel processes
#: by default.
PARALLEL_FROM_BYTES = 64 << 20

#: Panel columns: schema v1 in its order, then the import's own columns.
PANEL_COLUMNS: tuple[str, ...] = (
    *(c.name for c in COLUMNS), "industry_name", "market_equity_source", "import_flags",
)
_VALUE_COLUMNS = tuple(c.name for c in COLUMNS if c.kind == "number" and c.name != "fx_rate")

_SIC_ITEM = re.compile(r"^\s*(\d{1,4})\s*(?:-\s*(\d{1,4})\s*)?$")


@dataclass(frozen=True, slots=True)
class SecImport:
    """A peer panel built from the SEC data sets, with its audit trail and ledger.

    Parameters
    ----------
    panel : pandas.DataFrame
        One row per firm and fiscal year (``PANEL_COLUMNS``): schema v1, then
        ``industry_name``, ``market_equity_source`` (``"price_file"``,
        ``"public_float_proxy"`` or missing) and ``import_flags`` (``;``-joined codes of
        :data:`levgap.codes.SEC_FLAGS`).
    sources : pandas.DataFrame
        One row per number of the panel (``SOURCE_COLUMNS``): the tag or formula, the
        filing (``adsh``, form, period, filed), the date of the fact, whether it is the
        filing's own year or a comparative, the statements that presented it, its flags.
    excluded : pandas.DataFrame
        The import ledger (``LEDGER_COLUMNS``): each firm-year filed but not in the panel,
        with a reason code of :data:`levgap.codes.SEC_REASONS`.
    warnings : tuple of str
        What the import had to work around or leave out, one line each.
    """

    panel: pd.DataFrame
    sources: pd.DataFrame
    excluded: pd.DataFrame
    warnings: tuple[str, ...]

    @property
    def n_excluded_firms(self) -> int:
        """Firms with at least one firm-year in the ledger."""
        return int(self.excluded["firm_id"].nunique())

    def excluded_by_reason(self) -> dict[str, int]:
        """Ledger firm-years per reason code, most frequent first."""
        counts = self.excluded["reason"].value_counts()
        return {str(k): int(v) for k, v in counts.items()}

    def tidy(self) -> pd.DataFrame:
        """The panel (the table every later step reads)."""
        return self.panel

    def _repr_html_(self) -> str:
        from html import escape

        head = (f"<p>SEC import: {len(self.panel)} firm-years, {len(self.sources)} sourced "
                f"values, {len(self.excluded)} firm-years in the ledger, "
                f"{len(self.warnings)} notes.</p>")
        notes = "".join(f"<li>{escape(w)}</li>" for w in self.warnings)
        return head + (f"<ul>{notes}</ul>" if notes else "") + self.panel.head(10).to_html()


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
    ranges: list[tuple[int, int]] = []
    for item in str(text).split(","):
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


def import_sec(
    paths: Sequence[str | Path],
    *,
    forms: Sequence[str] = ("10-K",),
    restated: bool = True,
    prices: str | Path | None = None,
    exclude_sic: str | None = DEFAULT_EXCLUDE_SIC,
    fx_rates: str | Path | None = None,
    drop_subsidiaries: bool = False,
    workers: int | None = None,
    limits: ReadLimits = DEFAULT_LIMITS,
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
        For each firm, year and column keep the latest filed figure (restated);
        ``False`` keeps the first filed.
    prices : str or pathlib.Path, optional
        Price file (see :func:`read_prices`) for market equity; without it the cover-page
        public float serves as a flagged proxy.
    exclude_sic : str or None, default="6000-6999,4900-4999"
        SIC ranges to leave out (financials and utilities by default); ``None`` keeps every
        industry.
    fx_rates : str or pathlib.Path, optional
        Exchange-rate file (see :func:`read_fx_rates`); without it filers reporting in
        another currency than U.S. dollars are left out (ledger).
    drop_subsidiaries : bool, default=False
        Leave out (rather than flag) firm-years whose total assets equal another filer's.
    workers : int, optional
        Processes reading quarters in parallel (each holds one quarter at a time); default:
        one for inputs under 64 MB in all, else the smaller of the number of quarters and
        of CPUs.
    limits : ReadLimits, default=DEFAULT_LIMITS
        Bounds on what a quarter may make the importer read (hostile files).

    Returns
    -------
    SecImport

    Raises
    ------
    ConfigError
        On an unknown form, no paths, a bad SIC range string or a bad worker count.
    SchemaError
        When a quarter lacks ``sub.txt`` or ``num.txt`` or a required column, cannot be
        parsed, crosses a read limit, or the price or exchange-rate file is malformed.
    """
    forms_t = _check_forms(forms)
    if isinstance(paths, str | Path):
        paths = [paths]
    paths = [Path(p) for p in paths]
    if not paths:
        raise ConfigError(
            "paths must name at least one SEC quarter (zip or folder); got none. Give e.g. "
            "2010q1.zip."
        )
    ranges = parse_sic_ranges(exclude_sic) if exclude_sic is not None else ()
    price_table = read_prices(prices) if prices is not None else None
    fx_table = read_fx_rates(fx_rates) if fx_rates is not None else None
    notes: list[str] = []
    paths = _once(paths, notes)
    extracts = _extract_all(paths, forms_t, limits, workers)
    currency_out = _currency_exclusions(extracts, fx_table)
    assembled = assemble(extracts, restated=restated, excluded_filings=currency_out)
    notes.extend(assembled.notes)
    rows = assembled.rows
    ledger = [assembled.ledger]
    sources = assembled.sources
    rows, fx_ledger = _apply_fx(rows, fx_table)
    ledger.append(fx_ledger)
    rows, extra = market_equity(_with_columns(rows), price_table)
    rows = _float_in_currency(rows)
    sources = _extra_sources(sources, rows, extra)
    rows, sources, sub_ledger = _subsidiaries(rows, sources, drop_subsidiaries)
    ledger.append(sub_ledger)
    rows, industry_ledger = _filter_industries(rows, ranges)
    ledger.append(industry_ledger)
    panel = _panel(rows)
    sources = _order_sources(sources, panel)
    excluded = _order_ledger(pd.concat([x for x in ledger if len(x)] or [ledger[0]],
                                       ignore_index=True))
    if panel.empty and excluded.empty:
        notes.append(f"The quarters given hold no annual report ({', '.join(ANNUAL_FORMS)}, "
                     f"{', '.join(FOREIGN_FORMS)}): only other forms, or no submission at "
                     "all; the panel is empty.")
    else:
        _coverage_notes(panel, notes)
    return SecImport(panel=panel, sources=sources, excluded=excluded, warnings=tuple(notes))


def _once(paths: list[Path], notes: list[str]) -> list[Path]:
    """The paths given, each file or folder once (the same quarter given twice is read once;
    a zip and its extracted folder are two paths whose submissions are read once later)."""
    seen: dict[Path, Path] = {}
    for p in paths:
        try:
            key = p.resolve()
        except (OSError, RuntimeError):
            key = p
        if key in seen:
            notes.append(f"{p} was given more than once; it was read once.")
            continue
        seen[key] = p
    return list(seen.values())


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


def _extract_all(paths: list[Path], forms: tuple[str, ...], limits: ReadLimits,
                 workers: int | None) -> list[QuarterExtract]:
    if workers is not None and (not isinstance(workers, int) or workers < 1):
        raise ConfigError(f"workers must be a whole number >= 1; got {workers!r}. Use e.g. 2.")
    if workers is None:  # starting a process costs seconds: worth it for big quarters only
        big = sum(_size(p) for p in paths) >= PARALLEL_FROM_BYTES
        workers = min(len(paths), os.cpu_count() or 1) if big else 1
    n = max(1, min(workers, len(paths)))
    if n == 1:
        return [extract_quarter(p, forms=forms, index=i, limits=limits)
                for i, p in enumerate(paths)]
    # One fresh process per quarter (spawned, not forked: pyarrow's threads do not survive a
    # fork), so each quarter's memory is returned to the system when it is done. A process
    # that cannot be spawned (a main program read from standard input) falls back to one.
    try:
        with ProcessPoolExecutor(max_workers=n, mp_context=get_context("spawn"),
                                 max_tasks_per_child=1) as pool:
            futures = [pool.submit(extract_quarter, p, forms=forms, index=i, limits=limits)
                       for i, p in enumerate(paths)]
            return [f.result() for f in futures]
    except BrokenProcessPool:
        return [extract_quarter(p, forms=forms, index=i, limits=limits)
                for i, p in enumerate(paths)]


def _size(path: Path) -> int:
    if path.is_file():
        return path.stat().st_size
    if path.is_dir():
        return sum(f.stat().st_size for f in path.iterdir() if f.is_file())
    return 0


def _currency_exclusions(extracts: list[QuarterExtract], fx: pd.DataFrame | None) -> pd.Series:
    filings = pd.concat([e.filings for e in extracts], ignore_index=True)
    foreign = filings.loc[(filings["status"] == "") & (filings["currency"] != "USD")
                          & (filings["currency"] != "")].drop_duplicates("adsh")
    if fx is not None:
        return pd.Series(dtype=object)
    return pd.Series("non_usd_currency", index=foreign["adsh"].to_numpy(), dtype=object)


def _apply_fx(rows: pd.DataFrame, fx: pd.DataFrame | None) -> tuple[pd.DataFrame, pd.DataFrame]:
    rows = rows.copy()
    rows["fx_rate"] = np.nan
    foreign = (rows["currency"] != "USD").to_numpy()
    if fx is None or not foreign.any():
        return rows, pd.DataFrame(columns=list(LEDGER_COLUMNS))
    rate, _ = match_by_date(rows.loc[foreign, "currency"], rows.loc[foreign, "row_date"], fx,
                            "currency", "rate")
    rows.loc[foreign, "fx_rate"] = rate
    missing = foreign & rows["fx_rate"].isna().to_numpy()
    out = ledger_lines(rows.loc[missing], "no_fx_rate",
                       "currency " + rows.loc[missing, "currency"].astype(str))
    return rows.loc[~missing].reset_index(drop=True), out


def _with_columns(rows: pd.DataFrame) -> pd.DataFrame:
    rows = rows.copy()
    for c in (*_VALUE_COLUMNS, "public_float"):
        if c not in rows.columns:
            rows[c] = np.nan
    return rows


def _float_in_currency(rows: pd.DataFrame) -> pd.DataFrame:
    """The public float is filed in U.S. dollars: restate it in the row's currency."""
    proxy = (rows["market_equity_source"] == "public_float_proxy").to_numpy() & (
        rows["currency"] != "USD").to_numpy()
    if proxy.any():
        rows = rows.copy()
        rate = rows["fx_rate"].to_numpy(dtype=float)
        rows.loc[proxy, "market_equity"] = rows.loc[proxy, "market_equity"] / rate[proxy]
    return rows


def _extra_sources(sources: pd.DataFrame, rows: pd.DataFrame, extra: pd.DataFrame
                   ) -> pd.DataFrame:
    if extra.empty:
        return sources
    pick = rows.iloc[extra["row"].to_numpy()]
    own = pick["own_adsh"].astype(str).to_numpy()
    meta = sources.drop_duplicates("adsh").set_index("adsh")
    add = pd.DataFrame({
        "firm_id": pick["firm_id"].to_numpy(), "fiscal_year": pick["fiscal_year"].to_numpy(),
        "column": extra["column"].to_numpy(), "source": extra["source"].to_numpy(),
        "adsh": own,
        "form": pd.Series(own).map(meta["form"]).fillna("").to_numpy(dtype=object),
        "period": pd.Series(own).map(meta["period"]).fillna("").to_numpy(dtype=object),
        "filed": pd.Series(own).map(meta["filed"]).fillna("").to_numpy(dtype=object),
        "fact_date": pick["row_date"].to_numpy(), "role": "own year", "statement": "",
        "flags": "",
    })
    proxy = add["source"].str.contains("Public").to_numpy()
    add.loc[proxy, "statement"] = "cover page"
    add.loc[~proxy & (add["column"] == "share_price"), "adsh"] = ""
    return pd.concat([sources, add], ignore_index=True)


def _subsidiaries(rows: pd.DataFrame, sources: pd.DataFrame, drop: bool
                  ) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    flagged, parent = find_subsidiaries(rows)
    if not flagged.any():
        return rows, sources, pd.DataFrame(columns=list(LEDGER_COLUMNS))
    rows = rows.copy()
    detail = pd.Series(parent[flagged], index=rows.index[flagged])
    detail = "total assets equal CIK " + detail + "'s at " + rows.loc[flagged, "row_date"]
    if drop:
        out = ledger_lines(rows.loc[flagged], "subsidiary_duplicate", detail)
        rows = rows.loc[~flagged].reset_index(drop=True)
        return rows, sources, out
    old = rows.loc[flagged, "flags"].astype(str)
    rows.loc[flagged, "flags"] = np.where(old == "", "subsidiary_duplicate",
                                          old + ";subsidiary_duplicate")
    note = pd.DataFrame({
        "firm_id": rows.loc[flagged, "firm_id"].to_numpy(),
        "fiscal_year": rows.loc[flagged, "fiscal_year"].to_numpy(),
        "column": "import_flags", "source": "subsidiary_duplicate: " + detail.to_numpy(),
        "adsh": rows.loc[flagged, "own_adsh"].to_numpy(), "form": "", "period": "",
        "filed": "", "fact_date": rows.loc[flagged, "row_date"].to_numpy(), "role": "",
        "statement": "BS", "flags": "subsidiary_duplicate",
    })
    return rows, pd.concat([sources, note], ignore_index=True), pd.DataFrame(
        columns=list(LEDGER_COLUMNS))


def _filter_industries(rows: pd.DataFrame, ranges: tuple[tuple[int, int], ...]
                       ) -> tuple[pd.DataFrame, pd.DataFrame]:
    rows = rows.copy()
    sic = rows["industry"].astype(str).str.strip()
    number = pd.to_numeric(sic, errors="coerce")
    rows["industry"] = sic.where(sic.str.fullmatch(r"\d+") & (number > 0)).str.zfill(4)
    matched = industry_ranges(rows, ranges)
    out = matched != ""
    ledger = ledger_lines(rows.loc[out], "excluded_industry",
                          "SIC " + rows.loc[out, "industry"].astype(str) + " in "
                          + pd.Series(matched[out], index=rows.index[out]))
    return rows.loc[~out].reset_index(drop=True), ledger


def _panel(rows: pd.DataFrame) -> pd.DataFrame:
    from levgap.industries import sic_title

    order = np.lexsort((rows["fiscal_year"].to_numpy(),
                        pd.to_numeric(rows["firm_id"], errors="coerce").to_numpy()))
    rows = rows.iloc[order].reset_index(drop=True)
    panel = pd.DataFrame(index=rows.index)
    for c in PANEL_COLUMNS:
        if c == "industry_name":
            panel[c] = rows["industry"].map(lambda s: sic_title(s) if isinstance(s, str)
                                            else None).astype(object)
        elif c == "import_flags":
            panel[c] = rows["flags"].astype(object)
        elif c in rows.columns:
            panel[c] = rows[c]
        else:
            panel[c] = np.nan
    panel = panel.astype({
        "firm_id": object, "industry": object, "firm_name": object, "currency": object,
        "market_equity_source": object, "industry_name": object, "import_flags": object,
        "fiscal_year": "int64",
        **{c: float for c in PANEL_COLUMNS if c in BY_NAME and BY_NAME[c].kind == "number"},
    })
    panel["market_equity_source"] = panel["market_equity_source"].where(
        panel["market_equity_source"].notna(), None)
    return panel


def _order_sources(sources: pd.DataFrame, panel: pd.DataFrame) -> pd.DataFrame:
    keys = pd.MultiIndex.from_frame(panel[["firm_id", "fiscal_year"]])
    rank = pd.Series(np.arange(len(panel)), index=keys)
    s = sources.reindex(columns=list(SOURCE_COLUMNS))
    pos = pd.MultiIndex.from_frame(s[["firm_id", "fiscal_year"]].astype(
        {"firm_id": object, "fiscal_year": "int64"}))
    r = rank.reindex(pos).to_numpy()
    s = s.loc[~np.isnan(r)].assign(_r=r[~np.isnan(r)])
    col_rank = {c: i for i, c in enumerate(PANEL_COLUMNS)}
    s = s.assign(_c=s["column"].map(col_rank)).sort_values(["_r", "_c"], kind="stable")
    s = s.drop(columns=["_r", "_c"]).reset_index(drop=True)
    s = s.astype({c: object for c in SOURCE_COLUMNS if c != "fiscal_year"})
    s["fiscal_year"] = s["fiscal_year"].astype("int64")
    return s


def _order_ledger(ledger: pd.DataFrame) -> pd.DataFrame:
    ledger = ledger.reindex(columns=list(LEDGER_COLUMNS))
    if ledger.empty:
        return ledger.astype({c: object for c in LEDGER_COLUMNS if c != "fiscal_year"}
                             ).astype({"fiscal_year": "int64"})
    cik = pd.to_numeric(ledger["firm_id"], errors="coerce").fillna(-1).to_numpy()
    order = np.lexsort((ledger["fiscal_year"].to_numpy(), cik))
    ledger = ledger.iloc[order].reset_index(drop=True)
    sic = ledger["industry"].astype(object).where(ledger["industry"].notna(), "").astype(str)
    ledger["industry"] = np.where(sic.str.fullmatch(r"\d+") & (sic != "0"), sic.str.zfill(4),
                                  None)
    ledger = ledger.astype({c: object for c in LEDGER_COLUMNS if c != "fiscal_year"})
    ledger["fiscal_year"] = ledger["fiscal_year"].astype("int64")
    return ledger


def _coverage_notes(panel: pd.DataFrame, notes: list[str]) -> None:
    if panel.empty:
        notes.append("No annual submission matched the forms asked for; the panel is empty.")
        return
    no_sic = int(panel["industry"].isna().sum())
    if no_sic:
        notes.append(f"{no_sic} firm-years have no SIC code in sub.txt (industry missing).")
    for col in _VALUE_COLUMNS:
        spec = BY_NAME[col]
        if spec.minimum is None:
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


def write_sec_import(result: SecImport, out_path: str | Path) -> tuple[Path, Path, Path]:
    """Write the panel, its sources and its ledger beside it, each atomically.

    Parameters
    ----------
    result : SecImport
    out_path : str or pathlib.Path
        ``PANEL.csv`` or ``PANEL.parquet``; the sources go to ``PANEL.sources.csv`` and the
        ledger to ``PANEL.excluded.csv``.

    Returns
    -------
    (pathlib.Path, pathlib.Path, pathlib.Path)
        The panel, sources and ledger files.

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
    excluded_path = out.with_name(out.stem + ".excluded.csv")
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
    with atomic_file(excluded_path) as tmp:
        neutralise(result.excluded).to_csv(tmp, index=False)
    return out, sources_path, excluded_path
