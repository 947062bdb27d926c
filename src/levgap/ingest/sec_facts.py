"""Facts of one quarter: which to read, whose they are, and which fiscal year each belongs to.

Rules
-----
Entity
    The consolidated entity's facts are those with an empty ``coreg`` and no segment. A
    filing that has no such total-assets fact at its period end (a multi-registrant filing
    whose consolidated figures all sit under ``coreg = ParentCompany``) uses its
    ``ParentCompany`` facts when they balance (total assets equal total liabilities and
    equity), flagged ``parent_company_facts``; otherwise it is left out (ledger reason
    ``no_consolidated_facts``).
Currency
    The unit of the filing's total-assets fact at its period end (USD for almost every
    10-K); only money facts in that unit are read (shares for share counts).
Fiscal years
    A fact's fiscal year is that of its date (``ddate``), by the rule of
    :func:`fiscal_year_of`. A 10-K reports its own year (the balance sheet at the period
    end, flows of four quarters ending then) and comparatives: the balance sheet one year
    earlier and the flows of the two years before. For each of these fiscal years the
    latest date that falls in it (on or before the period end) is that year's
    balance-sheet date, and likewise for flows; the own year's dates must equal the
    period end.
Cover page
    ``dei:EntityCommonStockSharesOutstanding`` on the latest cover date on or after the
    period end, summed over share classes (facts with no segment; in the current layout,
    when there are none, facts whose only segment is a class of stock); a sum of zero is
    treated as missing. ``dei:EntityPublicFloat`` on the latest date on or before the
    period end. Both belong to the filing's own year only.
"""

from __future__ import annotations

import re
from collections.abc import Callable

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from levgap.ingest.sec_tags import COVER_SHARES, DEBT_TAGS, DEI_TAGS, PUBLIC_FLOAT, TAG_KINDS

#: Period-end months counted in the previous fiscal year (January to May).
LAST_MONTH_OF_PREVIOUS_YEAR = 5

#: Columns read from num.txt.
NUM_COLUMNS = ("adsh", "tag", "version", "ddate", "qtrs", "uom", "segments", "coreg", "value")

PARENT = "ParentCompany"
_PARENT_SEGMENT = "LegalEntity=ParentCompany;"
_CLASS_SEGMENT = re.compile(r"^(ClassOfStock|StatementClassOfStockAxis)=[^;]*;?$")


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


def fiscal_year_of_int(yyyymmdd: np.ndarray) -> np.ndarray:
    """:func:`fiscal_year_of` on dates written as integers ``YYYYMMDD``."""
    d = np.asarray(yyyymmdd, dtype=np.int64)
    year = d // 10000
    month = (d // 100) % 100
    return (year - (month <= LAST_MONTH_OF_PREVIOUS_YEAR)).astype(np.int64)


class FactFilter:
    """Block filter of num.txt, and what it saw on the way.

    Keeps the facts of the chosen submissions whose tag is wanted, with a value, for the
    consolidated entity or its ``ParentCompany`` co-registrant, annual or instant
    (``qtrs`` 0 or 4). Records on the way the submissions that use the IFRS taxonomy and
    the (submission, date) pairs with debt facts outside the consolidated statements.

    Parameters
    ----------
    adsh : sequence of str
        Submissions to keep.
    tags : sequence of str
        Tags to keep (standard and filer-defined).
    """

    def __init__(self, adsh: list[str], tags: list[str]) -> None:
        self._adsh = pa.array(adsh, pa.string())
        self._tags = pa.array(sorted(set(tags)), pa.string())
        self._debt = pa.array(sorted(DEBT_TAGS), pa.string())
        self.ifrs: set[str] = set()
        self.outside_debt: set[tuple[str, str]] = set()

    def __call__(self, batch: pa.RecordBatch) -> pa.Array:
        names = batch.schema.names
        col: Callable[[str], pa.Array] = lambda c: batch.column(names.index(c))  # noqa: E731
        mine = pc.is_in(col("adsh"), value_set=self._adsh)
        ifrs = pc.and_(mine, pc.starts_with(col("version"), "ifrs"))
        if pc.any(ifrs).as_py():
            self.ifrs.update(pc.unique(col("adsh").filter(ifrs)).to_pylist())
        coreg = col("coreg")
        segments = col("segments") if "segments" in names else None
        plain = pc.equal(coreg, "")
        if segments is not None:
            plain = pc.and_(plain, pc.equal(segments, ""))
        debt = pc.and_(mine, pc.is_in(col("tag"), value_set=self._debt))
        outside = pc.and_(debt, pc.invert(plain))
        if segments is not None:  # the parent co-registrant's own facts are not "outside"
            outside = pc.and_(outside, pc.not_equal(segments, _PARENT_SEGMENT))
        if pc.any(outside).as_py():
            pairs = pa.table({"a": col("adsh").filter(outside), "d": col("ddate").filter(outside)})
            for key in pc.unique(pc.binary_join_element_wise(pairs["a"], pairs["d"], "|")
                                 ).to_pylist():
                a, d = key.split("|", 1)
                self.outside_debt.add((a, d))
        keep = pc.and_(mine, pc.is_in(col("tag"), value_set=self._tags))
        keep = pc.and_(keep, pc.not_equal(col("value"), ""))
        keep = pc.and_(keep, pc.is_in(col("qtrs"), value_set=pa.array(["0", "4"])))
        entity = pc.or_(pc.equal(coreg, ""), pc.equal(coreg, PARENT))
        if segments is not None:
            entity_seg = pc.or_(pc.equal(segments, ""), pc.equal(segments, _PARENT_SEGMENT))
            cover = pc.equal(col("tag"), DEI_TAGS[0])
            entity = pc.and_(entity, pc.or_(entity_seg, cover))
        return pc.and_(keep, entity)


def tidy_facts(table: pa.Table, notes: list[str]) -> pd.DataFrame:
    """Typed, compact facts: one row per fact kept.

    Returns
    -------
    pandas.DataFrame
        ``adsh`` (str), ``tag`` (str), ``custom`` (bool: not a us-gaap or dei tag),
        ``dei`` (bool), ``ddate`` (int ``YYYYMMDD``), ``qtrs`` (int), ``uom`` (str),
        ``parent`` (bool: a ParentCompany fact), ``class_segment`` (bool), ``value``.
    """
    if not table.num_rows:
        return pd.DataFrame({
            "adsh": pd.Series(dtype=object), "tag": pd.Series(dtype=object),
            "custom": pd.Series(dtype=bool), "dei": pd.Series(dtype=bool),
            "ddate": pd.Series(dtype="int64"), "qtrs": pd.Series(dtype="int64"),
            "uom": pd.Series(dtype=object), "parent": pd.Series(dtype=bool),
            "class_segment": pd.Series(dtype=bool), "value": pd.Series(dtype=float)})
    version = table.column("version")
    frame = pd.DataFrame({
        "adsh": table.column("adsh").to_numpy(zero_copy_only=False).astype(object),
        "tag": table.column("tag").to_numpy(zero_copy_only=False).astype(object),
        "custom": pc.invert(pc.or_(pc.starts_with(version, "us-gaap/"),
                                   pc.starts_with(version, "dei/"))).to_numpy(
            zero_copy_only=False),
        "dei": pc.starts_with(version, "dei/").to_numpy(zero_copy_only=False),
        "ddate": pd.to_numeric(pd.Series(table.column("ddate").to_numpy(zero_copy_only=False)),
                               errors="coerce"),
        "qtrs": pd.to_numeric(pd.Series(table.column("qtrs").to_numpy(zero_copy_only=False)),
                              errors="coerce"),
        "uom": table.column("uom").to_numpy(zero_copy_only=False).astype(object),
        "parent": pc.equal(table.column("coreg"), PARENT).to_numpy(zero_copy_only=False),
        "segments": table.column("segments").to_numpy(zero_copy_only=False).astype(object),
        "value": pd.to_numeric(pd.Series(table.column("value").to_numpy(zero_copy_only=False)),
                               errors="coerce"),
    })
    bad = frame["value"].isna() | frame["ddate"].isna() | frame["qtrs"].isna()
    if bad.any():
        notes.append(f"{int(bad.sum())} facts with a non-numeric value or date were not used.")
        frame = frame.loc[~bad]
    seg = frame["segments"].astype(str)
    frame["class_segment"] = seg.str.match(_CLASS_SEGMENT)
    frame["parent"] = frame["parent"].to_numpy(dtype=bool) | (seg == _PARENT_SEGMENT).to_numpy()
    # A ParentCompany fact has the legal-entity segment (current layout) or none (old layout);
    # a plain fact has neither; the cover share count may also carry a class of stock.
    frame = frame.loc[(seg == "") | (seg == _PARENT_SEGMENT) | frame["class_segment"]]
    frame = frame.drop(columns="segments")
    frame["ddate"] = frame["ddate"].astype("int64")
    frame["qtrs"] = frame["qtrs"].astype("int64")
    return frame.reset_index(drop=True)


def choose_entity(facts: pd.DataFrame, filings: pd.DataFrame) -> tuple[pd.DataFrame, pd.Series]:
    """Keep, per filing, the facts of the consolidated entity (or of its ParentCompany).

    Parameters
    ----------
    facts : pandas.DataFrame
        From :func:`tidy_facts`.
    filings : pandas.DataFrame
        ``adsh`` and ``period`` (int ``YYYYMMDD``) of the filings.

    Returns
    -------
    facts : pandas.DataFrame
        The chosen entity's facts (the ``parent`` column dropped).
    entity : pandas.Series of str, indexed by adsh
        ``"plain"``, ``"parent"`` (balanced ParentCompany facts), ``"unbalanced"``
        (ParentCompany facts that do not balance: nothing kept) or ``"none"``.
    """
    period = filings.set_index("adsh")["period"]
    at_end = facts["ddate"].to_numpy() == facts["adsh"].map(period).fillna(0).to_numpy(
        dtype="int64")
    totals = facts.loc[at_end & facts["tag"].isin(["Assets", "LiabilitiesAndStockholdersEquity"])
                       & ~facts["custom"] & (facts["qtrs"] == 0)]
    plain_ok = set(totals.loc[~totals["parent"], "adsh"])
    par = totals.loc[totals["parent"]].drop_duplicates(["adsh", "tag"])
    wide = par.pivot(index="adsh", columns="tag", values="value")
    balanced: set[str] = set()
    unbalanced: set[str] = set()
    if {"Assets", "LiabilitiesAndStockholdersEquity"} <= set(wide.columns):
        a = wide["Assets"]
        le = wide["LiabilitiesAndStockholdersEquity"]
        ok = (a - le).abs() <= 0.5 + 1e-9 * a.abs()
        balanced = set(wide.index[ok.fillna(False)])
        unbalanced = set(wide.index) - balanced
    else:
        unbalanced = set(wide.index)
    entity = pd.Series("none", index=filings["adsh"].to_numpy(), dtype=object)
    entity[entity.index.isin(list(unbalanced))] = "unbalanced"
    entity[entity.index.isin(list(balanced))] = "parent"
    entity[entity.index.isin(list(plain_ok))] = "plain"
    use_parent = facts["adsh"].map(entity).eq("parent").to_numpy()
    cover = (facts["tag"] == DEI_TAGS[0]).to_numpy()
    keep = np.where(use_parent, facts["parent"].to_numpy() | cover,
                    ~facts["parent"].to_numpy())
    return facts.loc[keep].drop(columns="parent").reset_index(drop=True), entity


def filing_currency(facts: pd.DataFrame, filings: pd.DataFrame) -> pd.Series:
    """Unit of each filing's total-assets fact at its period end (``"USD"`` when none)."""
    period = filings.set_index("adsh")["period"]
    assets = facts.loc[(facts["tag"].isin(["Assets", "LiabilitiesAndStockholdersEquity"]))
                       & ~facts["custom"] & (facts["qtrs"] == 0)
                       & (facts["ddate"].to_numpy()
                          == facts["adsh"].map(period).fillna(0).to_numpy(dtype="int64"))]
    unit = assets.sort_values("tag").drop_duplicates("adsh").set_index("adsh")["uom"]
    return unit.reindex(filings["adsh"].to_numpy()).fillna("USD").astype(object)


def year_dates(facts: pd.DataFrame, filings: pd.DataFrame, years_back: int = 2
               ) -> pd.DataFrame:
    """The balance-sheet and flow dates of each filing's own and comparative fiscal years.

    Parameters
    ----------
    facts : pandas.DataFrame
        The chosen entity's money facts in the filing's currency.
    filings : pandas.DataFrame
        ``adsh``, ``period`` (int) and ``fiscal_year`` of the filings.
    years_back : int, default=2
        Comparative years read (balance sheets one year back at most).

    Returns
    -------
    pandas.DataFrame
        One row per filing and fiscal year with a date: ``adsh``, ``fiscal_year``,
        ``bs_date``, ``flow_date`` (int ``YYYYMMDD``, 0 when none), ``own`` (bool).
    """
    meta = filings.set_index("adsh")[["period", "fiscal_year"]]
    f = facts.loc[~facts["dei"] & ~facts["custom"], ["adsh", "ddate", "qtrs"]].drop_duplicates()
    f = f.join(meta, on="adsh")
    f = f.loc[f["ddate"] <= f["period"]]
    f["fy"] = fiscal_year_of_int(f["ddate"].to_numpy())
    back = f["fiscal_year"] - f["fy"]
    own = back == 0
    ok = (back >= 0) & (back <= years_back) & (~own | (f["ddate"] == f["period"]))
    f = f.loc[ok]
    bs = f.loc[(f["qtrs"] == 0) & ((f["fiscal_year"] - f["fy"]) <= 1)]
    bs = bs.groupby(["adsh", "fy"])["ddate"].max().rename("bs_date")
    fl = f.loc[f["qtrs"] == 4].groupby(["adsh", "fy"])["ddate"].max().rename("flow_date")
    out = pd.concat([bs, fl], axis=1).fillna(0).astype("int64").reset_index()
    out = out.rename(columns={"fy": "fiscal_year"})
    out["own"] = out["fiscal_year"].to_numpy() == out["adsh"].map(meta["fiscal_year"]).to_numpy()
    return out


def wide_values(facts: pd.DataFrame, dates: pd.DataFrame, currency: pd.Series,
                filings: pd.DataFrame, notes: list[str]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """One row per filing and fiscal year, one column per standard tag; and the long
    balance-sheet values (every tag, filer-defined ones included) for the debt sum.

    Returns
    -------
    wide : pandas.DataFrame
        Index like ``dates``; us-gaap tags by bare name, ``COVER_SHARES`` and
        ``PUBLIC_FLOAT`` for the own year.
    bs_long : pandas.DataFrame
        ``adsh``, ``fiscal_year``, ``tag``, ``value``: every money fact at the row's
        balance-sheet date.
    """
    keys = dates[["adsh", "fiscal_year", "bs_date", "flow_date"]]
    unit = facts["adsh"].map(currency)
    money = facts["uom"].to_numpy() == unit.to_numpy()
    shares = facts["uom"].to_numpy() == "shares"
    plain = facts.loc[~facts["dei"] & ~facts["class_segment"]]
    m_money = money[plain.index]
    m_shares = shares[plain.index]
    inst = plain.loc[(plain["qtrs"] == 0) & (m_money | m_shares)]
    inst = inst.merge(keys[["adsh", "fiscal_year", "bs_date"]],
                      left_on=["adsh", "ddate"], right_on=["adsh", "bs_date"])
    kinds = inst["tag"].map(TAG_KINDS)
    share_tag = kinds.eq("shares_instant").to_numpy()
    inst_ok = np.where(share_tag, inst["uom"].to_numpy() == "shares",
                       inst["uom"].to_numpy() != "shares")
    inst = inst.loc[inst_ok]
    flow = plain.loc[(plain["qtrs"] == 4) & (m_money | m_shares)]
    flow = flow.merge(keys[["adsh", "fiscal_year", "flow_date"]],
                      left_on=["adsh", "ddate"], right_on=["adsh", "flow_date"])
    fkinds = flow["tag"].map(TAG_KINDS)
    flow = flow.loc[fkinds.isin(["flow", "shares_flow"]).to_numpy()
                    & np.where(fkinds.eq("shares_flow").to_numpy(),
                               flow["uom"].to_numpy() == "shares",
                               flow["uom"].to_numpy() != "shares")]
    dup_i = inst.duplicated(["adsh", "fiscal_year", "tag", "custom"], keep="first")
    dup_f = flow.duplicated(["adsh", "fiscal_year", "tag"], keep="first")
    if dup_i.any() or dup_f.any():
        notes.append(
            f"{int(dup_i.sum() + dup_f.sum())} facts repeated a tag already found for the same "
            "submission and date; the first in num.txt was used."
        )
    inst = inst.loc[~dup_i]
    flow = flow.loc[~dup_f]
    bs_long = inst.loc[inst["uom"] != "shares", ["adsh", "fiscal_year", "tag", "value"]]
    std_inst = inst.loc[~inst["custom"] & inst["tag"].map(TAG_KINDS).notna()]
    parts = [std_inst[["adsh", "fiscal_year", "tag", "value"]],
             flow.loc[~flow["custom"], ["adsh", "fiscal_year", "tag", "value"]]]
    long = pd.concat(parts, ignore_index=True)
    long = long.drop_duplicates(["adsh", "fiscal_year", "tag"], keep="first")
    index = pd.MultiIndex.from_frame(keys[["adsh", "fiscal_year"]])
    if long.empty:
        wide = pd.DataFrame(index=index)
    else:
        wide = long.pivot(index=["adsh", "fiscal_year"], columns="tag", values="value")
        wide = wide.reindex(index)
    wide.columns.name = None
    cover, floats = _cover_page(facts, filings)
    own = dates["own"].to_numpy()
    adsh = dates["adsh"].to_numpy()
    wide[COVER_SHARES] = np.where(own, cover.reindex(adsh).to_numpy(dtype=float), np.nan)
    wide[PUBLIC_FLOAT] = np.where(own, floats.reindex(adsh).to_numpy(dtype=float), np.nan)
    return wide.astype(float), bs_long.reset_index(drop=True)


def _cover_page(facts: pd.DataFrame, filings: pd.DataFrame) -> tuple[pd.Series, pd.Series]:
    period = filings.set_index("adsh")["period"]
    dei = facts.loc[facts["dei"] & (facts["qtrs"] == 0)]
    dei = dei.assign(period=dei["adsh"].map(period).fillna(0).astype("int64"))
    shares = dei.loc[(dei["tag"] == DEI_TAGS[0]) & (dei["uom"] == "shares")
                     & (dei["ddate"] >= dei["period"])]
    plain = ~shares["class_segment"]
    has_plain = plain.groupby(shares["adsh"]).transform("any").astype(bool)
    shares = shares.loc[(plain & has_plain) | (shares["class_segment"] & ~has_plain)]
    shares = shares.loc[shares["ddate"] == shares.groupby("adsh")["ddate"].transform("max")]
    cover = shares.groupby("adsh")["value"].sum()
    cover = cover.where(cover > 0)
    pf = dei.loc[(dei["tag"] == DEI_TAGS[1]) & (dei["uom"] == "USD") & ~dei["class_segment"]
                 & (dei["ddate"] <= dei["period"])]
    pf = pf.loc[pf["ddate"] == pf.groupby("adsh")["ddate"].transform("max")]
    floats = pf.groupby("adsh")["value"].sum()
    return cover, floats
