"""Input schema v1 as data: the one source of truth for validation, the template and the docs.

One row per firm and fiscal year; ``firm_id`` + ``fiscal_year`` is unique. Money columns
share one currency and unit within a file unless ``fx_rate`` is given.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

SCHEMA_VERSION = 1

Kind = Literal["text", "integer", "number"]


@dataclass(frozen=True, slots=True)
class Column:
    """One column of schema v1.

    Parameters
    ----------
    name : str
        Column name as it appears in a panel file.
    kind : {"text", "integer", "number"}
        Type the value is parsed as.
    required : bool
        Whether every row must carry a value.
    money : bool
        Whether the value is an amount of money (scaled by units and ``fx_rate``).
    minimum : float or None
        Smallest admissible value (inclusive unless ``strict``).
    strict : bool
        Whether ``minimum`` itself is excluded (``total_assets`` must be > 0).
    unit : str
        Unit shown in the template.
    meaning : str
        One line for the template and the docs.
    example : str
        Example cell for the template.
    """

    name: str
    kind: Kind
    required: bool
    money: bool
    minimum: float | None
    strict: bool
    unit: str
    meaning: str
    example: str


COLUMNS: tuple[Column, ...] = (
    Column("firm_id", "text", True, False, None, False, "-",
           "stable identifier of the firm", "NRD-001"),
    Column("fiscal_year", "integer", True, False, None, False, "year",
           "fiscal year of the statements", "2021"),
    Column("industry", "text", True, False, None, False, "-",
           "peer-group code or label: a SIC or NAICS code, or your own label", "3714"),
    Column("total_assets", "number", True, True, 0.0, True, "money",
           "total assets at fiscal year end (must be > 0)", "1520.4"),
    Column("total_debt", "number", True, True, 0.0, False, "money",
           "interest-bearing debt: short-term borrowings, current portion and long-term debt",
           "412.0"),
    Column("ppe_net", "number", True, True, 0.0, False, "money",
           "property, plant and equipment, net", "610.9"),
    Column("ebitda", "number", True, True, None, False, "money",
           "earnings before interest, taxes, depreciation and amortisation", "188.3"),
    Column("book_equity", "number", True, True, None, False, "money",
           "total shareholders' equity (may be negative)", "702.5"),
    Column("firm_name", "text", False, False, None, False, "-",
           "display name", "Nordvik Axle Works"),
    Column("market_equity", "number", False, True, 0.0, False, "money",
           "equity market value at fiscal year end; or give shares_outstanding and share_price",
           "955.0"),
    Column("shares_outstanding", "number", False, False, 0.0, False, "shares",
           "shares outstanding at fiscal year end (used when market_equity is absent)", "50.0"),
    Column("share_price", "number", False, True, 0.0, False, "money per share",
           "share price at fiscal year end (used when market_equity is absent)", "19.10"),
    Column("revenue", "number", False, True, 0.0, False, "money", "sales", "1304.0"),
    Column("cash", "number", False, True, 0.0, False, "money",
           "cash and short-term investments (for net debt)", "95.2"),
    Column("interest_expense", "number", False, True, 0.0, False, "money",
           "interest expense (for interest coverage)", "21.7"),
    Column("rd_expense", "number", False, True, 0.0, False, "money",
           "research and development expense", "12.0"),
    Column("lease_liabilities", "number", False, True, 0.0, False, "money",
           "lease liabilities; added to debt when the run asks for it", "40.0"),
    Column("current_assets", "number", False, True, 0.0, False, "money",
           "total current assets (Altman Z working capital)", "540.0"),
    Column("current_liabilities", "number", False, True, 0.0, False, "money",
           "total current liabilities (Altman Z working capital)", "301.5"),
    Column("total_liabilities", "number", False, True, 0.0, False, "money",
           "total liabilities (Altman Z'' book equity to liabilities)", "817.9"),
    Column("retained_earnings", "number", False, True, None, False, "money",
           "retained earnings or accumulated deficit (may be negative)", "366.0"),
    Column("ebit", "number", False, True, None, False, "money",
           "earnings before interest and taxes (operating income)", "131.4"),
    Column("dividends_paid", "number", False, True, 0.0, False, "money",
           "cash dividends paid to shareholders in the year", "24.0"),
    Column("currency", "text", False, False, None, False, "ISO 4217",
           "ISO 4217 code of the money columns", "EUR"),
    Column("fx_rate", "number", False, False, 0.0, True, "reference per unit",
           "multiply money by this to reach the reference currency; required when several "
           "currencies appear", "1.0"),
)

BY_NAME: dict[str, Column] = {c.name: c for c in COLUMNS}
REQUIRED: tuple[str, ...] = tuple(c.name for c in COLUMNS if c.required)
OPTIONAL: tuple[str, ...] = tuple(c.name for c in COLUMNS if not c.required)
NUMERIC: tuple[str, ...] = tuple(c.name for c in COLUMNS if c.kind != "text")
MONEY: tuple[str, ...] = tuple(c.name for c in COLUMNS if c.money)
KEY: tuple[str, str] = ("firm_id", "fiscal_year")

MEASURES: tuple[str, ...] = ("book", "market")
DRIVERS: tuple[str, ...] = (
    "tangibility",
    "profitability",
    "earnings_volatility",
    "size",
    "market_to_book",
)
OPTIONAL_DRIVERS: tuple[str, ...] = ("rd_intensity", "log_revenue", "industry_median_leverage",
                                     "dividend_payer")
"""Drivers a run adds on request; ``levgap.definitions`` says how each is built."""
