"""Several years from the filings of several quarters: one value per firm, year and column.

Rules
-----
Which filing's figure
    Each 10-K reports its own fiscal year and comparatives (balance sheet one year back,
    flows two years back), so a year is often reported by several filings (its own 10-K, the
    next year's comparative, an amendment). For each firm, fiscal year and column, the value
    of the latest filing (by ``filed``, then ``accepted``, then ``adsh``) is used: restated
    figures. With ``restated=False`` (``--as-first-filed``) the earliest filing's value is
    used. The choice is made column by column, so a partial 10-K/A never blanks the items a
    full 10-K filed.
Change of fiscal year end
    When two period ends of one firm fall in one fiscal year, the values dated at the later
    one are kept.
Which firm-years are rows
    A filing's own fiscal year is always a row. A comparative year is a row when some filing
    gives it a balance sheet (total assets); a year seen only in a comparative income or
    cash-flow statement (two years back) goes to the ledger (``no_balance_sheet``).
Names and industries
    ``firm_name`` and ``industry`` (SIC) of a firm are those of its latest filing.
Submissions given twice
    A submission (``adsh``) held by several quarters given (the same quarter twice, a zip and
    its extracted folder, a quarter in both layouts) is read once: the first quarter given
    that holds it supplies its status and all its values, never a mixture of two copies.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from levgap.ingest.sec_quarter import QuarterExtract

#: Columns of the combined sources (the written ``panel.sources.csv``).
SOURCE_COLUMNS: tuple[str, ...] = (
    "firm_id", "fiscal_year", "column", "source", "adsh", "form", "period", "filed", "fact_date",
    "role", "statement", "flags",
)
#: Columns of the import ledger (the written ``panel.excluded.csv``).
LEDGER_COLUMNS: tuple[str, ...] = (
    "firm_id", "fiscal_year", "firm_name", "industry", "adsh", "form", "period", "reason",
    "detail",
)


@dataclass(frozen=True, slots=True)
class Assembled:
    """Chosen values, before market equity, currencies and industry filters.

    Parameters
    ----------
    rows : pandas.DataFrame
        One row per firm-year: ``firm_id``, ``fiscal_year``, ``firm_name``, ``industry``,
        ``currency``, ``row_date``, ``own_adsh`` (the filing whose own year it is, or
        ``""``), then one column per value column (NaN where missing) and ``flags``.
    sources : pandas.DataFrame
        One row per value (``SOURCE_COLUMNS``).
    ledger : pandas.DataFrame
        Firm-years filed but not in ``rows`` (``LEDGER_COLUMNS``).
    notes : tuple of str
    """

    rows: pd.DataFrame
    sources: pd.DataFrame
    ledger: pd.DataFrame
    notes: tuple[str, ...]


def assemble(extracts: Sequence[QuarterExtract], *, restated: bool = True,
             excluded_filings: pd.Series | None = None) -> Assembled:
    """Combine the quarters' values into one value per firm, fiscal year and column.

    Parameters
    ----------
    extracts : sequence of QuarterExtract
    restated : bool, default=True
        Latest filing's value (``True``) or first filed (``False``).
    excluded_filings : pandas.Series, optional
        adsh -> ledger reason for filings the caller leaves out (currency rules).

    Returns
    -------
    Assembled
    """
    notes: list[str] = list(dict.fromkeys(n for e in extracts for n in e.notes))
    filings = pd.concat([e.filings for e in extracts], ignore_index=True)
    # A submission given twice (the same quarter twice, a zip and its folder, both layouts)
    # is read once: the first quarter given that holds it supplies all its values.
    dup = filings.duplicated("adsh", keep="first")
    if dup.any():
        notes.append(
            f"{int(dup.sum())} submissions appear in more than one quarter given (the same "
            "quarter twice, or a zip and its extracted folder?); each was read once, from "
            "the first quarter given that holds it."
        )
    filings = filings.loc[~dup].reset_index(drop=True)
    first_of = filings.set_index("adsh")["quarter"]
    cells = _concat([e.cells.loc[e.cells["adsh"].map(first_of).to_numpy() == i]
                     for i, e in enumerate(extracts)] if dup.any() else
                    [e.cells for e in extracts])
    if excluded_filings is not None and len(excluded_filings):
        hit = filings["adsh"].isin(excluded_filings.index) & (filings["status"] == "")
        filings.loc[hit, "status"] = filings.loc[hit, "adsh"].map(excluded_filings)
    meta = filings.set_index("adsh")
    used = meta.index[meta["status"] == ""]
    cells = cells.loc[cells["adsh"].isin(used)].copy()
    cells = cells.drop_duplicates(["adsh", "fiscal_year", "column"], keep="first")
    for c in ("firm_id", "form", "period", "filed", "accepted", "fiscal_year", "flags",
              "quarter"):
        cells["f_" + c] = cells["adsh"].map(meta[c]).to_numpy()
    if cells.empty:  # no value at all (no annual report in the quarters): typed keys
        cells = cells.astype({"f_firm_id": object, "f_fiscal_year": "int64",
                              "f_quarter": "int64"})
    filing_flags = cells["f_flags"].astype(str)
    cells["flags"] = _join(cells["flags"].astype(str), filing_flags)
    cells = _latest_period(cells, notes)
    order = ["firm_id_", "fiscal_year", "column_", "f_filed", "f_accepted", "adsh_", "f_quarter"]
    cells = cells.assign(firm_id_=cells["f_firm_id"], column_=cells["column"].astype(str),
                         adsh_=cells["adsh"].astype(str)).sort_values(order, kind="stable")
    cells["column"] = cells["column_"]
    cells = cells.drop(columns=["column_", "adsh_"])
    chosen = cells.drop_duplicates(["firm_id_", "fiscal_year", "column"],
                                   keep="last" if restated else "first")
    superseded = len(cells) - len(chosen)
    if superseded:
        which = "later" if not restated else "earlier"
        notes.append(
            f"{superseded} values reported again by another filing for the same firm, year and "
            f"item were not used ({'latest' if restated else 'first'} filed kept, item by "
            f"item; {which} figures dropped)."
        )
    rows = _rows(chosen, meta)
    ledger = _ledger(filings, meta, rows, cells)
    sources = _sources(chosen, rows)
    return Assembled(rows, sources, ledger, tuple(notes))


def _concat(frames: list[pd.DataFrame]) -> pd.DataFrame:
    """Concatenate the quarters' values, keeping text columns categorical (one copy of each
    distinct text, whatever the number of quarters)."""
    from pandas.api.types import union_categoricals

    out = {}
    for c in frames[0].columns:
        parts = [f[c] for f in frames]
        if isinstance(parts[0].dtype, pd.CategoricalDtype):
            out[c] = pd.Series(union_categoricals(parts, ignore_order=True))
        else:
            out[c] = pd.concat(parts, ignore_index=True)
    return pd.DataFrame(out)


def _join(a: pd.Series, b: pd.Series) -> pd.Series:
    both = (a != "") & (b != "")
    return pd.Series(np.where(both, a + ";" + b, np.where(a != "", a, b)), index=a.index,
                     dtype=object)


def _latest_period(cells: pd.DataFrame, notes: list[str]) -> pd.DataFrame:
    """Keep, per firm and fiscal year, the values dated at its latest period end."""
    if cells.empty:
        return cells
    # Integer keys: grouping on text columns is slow at a modern quarter's size.
    firm = pd.to_numeric(cells["f_firm_id"], errors="coerce").fillna(-1).to_numpy(
        dtype="int64")
    key = [firm, cells["fiscal_year"].to_numpy(dtype="int64")]
    date, _ = pd.factorize(cells["fact_date"].to_numpy(dtype=object), sort=True)
    date = pd.Series(date, index=cells.index)
    assets_date = date.where((cells["column"] == "total_assets").to_numpy())
    row_date = assets_date.groupby(key).transform("max")
    row_date = row_date.fillna(date.groupby(key).transform("max"))
    clash = (date != row_date).to_numpy()
    if clash.any():
        firms = sorted(set(cells.loc[clash, "f_firm_id"]))
        notes.append(
            f"{len(firms)} firms had two period ends in one fiscal year (a change of fiscal "
            f"year end); the values dated at the later one were kept (CIK "
            f"{', '.join(firms[:5])})."
        )
    return cells.loc[~clash]


def _rows(chosen: pd.DataFrame, meta: pd.DataFrame) -> pd.DataFrame:
    used = meta.loc[meta["status"] == ""].reset_index()
    own = used[["firm_id", "fiscal_year", "adsh", "filed", "accepted"]].sort_values(
        ["firm_id", "fiscal_year", "filed", "accepted", "adsh"])
    own = own.drop_duplicates(["firm_id", "fiscal_year"], keep="last")
    own = own.rename(columns={"adsh": "own_adsh"})[["firm_id", "fiscal_year", "own_adsh"]]
    wide = chosen.pivot(index=["firm_id_", "fiscal_year"], columns="column", values="value")
    wide.columns.name = None
    wide.index.names = ["firm_id", "fiscal_year"]
    wide = wide.reset_index()
    rows = own.merge(wide, on=["firm_id", "fiscal_year"], how="outer")
    has_assets = rows.get("total_assets", pd.Series(np.nan, index=rows.index)).notna()
    rows = rows.loc[rows["own_adsh"].notna() | has_assets].copy()
    rows["own_adsh"] = rows["own_adsh"].fillna("")
    # Row date, flags: from the chosen values.
    date = chosen.assign(_a=chosen["column"] == "total_assets").sort_values("_a")
    date = date.groupby(["firm_id_", "fiscal_year"])["fact_date"].last()
    date.index.names = ["firm_id", "fiscal_year"]
    rows = rows.join(date.astype(object).rename("row_date"), on=["firm_id", "fiscal_year"])
    flags = (chosen.loc[chosen["flags"] != ""]
             .assign(flag=chosen["flags"].str.split(";")).explode("flag")
             .groupby(["firm_id_", "fiscal_year"])["flag"]
             .agg(lambda s: ";".join(sorted(set(s) - {""}))))
    flags.index.names = ["firm_id", "fiscal_year"]
    rows = rows.join(flags.rename("flags"), on=["firm_id", "fiscal_year"])
    rows["flags"] = rows["flags"].fillna("").astype(object)
    latest = used.sort_values(["filed", "accepted", "adsh"]).drop_duplicates("firm_id",
                                                                              keep="last")
    latest = latest.set_index("firm_id")
    rows["firm_name"] = rows["firm_id"].map(latest["name"]).astype(object)
    rows["industry"] = rows["firm_id"].map(latest["sic"]).astype(object)
    rows["currency"] = rows["firm_id"].map(latest["currency"]).astype(object)
    own_currency = rows["own_adsh"].map(meta["currency"])
    rows["currency"] = own_currency.where(own_currency.notna() & (rows["own_adsh"] != ""),
                                          rows["currency"]).astype(object)
    rows["own_form"] = rows["own_adsh"].map(meta["form"]).fillna("").astype(object)
    rows["fiscal_year"] = rows["fiscal_year"].astype("int64")
    return rows.reset_index(drop=True)


def _ledger(filings: pd.DataFrame, meta: pd.DataFrame, rows: pd.DataFrame,
            cells: pd.DataFrame) -> pd.DataFrame:
    in_panel = set(zip(rows["firm_id"], rows["fiscal_year"], strict=True))
    left = filings.loc[filings["status"] != ""].drop_duplicates("adsh")
    left = left.sort_values(["firm_id", "fiscal_year", "filed", "adsh"])
    left = left.loc[[(f, y) not in in_panel for f, y in zip(left["firm_id"], left["fiscal_year"],
                                                             strict=True)]]
    left = left.drop_duplicates(["firm_id", "fiscal_year"], keep="last")
    out = pd.DataFrame({
        "firm_id": left["firm_id"], "fiscal_year": left["fiscal_year"],
        "firm_name": left["name"], "industry": left["sic"], "adsh": left["adsh"],
        "form": left["form"], "period": _iso(left["period"]), "reason": left["status"],
        "detail": left["detail"],
    })
    # Years seen only in a comparative income or cash-flow statement.
    seen = cells.drop_duplicates(["f_firm_id", "fiscal_year"], keep="last")
    flows_only = seen.loc[[(f, y) not in in_panel for f, y in
                           zip(seen["f_firm_id"], seen["fiscal_year"], strict=True)]]
    if len(flows_only):
        extra = pd.DataFrame({
            "firm_id": flows_only["f_firm_id"], "fiscal_year": flows_only["fiscal_year"],
            "firm_name": flows_only["f_firm_id"].map(
                meta.reset_index().drop_duplicates("firm_id", keep="last")
                .set_index("firm_id")["name"]),
            "industry": flows_only["f_firm_id"].map(
                meta.reset_index().drop_duplicates("firm_id", keep="last")
                .set_index("firm_id")["sic"]),
            "adsh": flows_only["adsh"], "form": flows_only["f_form"],
            "period": _iso(flows_only["f_period"]), "reason": "no_balance_sheet",
            "detail": "only a comparative income or cash-flow statement reports this year "
                      "(dated " + flows_only["fact_date"].astype(str) + ")",
        })
        out = pd.concat([out, extra], ignore_index=True)
    out["fiscal_year"] = pd.to_numeric(out["fiscal_year"], errors="coerce").fillna(-1).astype(
        "int64")
    return out.reindex(columns=list(LEDGER_COLUMNS)).reset_index(drop=True)


def _iso(period: pd.Series) -> pd.Series:
    text = pd.Series(period).astype("int64").astype(str)
    iso = text.str[:4] + "-" + text.str[4:6] + "-" + text.str[6:8]
    return iso.where(pd.Series(period).astype("int64") > 0, "").astype(object)


def _sources(chosen: pd.DataFrame, rows: pd.DataFrame) -> pd.DataFrame:
    keep = set(zip(rows["firm_id"], rows["fiscal_year"], strict=True))
    c = chosen.loc[[(f, y) in keep for f, y in zip(chosen["firm_id_"], chosen["fiscal_year"],
                                                   strict=True)]]
    c = c.loc[c["column"] != "public_float"]
    filed = pd.to_datetime(c["f_filed"].astype(str), format="%Y%m%d", errors="coerce")
    role = np.where(c["fiscal_year"].to_numpy() == c["f_fiscal_year"].to_numpy(), "own year",
                    "comparative")
    out = pd.DataFrame({
        "firm_id": c["firm_id_"].to_numpy(), "fiscal_year": c["fiscal_year"].to_numpy(),
        "column": c["column"].to_numpy(), "source": c["source"].to_numpy(),
        "adsh": c["adsh"].to_numpy(), "form": c["f_form"].to_numpy(),
        "period": _iso(c["f_period"]).to_numpy(),
        "filed": filed.dt.strftime("%Y-%m-%d").fillna("").to_numpy(dtype=object),
        "fact_date": c["fact_date"].to_numpy(), "role": role,
        "statement": c["statement"].to_numpy(), "flags": c["flags"].to_numpy(),
    })
    return out.reset_index(drop=True)
