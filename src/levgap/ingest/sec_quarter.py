"""One quarter of the SEC data sets in, every annual filing's statement values out.

:func:`extract_quarter` reads one quarter (sub.txt, pre.txt, tag.txt, num.txt, each
streamed) and returns, for each annual report it holds, the values of the panel's columns
for the report's own fiscal year and its comparatives, each with its source, statement,
date and flags (:class:`QuarterExtract`). It depends on no other quarter, so quarters run
in parallel processes (:mod:`levgap.ingest.sec`) and are combined afterwards
(:mod:`levgap.ingest.sec_years`).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from levgap.ingest.sec_debt import classify_lines, debt_from_tags, presented_debt
from levgap.ingest.sec_facts import (
    NUM_COLUMNS,
    FactFilter,
    choose_entity,
    filing_currency,
    fiscal_year_of_int,
    tidy_facts,
    wide_values,
    year_dates,
)
from levgap.ingest.sec_files import ReadLimits, locate_quarter, read_filtered
from levgap.ingest.sec_tags import (
    DEBT_TAGS,
    NEEDED_TAGS,
    PPE_GROSS,
    PUBLIC_FLOAT,
    Item,
    build_columns,
)

#: Forms an import may keep.
ANNUAL_FORMS: tuple[str, ...] = ("10-K", "10-K/A", "10-KT", "10-KT/A")
#: Annual reports of foreign private issuers: listed in the ledger, never read.
FOREIGN_FORMS: tuple[str, ...] = ("20-F", "20-F/A", "40-F", "40-F/A")

SUB_COLUMNS = ("adsh", "cik", "name", "sic", "form", "period", "fp", "filed", "accepted",
               "countryba")
PRE_COLUMNS = ("adsh", "report", "line", "stmt", "inpth", "tag", "version", "plabel",
               "negating")

#: Columns valued at the balance-sheet date; the others at the end of the year's flows.
INSTANT_COLUMNS: frozenset[str] = frozenset({
    "total_assets", "total_debt", "ppe_net", "book_equity", "cash", "current_assets",
    "current_liabilities", "total_liabilities", "retained_earnings", "lease_liabilities",
    "shares_outstanding", "public_float",
})
#: Columns of the extract's cells (schema columns plus the cover-page public float).
CELL_COLUMNS = ("adsh", "fiscal_year", "fact_date", "column", "value", "source", "statement",
                "flags")
CATEGORY_COLUMNS = ("adsh", "fact_date", "column", "source", "statement", "flags")
FILING_COLUMNS = ("quarter", "adsh", "firm_id", "name", "sic", "form", "period", "fp", "filed",
                  "accepted", "fiscal_year", "currency", "status", "detail", "flags")

_TAG_IN_LABEL = re.compile(r"(?:dei:|custom:)?[A-Z][A-Za-z0-9_]+")
_NET_LABEL = re.compile(r"\bnet\b", re.IGNORECASE)


@dataclass(frozen=True, slots=True)
class QuarterExtract:
    """What one quarter contributes to a panel.

    Parameters
    ----------
    filings : pandas.DataFrame
        One row per annual report of the quarter (``FILING_COLUMNS``): ``status`` is empty
        for a report whose values are in ``cells``, else the ledger reason it is left out
        (``detail`` says more); ``flags`` holds the filing's own flags.
    cells : pandas.DataFrame
        One row per value (``CELL_COLUMNS``): submission, fiscal year, the date of the
        fact (``YYYY-MM-DD``), panel column, value (in the filing's currency), the tag or
        formula, the statements that presented its tags and its flags.
    notes : tuple of str
        What the read had to work around.
    """

    filings: pd.DataFrame
    cells: pd.DataFrame
    notes: tuple[str, ...]


def extract_quarter(path: str | Path, *, forms: tuple[str, ...], index: int = 0,
                    limits: ReadLimits | None = None) -> QuarterExtract:
    """Statement values of every annual report in one quarter.

    Parameters
    ----------
    path : str or pathlib.Path
        A quarterly zip or its extracted folder.
    forms : tuple of str
        Forms kept (among ``ANNUAL_FORMS``); other annual forms go to the ledger.
    index : int, default=0
        Position of the quarter among those given (kept in ``filings.quarter``).
    limits : ReadLimits, optional

    Returns
    -------
    QuarterExtract

    Raises
    ------
    SchemaError
        When a file is missing, malformed or crosses a read limit.
    """
    q = locate_quarter(path, limits) if limits is not None else locate_quarter(path)
    notes: list[str] = []
    subs = _read_submissions(q, notes)
    filings = _classify(subs, forms, index)
    cand = filings.loc[filings["status"] == ""].copy()
    if cand.empty:
        return QuarterExtract(filings.reindex(columns=list(FILING_COLUMNS)), _no_cells(),
                              tuple(notes))
    adsh = cand["adsh"].tolist()
    pre = _read_pre(q, adsh, notes)
    hidden = _read_hidden(q, notes)
    bs_tags = pre.loc[pre["stmt"] == "BS", "tag"].unique().tolist()
    keep = FactFilter(adsh, [*NEEDED_TAGS, *bs_tags])
    table, report = read_filtered(q, "num", NUM_COLUMNS, keep, per="adsh")
    notes.extend(report.messages(q.where("num")))
    if hidden is not None and table.num_rows:
        keys = pc.binary_join_element_wise(table.column("tag"), table.column("version"), "|")
        table = table.filter(pc.invert(pc.is_in(keys, value_set=hidden)))
    facts = tidy_facts(table, notes)
    del table
    filings.loc[filings["adsh"].isin(keep.ifrs) & (filings["status"] == ""),
                ["status", "detail"]] = ["ifrs_filer", "facts in the IFRS taxonomy"]
    cand = filings.loc[filings["status"] == ""].copy()
    facts = facts.loc[facts["adsh"].isin(cand["adsh"])]
    facts, entity = choose_entity(facts, cand)
    unbalanced = entity.index[entity == "unbalanced"]
    filings.loc[filings["adsh"].isin(unbalanced), ["status", "detail"]] = [
        "no_consolidated_facts",
        "every total-assets fact carries a co-registrant, and the ParentCompany facts do "
        "not balance (assets differ from liabilities and equity)"]
    parent = set(entity.index[entity == "parent"])
    _add_flag(filings, filings["adsh"].isin(parent), "parent_company_facts")
    cand = filings.loc[filings["status"] == ""].copy()
    facts = facts.loc[facts["adsh"].isin(cand["adsh"])]
    currency = filing_currency(facts, cand)
    filings["currency"] = filings["adsh"].map(currency).fillna("USD")
    unit = facts["uom"].to_numpy()
    dated = facts.loc[(unit == facts["adsh"].map(currency).to_numpy()) | (unit == "shares")]
    dates = year_dates(dated, cand)
    wide, bs_long = wide_values(facts, dates, currency, cand, notes)
    cells = _cells(dates, wide, bs_long, pre, keep.outside_debt)
    _flag_missing_facts(filings, pre, facts, cand, notes, q.path.name)
    cells = _statements(cells, pre)
    on_bs = (cells["column"] == "total_debt") & cells["adsh"].isin(
        set(pre.loc[pre["stmt"] == "BS", "adsh"])) & (cells["statement"] == "")
    cells.loc[on_bs, "statement"] = "BS"
    # Text repeats across values (tags, formulas, dates, flags): categories keep the extract
    # small in the parent process that gathers every quarter's.
    cells = cells.reindex(columns=list(CELL_COLUMNS)).astype(
        {c: "category" for c in CATEGORY_COLUMNS})
    return QuarterExtract(filings.reindex(columns=list(FILING_COLUMNS)), cells, tuple(notes))


def _no_cells() -> pd.DataFrame:
    return pd.DataFrame({c: pd.Series(dtype=float if c == "value" else
                                      "int64" if c == "fiscal_year" else object)
                         for c in CELL_COLUMNS})


def _add_flag(frame: pd.DataFrame, mask: pd.Series, flag: str) -> None:
    old = frame.loc[mask, "flags"].astype(str)
    frame.loc[mask, "flags"] = np.where(old == "", flag, old + ";" + flag)


def _read_submissions(q, notes: list[str]) -> pd.DataFrame:  # type: ignore[no-untyped-def]
    wanted = pa.array([*ANNUAL_FORMS, *FOREIGN_FORMS], pa.string())

    def annual(batch: pa.RecordBatch) -> pa.Array:
        form = pc.utf8_upper(pc.utf8_trim_whitespace(batch.column(batch.schema.names.index(
            "form"))))
        return pc.is_in(form, value_set=wanted)

    table, report = read_filtered(q, "sub", SUB_COLUMNS, annual, max_rows=q.limits.submissions)
    notes.extend(report.messages(q.where("sub")))
    subs = pd.DataFrame({c: table.column(c).to_numpy(zero_copy_only=False).astype(object)
                         for c in SUB_COLUMNS})
    for c in SUB_COLUMNS:
        subs[c] = subs[c].map(lambda v: str(v).strip())
    return subs


def _classify(subs: pd.DataFrame, forms: tuple[str, ...], index: int) -> pd.DataFrame:
    f = subs.copy()
    f["quarter"] = index
    f["form"] = f["form"].str.upper()
    period = pd.to_numeric(f["period"], errors="coerce")
    good_period = period.notna() & (period >= 18000101) & (period <= 22001231)
    month, day = (period // 100) % 100, period % 100
    good_period &= month.between(1, 12) & day.between(1, 31)
    f["period"] = np.where(good_period, period.fillna(0), 0).astype("int64")
    cik = pd.to_numeric(f["cik"], errors="coerce")
    good_cik = cik.notna() & (cik > 0) & (cik < 1e10)
    f["firm_id"] = np.where(good_cik, cik.fillna(0).astype("int64").astype(str), "")
    f["fiscal_year"] = np.where(good_period, fiscal_year_of_int(f["period"].to_numpy()), -1)
    f["currency"] = ""
    f["flags"] = ""
    status = np.full(len(f), "", dtype=object)
    detail = np.full(len(f), "", dtype=object)
    fp = f["fp"].str.upper()

    def mark(mask: pd.Series | np.ndarray, reason: str, text: str | np.ndarray) -> None:
        m = np.asarray(mask, dtype=bool) & (status == "")
        status[m] = reason
        detail[m] = text if isinstance(text, str) else np.asarray(text, dtype=object)[m]

    mark(f["form"].isin(FOREIGN_FORMS), "foreign_private_issuer_form",
         "form " + f["form"].astype(str))
    mark(~good_cik, "bad_submission_row", "cik " + f["cik"].astype(str).str[:20])
    mark(~good_period, "bad_submission_row", "period " + f["period"].astype(str))
    mark(~f["form"].isin(forms), "form_not_selected", "form " + f["form"].astype(str))
    mark(~fp.isin(["FY", ""]), "not_fiscal_year_report", "fp " + fp.astype(str))
    f["status"] = status
    f["detail"] = detail
    return f.reset_index(drop=True)


def _read_pre(q, adsh: list[str], notes: list[str]) -> pd.DataFrame:  # type: ignore[no-untyped-def]
    empty = pd.DataFrame({
        "adsh": pd.Series(dtype=object), "report": pd.Series(dtype="int64"),
        "line": pd.Series(dtype="int64"), "stmt": pd.Series(dtype=object),
        "inpth": pd.Series(dtype=bool), "tag": pd.Series(dtype=object),
        "custom": pd.Series(dtype=bool), "label": pd.Series(dtype=object),
        "negating": pd.Series(dtype=bool), "liabilities": pd.Series(dtype=bool)})
    if "pre" not in q.members:
        return empty
    adsh_set = pa.array(adsh, pa.string())
    needed = pa.array(list(NEEDED_TAGS), pa.string())

    def keep(batch: pa.RecordBatch) -> pa.Array:
        names = batch.schema.names
        col = lambda c: batch.column(names.index(c))  # noqa: E731
        mine = pc.is_in(col("adsh"), value_set=adsh_set)
        stmt = pc.utf8_trim_whitespace(col("stmt"))
        bs = pc.and_(pc.equal(stmt, "BS"), pc.equal(pc.utf8_trim_whitespace(col("inpth")), "0"))
        flows = pc.and_(pc.is_in(stmt, value_set=pa.array(["BS", "IS", "CF"])),
                        pc.is_in(col("tag"), value_set=needed))
        return pc.and_(mine, pc.or_(bs, flows))

    table, report = read_filtered(q, "pre", PRE_COLUMNS, keep, per="adsh")
    notes.extend(report.messages(q.where("pre")))
    if not table.num_rows:
        return empty
    g = lambda c: table.column(c).to_numpy(zero_copy_only=False)  # noqa: E731
    version = table.column("version")
    pre = pd.DataFrame({
        "adsh": g("adsh").astype(object),
        "report": pd.to_numeric(pd.Series(g("report")), errors="coerce"),
        "line": pd.to_numeric(pd.Series(g("line")), errors="coerce"),
        "stmt": pd.Series(g("stmt")).str.strip().to_numpy(dtype=object),
        "inpth": pd.Series(g("inpth")).str.strip().eq("1").to_numpy(),
        "tag": g("tag").astype(object),
        "custom": pc.invert(pc.or_(pc.starts_with(version, "us-gaap/"),
                                   pc.starts_with(version, "dei/"))).to_numpy(
            zero_copy_only=False),
        "label": g("plabel").astype(object),
        "negating": pd.Series(g("negating")).str.strip().eq("1").to_numpy(),
    })
    pre = pre.loc[pre["report"].notna() & pre["line"].notna()]
    pre = pre.astype({"report": "int64", "line": "int64"})
    # The liabilities side of a balance sheet: the lines below its total-assets line (all
    # lines of a statement without one).
    bs = pre["stmt"] == "BS"
    first_assets = (pre.loc[bs & (pre["tag"] == "Assets") & ~pre["custom"]]
                    .groupby(["adsh", "report"])["line"].min().rename("_assets"))
    pre = pre.join(first_assets, on=["adsh", "report"])
    pre["liabilities"] = pre["_assets"].isna() | (pre["line"] > pre["_assets"])
    return pre.drop(columns="_assets").reset_index(drop=True)


def _read_hidden(q, notes: list[str]) -> pa.Array | None:  # type: ignore[no-untyped-def]
    """tag|version keys of needed tags that tag.txt marks custom or abstract."""
    if "tag" not in q.members:
        return None
    needed = pa.array(list(NEEDED_TAGS), pa.string())

    def keep(batch: pa.RecordBatch) -> pa.Array:
        names = batch.schema.names
        col = lambda c: batch.column(names.index(c))  # noqa: E731
        flagged = pc.or_(pc.equal(pc.utf8_trim_whitespace(col("custom")), "1"),
                         pc.equal(pc.utf8_trim_whitespace(col("abstract")), "1"))
        return pc.and_(pc.is_in(col("tag"), value_set=needed), flagged)

    table, report = read_filtered(q, "tag", ("tag", "version", "custom", "abstract"), keep)
    notes.extend(report.messages(q.where("tag")))
    return pc.binary_join_element_wise(table.column("tag"), table.column("version"), "|")


def _cells(dates: pd.DataFrame, wide: pd.DataFrame, bs_long: pd.DataFrame, pre: pd.DataFrame,
           outside: set[tuple[str, str]]) -> pd.DataFrame:
    rows = dates.reset_index(drop=True)
    n = len(rows)
    if not n:
        return _no_cells()
    bs_lines = pre.loc[(pre["stmt"] == "BS") & ~pre["inpth"]]
    has_bs = rows["bs_date"].to_numpy() > 0
    gross_net = bs_lines.loc[(bs_lines["tag"] == PPE_GROSS) & ~bs_lines["custom"]
                             & bs_lines["label"].astype(str).str.contains(_NET_LABEL), "adsh"]
    gross_is_net = rows["adsh"].isin(set(gross_net)).to_numpy()
    items = build_columns(wide.reset_index(drop=True), gross_is_net)
    outside_rows = {(a, int(fy)) for a, fy, d in rows[["adsh", "fiscal_year", "bs_date"]]
                    .itertuples(index=False) if (a, str(d)) in outside}
    presented = presented_debt(bs_lines, bs_long, rows[["adsh", "fiscal_year"]], outside_rows)
    with_lines = rows["adsh"].isin(set(bs_lines["adsh"])).to_numpy()
    fallback = debt_from_tags(wide.reset_index(drop=True))
    debt = Item(np.where(with_lines, presented.value, fallback.value),
                np.where(with_lines, presented.label, fallback.label).astype(object),
                np.where(with_lines, presented.flag, fallback.flag).astype(object))
    # A balance sheet whose total is missing (facts lost in the file) gets no debt either.
    items["total_debt"] = debt.where(~np.isnan(items["total_assets"].value))
    wide_pf = wide[PUBLIC_FLOAT].to_numpy(dtype=float)
    items["public_float"] = Item(wide_pf, np.where(np.isnan(wide_pf), "",
                                                   PUBLIC_FLOAT).astype(object),
                                 np.full(n, "", dtype=object))
    bs_date = _iso(rows["bs_date"].to_numpy())
    flow_date = _iso(rows["flow_date"].to_numpy())
    parts = []
    for name, it in items.items():
        instant = name in INSTANT_COLUMNS
        ok = ~np.isnan(it.value) & (has_bs if instant else rows["flow_date"].to_numpy() > 0)
        if name == "shares_outstanding":  # a weighted average is dated at the flows' end
            ok = ~np.isnan(it.value)
        date = bs_date if instant else flow_date
        if name == "shares_outstanding":
            date = np.where(has_bs, bs_date, flow_date)
        idx = np.flatnonzero(ok)
        parts.append(pd.DataFrame({
            "adsh": rows["adsh"].to_numpy()[idx], "fiscal_year": rows["fiscal_year"].to_numpy()[
                idx], "fact_date": date[idx], "column": name, "value": it.value[idx],
            "source": it.label[idx], "flags": it.flag[idx]}))
    cells = pd.concat(parts, ignore_index=True)
    cells["fiscal_year"] = cells["fiscal_year"].astype("int64")
    return cells


def _iso(dates: np.ndarray) -> np.ndarray:
    d = np.asarray(dates, dtype=np.int64)
    text = pd.Series(d.astype(str))
    iso = text.str[:4] + "-" + text.str[4:6] + "-" + text.str[6:8]
    return np.where(d > 0, iso, "").astype(object)


_STATEMENT_BITS = {"BS": 1, "BS*": 2, "CF": 4, "IS": 8}


def _statements(cells: pd.DataFrame, pre: pd.DataFrame) -> pd.DataFrame:
    """The statements on which the filing presented the tags of each value's formula."""
    cells = cells.copy()
    if pre.empty or cells.empty:
        cells["statement"] = ""
        return cells
    stmt = pre["stmt"].astype(str).to_numpy() + np.where(pre["inpth"], "*", "")
    bits = pd.Series(stmt).map(_STATEMENT_BITS).fillna(0).to_numpy(dtype="int64")
    tag = np.where(pre["custom"], "custom:" + pre["tag"].astype(str), pre["tag"].astype(str))
    p = pd.DataFrame({"adsh": pre["adsh"].to_numpy(), "tag": tag, "bits": bits})
    p = p.loc[p["bits"] > 0].drop_duplicates()
    # Each (adsh, tag) presented on several statements: OR of its bits (distinct powers of
    # two, so the sum of the distinct ones).
    p = p.groupby(["adsh", "tag"], sort=False)["bits"].sum().reset_index()
    tags = cells[["adsh"]].assign(tag=cells["source"].astype(str).str.findall(_TAG_IN_LABEL))
    tags = tags.explode("tag").dropna(subset=["tag"])
    tags = tags.reset_index().merge(p, on=["adsh", "tag"])
    tags = tags.drop_duplicates(["index", "bits"])
    mask = np.zeros(len(cells), dtype="int64")
    if len(tags):
        pos = cells.index.get_indexer(tags["index"])
        np.bitwise_or.at(mask, pos, tags["bits"].to_numpy(dtype="int64"))
    names = {m: ";".join(k for k, b in sorted(_STATEMENT_BITS.items()) if m & b)
             for m in range(16)}
    cells["statement"] = pd.Series(mask).map(names).to_numpy(dtype=object)
    return cells


def _flag_missing_facts(filings: pd.DataFrame, pre: pd.DataFrame, facts: pd.DataFrame,
                        cand: pd.DataFrame, notes: list[str], where: str) -> None:
    """Flag filings that present a line of interest that has no fact in num.txt."""
    if pre.empty:
        return
    interest = pre["tag"].isin(list(NEEDED_TAGS)) | pre["tag"].isin(list(DEBT_TAGS))
    interest &= ~pre["custom"]
    bs = ((pre["stmt"] == "BS") & ~pre["inpth"]).to_numpy()
    if bs.any():  # filer-defined balance-sheet lines counted as debt by their labels
        interest.loc[bs] |= classify_lines(pre.loc[bs]).debt
    lines = pre.loc[interest & pre["adsh"].isin(cand["adsh"]),
                    ["adsh", "tag"]].drop_duplicates()
    have = facts[["adsh", "tag"]].drop_duplicates().assign(_f=True)
    m = lines.merge(have, on=["adsh", "tag"], how="left")
    lost = m.loc[m["_f"].isna()]
    if lost.empty:
        return
    by = lost.groupby("adsh")["tag"].agg(lambda s: ", ".join(sorted(s)[:3]))
    _add_flag(filings, filings["adsh"].isin(by.index), "statement_facts_missing")
    first = by.index[0]
    notes.append(
        f"{where}: {len(by)} filings present statement lines with no fact in num.txt (lost "
        f"in the file; those values are missing, e.g. adsh {first}: {by.iloc[0]})."
    )
