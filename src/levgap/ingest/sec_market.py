"""Market equity and currencies for the SEC panel: the user's price and exchange-rate files.

Market equity
    With a price file: the latest price of the firm's CIK dated from 31 days before to 7
    days after the row's balance-sheet date, times ``shares_outstanding``
    (``market_equity_source`` = ``"price_file"``). Otherwise, or when no price matches, the
    cover-page public float of the firm's own 10-K for that year (the market value of the
    equity held by non-affiliates at the end of the second fiscal quarter): a proxy,
    ``"public_float_proxy"``. Missing when neither exists (comparative years have no cover
    page).
Currencies
    A filer reporting in another currency than U.S. dollars is kept only when an exchange-
    rate file gives a rate for its currency: the latest rate dated from 31 days before to 7
    days after the row's date becomes ``fx_rate`` (U.S. dollars per unit of the currency;
    levgap's analysis multiplies money by it) and ``currency`` keeps the filer's code.
    Rows without a matching rate are left out (ledger reason ``no_fx_rate``).
"""

from __future__ import annotations

from io import StringIO
from pathlib import Path

import numpy as np
import pandas as pd

from levgap.errors import SchemaError

#: How ``market_equity`` was obtained.
MARKET_EQUITY_SOURCES: dict[str, str] = {
    "price_file": "share price from the user's price file times shares_outstanding",
    "public_float_proxy": "dei:EntityPublicFloat, non-affiliate float at mid-year (a proxy)",
}

#: A price or rate matches a date from this many days before it to 7 days after.
DAYS_BEFORE = 31
DAYS_AFTER = 7


def _read_csv(path: Path, what: str, columns: tuple[str, ...]) -> pd.DataFrame:
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise SchemaError(
            f"{path}: {what} must be a readable CSV file; got {exc.strerror or exc}. "
            "Check the path."
        ) from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        text = raw.decode("latin-1")
    import csv

    try:
        frame = pd.read_csv(StringIO(text), dtype=str, keep_default_na=False, sep=None,
                            engine="python")
    except (pd.errors.ParserError, pd.errors.EmptyDataError, csv.Error) as exc:
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise SchemaError(
            f"{path}: {what} must be a CSV with columns {', '.join(columns)}; got an "
            f"unreadable file ({first}). Fix the file."
        ) from None
    frame.columns = [str(c).strip().lower() for c in frame.columns]
    for col in columns:
        if col not in frame.columns:
            raise SchemaError(
                f"{path}: {what} must have columns {', '.join(columns)}; column {col!r} is "
                f"missing (header: {list(frame.columns)[:10]}). Add it."
            )
    return frame


def _bad_cell(path: Path, what: str, ok: pd.Series, text: pd.Series, column: str,
              expected: str) -> None:
    bad = ~ok.to_numpy(dtype=bool)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise SchemaError(
            f"{path}: {what} column {column} must be {expected}; got {text.iloc[i]!r} at "
            f"data row {i + 1}, column {column}. Fix that cell."
        )


def _dates(path: Path, what: str, text: pd.Series) -> pd.Series:
    date = pd.to_datetime(text, format="%Y-%m-%d", errors="coerce")
    date = date.fillna(pd.to_datetime(text, format="%Y%m%d", errors="coerce"))
    _bad_cell(path, what, date.notna(), text, "date", "a date YYYY-MM-DD or YYYYMMDD")
    return date.astype("datetime64[ns]")


def _numbers(path: Path, what: str, text: pd.Series, column: str, strict: bool) -> pd.Series:
    value = pd.to_numeric(text, errors="coerce")
    finite = value.notna() & np.isfinite(value.fillna(0))
    ok = finite & ((value > 0) if strict else (value >= 0))
    _bad_cell(path, what, ok, text, column, "a number > 0" if strict else "a number >= 0")
    return value.astype(float)


def _unique(path: Path, what: str, frame: pd.DataFrame, key: str, name: str,
            text: pd.Series) -> None:
    dup = frame.duplicated([key, "date"], keep="first")
    if dup.any():
        row = int(np.flatnonzero(dup.to_numpy())[0]) + 1
        value = "price" if what == "price file" else "rate"
        raise SchemaError(
            f"{path}: {what} must hold one {value} per {name} and date; got a second one "
            f"for {name} {frame[key].iloc[row - 1]} on {text.iloc[row - 1]} at data row "
            f"{row}, column date. Remove the duplicate."
        )


def read_prices(path: str | Path) -> pd.DataFrame:
    """Read a price file: one row per CIK and date.

    Parameters
    ----------
    path : str or pathlib.Path
        CSV with a header holding ``cik``, ``date`` (``YYYY-MM-DD`` or ``YYYYMMDD``) and
        ``price`` (>= 0, per share, in the currency of the filer's statements), in any
        order and case; other columns are ignored.

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
    what = "price file"
    frame = _read_csv(p, what, ("cik", "date", "price"))
    cik = frame["cik"].str.strip()
    ok_cik = cik.str.fullmatch(r"\d{1,10}").fillna(False).astype(bool)
    _bad_cell(p, what, ok_cik, cik, "cik", "a CIK of up to 10 digits")
    date_text = frame["date"].str.strip()
    out = pd.DataFrame({
        "firm_id": cik.str.lstrip("0").replace("", "0").astype(str),
        "date": _dates(p, what, date_text),
        "price": _numbers(p, what, frame["price"].str.strip(), "price", strict=False),
    })
    _unique(p, what, out, "firm_id", "cik", date_text)
    return out.sort_values("date", kind="stable").reset_index(drop=True)


def read_fx_rates(path: str | Path) -> pd.DataFrame:
    """Read an exchange-rate file: one row per currency and date.

    Parameters
    ----------
    path : str or pathlib.Path
        CSV with ``currency`` (ISO 4217 code, e.g. ``CAD``), ``date`` and ``rate`` (> 0,
        U.S. dollars per one unit of the currency).

    Returns
    -------
    pandas.DataFrame
        Columns ``currency`` (upper case), ``date``, ``rate``, sorted by date.

    Raises
    ------
    SchemaError
        Naming the file, the 1-based data row and the column of the first bad cell.
    """
    p = Path(path)
    what = "exchange-rate file"
    frame = _read_csv(p, what, ("currency", "date", "rate"))
    code = frame["currency"].str.strip().str.upper()
    _bad_cell(p, what, code.str.fullmatch(r"[A-Z]{3}").fillna(False).astype(bool), code,
              "currency", "a three-letter ISO 4217 code")
    date_text = frame["date"].str.strip()
    out = pd.DataFrame({
        "currency": code.astype(str),
        "date": _dates(p, what, date_text),
        "rate": _numbers(p, what, frame["rate"].str.strip(), "rate", strict=True),
    })
    _unique(p, what, out, "currency", "currency", date_text)
    return out.sort_values("date", kind="stable").reset_index(drop=True)


def match_by_date(keys: pd.Series, dates: pd.Series, table: pd.DataFrame, key: str,
                  value: str) -> tuple[np.ndarray, np.ndarray]:
    """Latest ``value`` of ``table`` for each key, dated from 31 days before to 7 after.

    Returns
    -------
    values : numpy.ndarray of float
        NaN where nothing matches.
    matched_dates : numpy.ndarray of str
        ``YYYY-MM-DD`` of the match, ``""`` where none.
    """
    n = len(keys)
    if table is None or not n:
        return np.full(n, np.nan), np.full(n, "", dtype=object)
    left = pd.DataFrame({
        "row": np.arange(n), key: keys.astype(str).to_numpy(),
        "when": (pd.to_datetime(dates.to_numpy()) + pd.Timedelta(days=DAYS_AFTER))
        .astype("datetime64[ns]"),
    })
    have = left["when"].notna()
    right = table.rename(columns={"date": "when"}).assign(
        matched=table["date"].dt.strftime("%Y-%m-%d"))
    right[key] = right[key].astype(str)
    matched = pd.merge_asof(left.loc[have].sort_values("when", kind="stable"), right, on="when",
                            by=key, direction="backward",
                            tolerance=pd.Timedelta(days=DAYS_BEFORE + DAYS_AFTER))
    matched = matched.set_index("row").reindex(np.arange(n))
    return (matched[value].to_numpy(dtype=float),
            matched["matched"].astype(object).where(matched["matched"].notna(), "")
            .to_numpy(dtype=object))


def market_equity(rows: pd.DataFrame, prices: pd.DataFrame | None
                  ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Add ``share_price``, ``market_equity`` and ``market_equity_source`` to the rows.

    Parameters
    ----------
    rows : pandas.DataFrame
        ``firm_id``, ``row_date`` (``YYYY-MM-DD``), ``shares_outstanding``,
        ``public_float`` (the own 10-K's cover page), ``own_adsh``.
    prices : pandas.DataFrame or None
        From :func:`read_prices`.

    Returns
    -------
    rows : pandas.DataFrame
    added_sources : pandas.DataFrame
        ``row`` (position), ``column``, ``source``.
    """
    rows = rows.copy()
    n = len(rows)
    price, price_date = match_by_date(rows["firm_id"], rows["row_date"], prices, "firm_id",
                                      "price") if prices is not None else (
        np.full(n, np.nan), np.full(n, "", dtype=object))
    shares = rows["shares_outstanding"].to_numpy(dtype=float)
    from_price = ~np.isnan(price) & ~np.isnan(shares)
    floats = rows["public_float"].to_numpy(dtype=float)
    from_float = ~from_price & ~np.isnan(floats)
    rows["share_price"] = price
    rows["market_equity"] = np.where(from_price, price * shares,
                                     np.where(from_float, floats, np.nan))
    rows["market_equity_source"] = pd.Series(
        np.where(from_price, "price_file", np.where(from_float, "public_float_proxy", None)),
        dtype=object, index=rows.index)
    at = np.arange(n)
    have_price = ~np.isnan(price)
    added = pd.concat([
        pd.DataFrame({"row": at[have_price], "column": "share_price",
                      "source": "price file " + price_date[have_price].astype(object)}),
        pd.DataFrame({"row": at[from_price], "column": "market_equity",
                      "source": "share_price x shares_outstanding"}),
        pd.DataFrame({"row": at[from_float], "column": "market_equity",
                      "source": "dei:EntityPublicFloat (proxy)"}),
    ], ignore_index=True)
    return rows, added
