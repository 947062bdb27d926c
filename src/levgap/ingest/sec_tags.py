"""US-GAAP tag precedence for the schema-v1 columns, as data and vectorised formulas.

The rules follow ``opendata/sec-fsds/README.md`` of the project's shared data (first tag
found wins unless a sum is stated). Every value comes with the tag or formula that produced
it, so that a user can audit the panel cell by cell.

==================  =========================================================================
column              rule
==================  =========================================================================
total_assets        Assets; LiabilitiesAndStockholdersEquity
total_debt          current + noncurrent (missing part counts as 0; both missing -> missing).
                    current = DebtCurrent; else LongTermDebtAndCapitalLeaseObligationsCurrent;
                    else the sum of those present of LongTermDebtCurrent, ShortTermBorrowings
                    (CommercialPaper only when ShortTermBorrowings is absent, as it is one of
                    its components), NotesPayableCurrent, LinesOfCreditCurrent,
                    OtherShortTermBorrowings.
                    noncurrent = LongTermDebtNoncurrent; else
                    LongTermDebtAndCapitalLeaseObligations; else LongTermDebt minus
                    LongTermDebtCurrent (LongTermDebt includes current maturities, so it is
                    never added to LongTermDebtCurrent).
ppe_net             PropertyPlantAndEquipmentNet; PropertyPlantAndEquipmentAndFinanceLease
                    RightOfUseAssetAfterAccumulatedDepreciationAndAmortization;
                    PropertyPlantAndEquipmentGross minus AccumulatedDepreciationDepletionAnd
                    AmortizationPropertyPlantAndEquipment
ebitda              OperatingIncomeLoss + D&A, D&A = DepreciationDepletionAndAmortization;
                    DepreciationAmortizationAndAccretionNet; DepreciationAndAmortization;
                    Depreciation (+ AmortizationOfIntangibleAssets when present). Missing when
                    either part is missing.
book_equity         StockholdersEquity; StockholdersEquityIncludingPortionAttributableTo
                    NoncontrollingInterest; PartnersCapital; MembersEquity
revenue             Revenues; RevenueFromContractWithCustomerExcludingAssessedTax;
                    SalesRevenueNet; RevenueFromContractWithCustomerIncludingAssessedTax
cash                CashAndCashEquivalentsAtCarryingValue; CashCashEquivalentsRestrictedCash
                    AndRestrictedCashEquivalents; Cash
interest_expense    InterestExpense; InterestExpenseNonoperating; InterestExpenseDebt;
                    InterestAndDebtExpense
rd_expense          ResearchAndDevelopmentExpense; ResearchAndDevelopmentExpenseExcluding
                    AcquiredInProcessCost (not in the README's table; levgap's own choice)
lease_liabilities   finance part + operating part (missing part counts as 0; both missing ->
                    missing). Finance part: FinanceLeaseLiability; else FinanceLeaseLiability
                    Current + FinanceLeaseLiabilityNoncurrent; for fiscal years before 2019
                    also CapitalLeaseObligations, else CapitalLeaseObligationsCurrent +
                    CapitalLeaseObligationsNoncurrent. Left out when total_debt already used
                    a ...AndCapitalLeaseObligations... tag. Operating part, fiscal years from
                    2019: OperatingLeaseLiability; else OperatingLeaseLiabilityCurrent +
                    OperatingLeaseLiabilityNoncurrent.
shares_outstanding  dei:EntityCommonStockSharesOutstanding (cover page, summed over share
                    classes); CommonStockSharesOutstanding;
                    WeightedAverageNumberOfSharesOutstandingBasic
==================  =========================================================================
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pandas as pd

#: Column of the wide fact frame holding the cover-page share count (already summed).
COVER_SHARES = "dei:EntityCommonStockSharesOutstanding"
#: Column of the wide fact frame holding the cover-page public float.
PUBLIC_FLOAT = "dei:EntityPublicFloat"

#: How each us-gaap tag is selected: balance-sheet "instant" (qtrs 0, USD), "flow" (qtrs 4,
#: USD), "shares_instant" (qtrs 0, shares) or "shares_flow" (qtrs 4, shares).
TAG_KINDS: dict[str, str] = {
    # balance sheet, USD, qtrs 0
    **dict.fromkeys(
        (
            "Assets", "LiabilitiesAndStockholdersEquity",
            "DebtCurrent", "LongTermDebtAndCapitalLeaseObligationsCurrent", "LongTermDebtCurrent",
            "ShortTermBorrowings", "CommercialPaper", "NotesPayableCurrent",
            "LinesOfCreditCurrent", "OtherShortTermBorrowings",
            "LongTermDebtNoncurrent", "LongTermDebtAndCapitalLeaseObligations", "LongTermDebt",
            "FinanceLeaseLiability", "FinanceLeaseLiabilityCurrent",
            "FinanceLeaseLiabilityNoncurrent", "CapitalLeaseObligations",
            "CapitalLeaseObligationsCurrent", "CapitalLeaseObligationsNoncurrent",
            "OperatingLeaseLiability", "OperatingLeaseLiabilityCurrent",
            "OperatingLeaseLiabilityNoncurrent",
            "PropertyPlantAndEquipmentNet",
            "PropertyPlantAndEquipmentAndFinanceLeaseRightOfUseAssetAfterAccumulatedDepreciationAndAmortization",  # noqa: E501
            "PropertyPlantAndEquipmentGross",
            "AccumulatedDepreciationDepletionAndAmortizationPropertyPlantAndEquipment",
            "StockholdersEquity", "StockholdersEquityIncludingPortionAttributableToNoncontrollingInterest",  # noqa: E501
            "PartnersCapital", "MembersEquity",
            "CashAndCashEquivalentsAtCarryingValue",
            "CashCashEquivalentsRestrictedCashAndRestrictedCashEquivalents", "Cash",
        ),
        "instant",
    ),
    # income and cash-flow statements, USD, qtrs 4
    **dict.fromkeys(
        (
            "OperatingIncomeLoss", "DepreciationDepletionAndAmortization",
            "DepreciationAmortizationAndAccretionNet", "DepreciationAndAmortization",
            "Depreciation", "AmortizationOfIntangibleAssets",
            "Revenues", "RevenueFromContractWithCustomerExcludingAssessedTax", "SalesRevenueNet",
            "RevenueFromContractWithCustomerIncludingAssessedTax",
            "InterestExpense", "InterestExpenseNonoperating", "InterestExpenseDebt",
            "InterestAndDebtExpense",
            "ResearchAndDevelopmentExpense",
            "ResearchAndDevelopmentExpenseExcludingAcquiredInProcessCost",
        ),
        "flow",
    ),
    "CommonStockSharesOutstanding": "shares_instant",
    "WeightedAverageNumberOfSharesOutstandingBasic": "shares_flow",
}

#: Cover-page (dei) tags, selected by their own date rules (see ``levgap.ingest.sec``).
DEI_TAGS: tuple[str, ...] = ("EntityCommonStockSharesOutstanding", "EntityPublicFloat")

#: Every tag the importer reads from num.txt.
NEEDED_TAGS: tuple[str, ...] = (*TAG_KINDS, *DEI_TAGS)

#: Columns filled by the first tag found, in order.
FIRST_FOUND: dict[str, tuple[str, ...]] = {
    "total_assets": ("Assets", "LiabilitiesAndStockholdersEquity"),
    "book_equity": (
        "StockholdersEquity",
        "StockholdersEquityIncludingPortionAttributableToNoncontrollingInterest",
        "PartnersCapital",
        "MembersEquity",
    ),
    "revenue": (
        "Revenues",
        "RevenueFromContractWithCustomerExcludingAssessedTax",
        "SalesRevenueNet",
        "RevenueFromContractWithCustomerIncludingAssessedTax",
    ),
    "cash": (
        "CashAndCashEquivalentsAtCarryingValue",
        "CashCashEquivalentsRestrictedCashAndRestrictedCashEquivalents",
        "Cash",
    ),
    "interest_expense": (
        "InterestExpense",
        "InterestExpenseNonoperating",
        "InterestExpenseDebt",
        "InterestAndDebtExpense",
    ),
    "rd_expense": (
        "ResearchAndDevelopmentExpense",
        "ResearchAndDevelopmentExpenseExcludingAcquiredInProcessCost",
    ),
}

#: Fiscal year from which operating lease liabilities are on the balance sheet (ASC 842) and
#: before which capital lease obligations are read.
LEASE_STANDARD_YEAR = 2019

# An item is a value array (float, NaN where missing) and a label array (the tag or formula
# that produced each value; "" where missing).
Item = tuple[np.ndarray, np.ndarray]


def _tag(wide: pd.DataFrame, tag: str) -> Item:
    if tag in wide.columns:
        v = wide[tag].to_numpy(dtype=float, na_value=np.nan)
    else:
        v = np.full(len(wide), np.nan)
    return v, np.where(np.isnan(v), "", tag).astype(object)


def _wrap(label: np.ndarray) -> np.ndarray:
    compound = np.char.find(label.astype(str), " ") >= 0
    return np.where(compound, "(" + label + ")", label).astype(object)


def _first(*items: Item) -> Item:
    v = np.full(len(items[0][0]), np.nan)
    lab = np.full(len(v), "", dtype=object)
    for iv, ilab in reversed(items):
        have = ~np.isnan(iv)
        v = np.where(have, iv, v)
        lab = np.where(have, ilab, lab)
    return v, lab


def _sum_present(*items: Item) -> Item:
    """Sum of the items present; missing when none is."""
    vals = np.column_stack([iv for iv, _ in items])
    have = ~np.isnan(vals)
    any_ = have.any(axis=1)
    v = np.where(any_, np.nansum(np.where(have, vals, 0.0), axis=1), np.nan)
    single = have.sum(axis=1) == 1
    lab = np.full(len(v), "", dtype=object)
    for iv, ilab in items:
        part = np.where(np.isnan(iv), "", np.where(single, ilab, _wrap(ilab))).astype(object)
        lab = np.where(lab == "", part, np.where(part == "", lab, lab + " + " + part))
    return v, lab.astype(object)


def _combine(a: Item, b: Item, sign: int, *, b_required: bool) -> Item:
    """``a + sign * b``; missing when ``a`` is, or when ``b`` is and ``b_required``."""
    av, alab = a
    bv, blab = b
    have_b = ~np.isnan(bv)
    ok = ~np.isnan(av) & (have_b | (not b_required))
    v = np.where(ok, av + sign * np.where(have_b, bv, 0.0), np.nan)
    op = " + " if sign > 0 else " - "
    lab = np.where(have_b, _wrap(alab) + op + _wrap(blab), alab)
    return v, np.where(ok, lab, "").astype(object)


def build_total_debt(wide: pd.DataFrame) -> Item:
    """Interest-bearing debt, current plus noncurrent, without double counting."""
    t = lambda name: _tag(wide, name)  # noqa: E731
    short = _first(t("ShortTermBorrowings"), t("CommercialPaper"))
    current = _first(
        t("DebtCurrent"),
        t("LongTermDebtAndCapitalLeaseObligationsCurrent"),
        _sum_present(
            t("LongTermDebtCurrent"),
            short,
            t("NotesPayableCurrent"),
            t("LinesOfCreditCurrent"),
            t("OtherShortTermBorrowings"),
        ),
    )
    noncurrent = _first(
        t("LongTermDebtNoncurrent"),
        t("LongTermDebtAndCapitalLeaseObligations"),
        _combine(t("LongTermDebt"), t("LongTermDebtCurrent"), -1, b_required=False),
    )
    return _sum_present(current, noncurrent)


def build_ppe_net(wide: pd.DataFrame) -> Item:
    """Net property, plant and equipment."""
    t = lambda name: _tag(wide, name)  # noqa: E731
    return _first(
        t("PropertyPlantAndEquipmentNet"),
        t("PropertyPlantAndEquipmentAndFinanceLeaseRightOfUseAssetAfterAccumulatedDepreciationAndAmortization"),  # noqa: E501
        _combine(
            t("PropertyPlantAndEquipmentGross"),
            t("AccumulatedDepreciationDepletionAndAmortizationPropertyPlantAndEquipment"),
            -1,
            b_required=True,
        ),
    )


def build_ebitda(wide: pd.DataFrame) -> Item:
    """Operating income plus depreciation and amortisation; missing when either is."""
    t = lambda name: _tag(wide, name)  # noqa: E731
    dna = _first(
        t("DepreciationDepletionAndAmortization"),
        t("DepreciationAmortizationAndAccretionNet"),
        t("DepreciationAndAmortization"),
        _combine(t("Depreciation"), t("AmortizationOfIntangibleAssets"), 1, b_required=False),
    )
    return _combine(t("OperatingIncomeLoss"), dna, 1, b_required=True)


def build_shares(wide: pd.DataFrame) -> Item:
    """Shares outstanding: cover page first, then the balance sheet, then the basic average."""
    t = lambda name: _tag(wide, name)  # noqa: E731
    return _first(
        t(COVER_SHARES),
        t("CommonStockSharesOutstanding"),
        t("WeightedAverageNumberOfSharesOutstandingBasic"),
    )


def build_leases(
    wide: pd.DataFrame, fiscal_year: np.ndarray, debt_label: np.ndarray
) -> Item:
    """Lease liabilities not already inside ``total_debt``."""
    t = lambda name: _tag(wide, name)  # noqa: E731
    n = len(wide)
    none: Item = (np.full(n, np.nan), np.full(n, "", dtype=object))
    before = fiscal_year < LEASE_STANDARD_YEAR

    def only(item: Item, mask: np.ndarray) -> Item:
        return np.where(mask, item[0], np.nan), np.where(mask, item[1], "").astype(object)

    finance = _first(
        t("FinanceLeaseLiability"),
        _sum_present(t("FinanceLeaseLiabilityCurrent"), t("FinanceLeaseLiabilityNoncurrent")),
        only(t("CapitalLeaseObligations"), before),
        only(
            _sum_present(t("CapitalLeaseObligationsCurrent"),
                         t("CapitalLeaseObligationsNoncurrent")),
            before,
        ),
    )
    in_debt = np.char.find(debt_label.astype(str), "CapitalLeaseObligations") >= 0
    finance = only(finance, ~in_debt)
    operating = only(
        _first(
            t("OperatingLeaseLiability"),
            _sum_present(t("OperatingLeaseLiabilityCurrent"),
                         t("OperatingLeaseLiabilityNoncurrent")),
        ),
        ~before,
    )
    if not n:
        return none
    return _sum_present(finance, operating)


def _first_found(tags: tuple[str, ...]) -> Callable[[pd.DataFrame], Item]:
    def build(wide: pd.DataFrame) -> Item:
        return _first(*(_tag(wide, name) for name in tags))

    return build


#: Builders of the columns that depend on the wide fact frame alone.
BUILDERS: dict[str, Callable[[pd.DataFrame], Item]] = {
    **{col: _first_found(tags) for col, tags in FIRST_FOUND.items()},
    "total_debt": build_total_debt,
    "ppe_net": build_ppe_net,
    "ebitda": build_ebitda,
    "shares_outstanding": build_shares,
}


def build_columns(wide: pd.DataFrame, fiscal_year: np.ndarray) -> dict[str, Item]:
    """Every schema column the data sets can fill, with the tag or formula of each value.

    Parameters
    ----------
    wide : pandas.DataFrame
        One row per submission, one column per selected tag (us-gaap tags by bare name, the
        cover-page facts as ``COVER_SHARES`` and ``PUBLIC_FLOAT``), NaN where absent.
    fiscal_year : numpy.ndarray
        Fiscal year of each row (the lease rules depend on it).

    Returns
    -------
    dict of str to (numpy.ndarray, numpy.ndarray)
        Column -> (values, labels); a missing value has the label ``""``.
    """
    out = {col: build(wide) for col, build in BUILDERS.items()}
    out["lease_liabilities"] = build_leases(wide, np.asarray(fiscal_year), out["total_debt"][1])
    return out
