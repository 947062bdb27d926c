"""US-GAAP tags and the formulas that turn them into schema-v1 columns.

Every value comes with the tag or formula that produced it and the flags it earned, so a
user can audit the panel cell by cell. Debt is built from the balance sheet as presented
(:mod:`levgap.ingest.sec_debt`); the other columns from the tags below, evaluated on one
row per submission and fiscal year (balance-sheet tags at that year's balance-sheet date,
flows over that fiscal year).

==================  =========================================================================
column              rule (first found wins unless a sum is stated)
==================  =========================================================================
total_assets        Assets; LiabilitiesAndStockholdersEquity
book_equity         without noncontrolling interests: StockholdersEquity; PartnersCapital;
                    MembersEquity; else the total including noncontrolling interests
                    (StockholdersEquityIncludingPortionAttributableToNoncontrollingInterest,
                    PartnersCapitalIncludingPortionAttributableToNoncontrollingInterest)
                    minus MinorityInterest (the total alone when no such line is filed)
ppe_net             PropertyPlantAndEquipmentNet (or its ...AndFinanceLeaseRightOfUseAsset...
                    variant), plus oil-and-gas property (full cost or successful efforts,
                    net) and public-utility net plant when those are larger than it (they
                    are then separate lines beside it, not inside it); those alone when it is
                    absent; else Gross minus AccumulatedDepreciation...; else a Gross-tagged
                    line whose label says "net" when no accumulated depreciation is filed
                    (flag ppe_net_from_gross_tag); else RealEstateInvestmentPropertyNet
                    (REITs; flag ppe_real_estate)
ebitda              OperatingIncomeLoss + D&A (flag dna_sign_flipped when D&A is filed
                    negative: its absolute value is used); without operating income, pretax
                    income + interest expense + D&A (flag ebitda_from_pretax). D&A: the first
                    of DepreciationDepletionAndAmortization, DepreciationAmortizationAnd
                    AccretionNet, DepreciationAndAmortization, OtherDepreciationAnd
                    Amortization, the cost-of-sales and utility D&A tags, Depreciation (+
                    AmortizationOfIntangibleAssets), DepreciationNonproduction (+ the same)
ebit                OperatingIncomeLoss
interest_expense    InterestExpense; InterestExpenseNonoperating; InterestExpenseDebt;
                    InterestAndDebtExpense (absolute value, flag interest_sign_flipped, when
                    filed negative)
revenue             Revenues; RevenueFromContractWithCustomerExcludingAssessedTax;
                    SalesRevenueNet; RevenueFromContractWithCustomerIncludingAssessedTax
cash                CashAndCashEquivalentsAtCarryingValue; CashCashEquivalentsRestrictedCash
                    AndRestrictedCashEquivalents; Cash; CashAndDueFromBanks
current_assets      AssetsCurrent
current_liabilities LiabilitiesCurrent
total_liabilities   Liabilities; else LiabilitiesAndStockholdersEquity minus equity including
                    noncontrolling interests and minus temporary equity (flag
                    liabilities_derived)
retained_earnings   RetainedEarningsAccumulatedDeficit
dividends_paid      PaymentsOfDividends; PaymentsOfDividendsCommonStock (absolute value, flag
                    dividends_sign_flipped, when filed negative)
rd_expense          ResearchAndDevelopmentExpense; ResearchAndDevelopmentExpenseExcluding
                    AcquiredInProcessCost
lease_liabilities   operating leases only: OperatingLeaseLiability; else OperatingLease
                    LiabilityCurrent + OperatingLeaseLiabilityNoncurrent (whenever filed; no
                    year gate). Finance and capital leases presented on the balance sheet are
                    debt (``total_debt``), so ``leases_as_debt`` adds operating leases only.
shares_outstanding  cover page (the filing's own year): dei:EntityCommonStockSharesOutstanding
                    summed over share classes; CommonStockSharesOutstanding; Weighted
                    AverageNumberOfSharesOutstandingBasic (flag shares_weighted_average)
==================  =========================================================================
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd

#: Column of the wide fact frame holding the cover-page share count (already summed).
COVER_SHARES = "dei:EntityCommonStockSharesOutstanding"
#: Column of the wide fact frame holding the cover-page public float.
PUBLIC_FLOAT = "dei:EntityPublicFloat"

#: Balance-sheet debt tags and the side of the balance sheet each belongs to: "current",
#: "noncurrent" or "either" (the tag does not say, or covers both sides).
DEBT_TAGS: dict[str, str] = {
    **dict.fromkeys((
        "DebtCurrent", "LongTermDebtCurrent", "LongTermDebtAndCapitalLeaseObligationsCurrent",
        "ShortTermBorrowings", "CommercialPaper", "CommercialPaperCurrent",
        "NotesPayableCurrent", "LinesOfCreditCurrent", "OtherShortTermBorrowings",
        "ShortTermBankLoansAndNotesPayable", "ShortTermNonBankLoansAndNotesPayable",
        "LoansPayableCurrent", "NotesPayableToBankCurrent", "OtherLongTermDebtCurrent",
        "SecuredDebtCurrent", "UnsecuredDebtCurrent", "ConvertibleDebtCurrent",
        "ConvertibleNotesPayableCurrent", "ConvertibleSubordinatedDebtCurrent",
        "SeniorNotesCurrent", "SubordinatedDebtCurrent", "CapitalLeaseObligationsCurrent",
        "FinanceLeaseLiabilityCurrent", "NotesPayableRelatedPartiesCurrent",
        "NotesPayableRelatedPartiesClassifiedCurrent", "BridgeLoan", "ShortTermDebtAmount",
        "LongTermDebtMaturitiesRepaymentsOfPrincipalInNextTwelveMonths",
        "MediumTermNotesCurrent", "BankOverdrafts",
        "DebtAndCapitalLeaseObligationsCurrent", "FinanceLeaseAndDebtCurrent",
        "LongTermDebtAndFinanceLeaseLiabilityCurrent", "LoansPayableToBankCurrent",
        "OtherNotesPayableCurrent", "LongtermTransitionBondCurrent",
        "FederalHomeLoanBankAdvancesShortTerm", "ShortTermDebtOther",
    ), "current"),
    **dict.fromkeys((
        "LongTermDebtNoncurrent", "LongTermDebtAndCapitalLeaseObligations",
        "OtherLongTermDebtNoncurrent", "LongTermNotesPayable", "ConvertibleDebtNoncurrent",
        "ConvertibleLongTermNotesPayable", "ConvertibleSubordinatedDebtNoncurrent",
        "SeniorLongTermNotes", "SeniorNotesNoncurrent", "UnsecuredLongTermDebt",
        "SecuredLongTermDebt", "LongTermLoansFromBank", "LongTermLoansPayable",
        "OtherLoansPayableLongTerm", "LongTermLineOfCredit", "SubordinatedLongTermDebt",
        "JuniorSubordinatedLongTermNotes", "MediumTermNotesNoncurrent",
        "LongTermTransitionBond", "RelatedPartyDebtNoncurrent",
        "NotesPayableRelatedPartiesNoncurrent", "NotesPayableRelatedPartiesClassifiedNoncurrent",
        "CapitalLeaseObligationsNoncurrent", "FinanceLeaseLiabilityNoncurrent",
        "PreconfirmationCapitalLeaseObligationsNoncurrent", "LongTermCommercialPaperNoncurrent",
        "CommercialPaperNoncurrent", "LongTermFederalHomeLoanBankAdvancesNoncurrent",
        "LongTermDebtComponentsMortgageLoans", "LongTermDebtAndFinanceLeaseLiabilityNoncurrent",
        "LongTermDebtAndFinanceLeasesNoncurrent", "LongTermNotesAndLoans",
        "JuniorSubordinatedDebentureOwedToUnconsolidatedSubsidiaryTrustNoncurrent",
        "FederalHomeLoanBankAdvancesLongTerm",
    ), "noncurrent"),
    **dict.fromkeys((
        "LongTermDebt", "DebtAndCapitalLeaseObligations", "DebtLongtermAndShorttermCombinedAmount",
        "LongTermDebtAndCapitalLeaseObligationsIncludingCurrentMaturities",
        "DebtInstrumentCarryingAmount", "NotesPayable", "LoansPayable", "SeniorNotes",
        "UnsecuredDebt", "SecuredDebt", "SubordinatedDebt", "JuniorSubordinatedNotes",
        "ConvertibleNotesPayable", "ConvertibleDebt", "MediumTermNotes", "OtherLongTermDebt",
        "OtherBorrowings", "LineOfCredit", "LineOfCreditFacilityAmountOutstanding",
        "CapitalLeaseObligations", "FinanceLeaseLiability", "AdvancesFromFederalHomeLoanBanks",
        "TransfersAccountedForAsSecuredBorrowingsAssociatedLiabilitiesCarryingAmount",
        "NotesAndLoansPayable", "DebtInstrumentPrincipalOutstanding", "ConstructionLoan",
        "SecuredDebtOther", "LongTermDebtAndFinanceLeaseLiability", "LoansPayableToBank",
        "OtherLoansPayable", "OtherNotesPayable", "FederalHomeLoanBankAdvances",
        "FederalHomeLoanBankAdvancesLongTermAndShortTerm",
        "JuniorSubordinatedDebentureOwedToUnconsolidatedSubsidiaryTrust",
    ), "either"),
}

#: Debt tags that name a total of other debt lines; only these (or lines labelled "total",
#: or lines after a "less ..." line) are recognised as subtotals of debt lines above them.
DEBT_AGGREGATES: frozenset[str] = frozenset({
    "DebtCurrent", "LongTermDebtAndCapitalLeaseObligationsCurrent", "ShortTermBorrowings",
    "LongTermDebtNoncurrent", "LongTermDebtAndCapitalLeaseObligations", "LongTermDebt",
    "DebtAndCapitalLeaseObligations", "DebtLongtermAndShorttermCombinedAmount",
    "LongTermDebtAndCapitalLeaseObligationsIncludingCurrentMaturities",
    "DebtInstrumentCarryingAmount", "DebtAndCapitalLeaseObligationsCurrent",
    "FinanceLeaseAndDebtCurrent", "LongTermDebtAndFinanceLeaseLiabilityCurrent",
    "LongTermDebtAndFinanceLeaseLiabilityNoncurrent", "LongTermDebtAndFinanceLeasesNoncurrent",
    "LongTermDebtAndFinanceLeaseLiability",
})

#: Tags for the total of the balance sheet's debt when the filing has no presentation
#: (no pre.txt lines): the current and the noncurrent side, each the first found.
FALLBACK_CURRENT: tuple[tuple[str, ...], ...] = (
    ("DebtCurrent",),
    ("LongTermDebtAndCapitalLeaseObligationsCurrent", "ShortTermBorrowings"),
    ("LongTermDebtCurrent", "ShortTermBorrowings", "NotesPayableCurrent",
     "LinesOfCreditCurrent", "OtherShortTermBorrowings"),
)
FALLBACK_NONCURRENT: tuple[str, ...] = (
    "LongTermDebtNoncurrent", "LongTermDebtAndCapitalLeaseObligations",
)

D_AND_A: tuple[str, ...] = (
    "DepreciationDepletionAndAmortization", "DepreciationAmortizationAndAccretionNet",
    "DepreciationAndAmortization", "OtherDepreciationAndAmortization",
    "AccumulatedDepreciationDepletionAndAmortizationExpensePropertyPlantAndEquipmentCurrentCharge",
    "CostOfGoodsSoldDepreciationDepletionAndAmortization",
    "CostOfGoodsSoldDepreciationAndAmortization", "CostOfServicesDepreciationAndAmortization",
    "UtilitiesOperatingExpenseDepreciationAndAmortization",
)
PRETAX: tuple[str, ...] = (
    "IncomeLossFromContinuingOperationsBeforeIncomeTaxesMinorityInterestAndIncomeLossFromEquityMethodInvestments",  # noqa: E501
    "IncomeLossFromContinuingOperationsBeforeIncomeTaxesExtraordinaryItemsNoncontrollingInterest",  # noqa: E501
)
INTEREST: tuple[str, ...] = (
    "InterestExpense", "InterestExpenseNonoperating", "InterestExpenseDebt",
    "InterestAndDebtExpense",
)
OIL_GAS_UTILITY: tuple[str, ...] = (
    "OilAndGasPropertyFullCostMethodNet", "OilAndGasPropertySuccessfulEffortMethodNet",
    "PublicUtilitiesPropertyPlantAndEquipmentNet",
)
PPE_NET: tuple[str, ...] = (
    "PropertyPlantAndEquipmentNet",
    "PropertyPlantAndEquipmentAndFinanceLeaseRightOfUseAssetAfterAccumulatedDepreciationAndAmortization",  # noqa: E501
)
PPE_GROSS = "PropertyPlantAndEquipmentGross"
PPE_ACCUMULATED = "AccumulatedDepreciationDepletionAndAmortizationPropertyPlantAndEquipment"
EQUITY_WITH_NCI: tuple[str, ...] = (
    "StockholdersEquityIncludingPortionAttributableToNoncontrollingInterest",
    "PartnersCapitalIncludingPortionAttributableToNoncontrollingInterest",
)
TEMPORARY_EQUITY: tuple[str, ...] = (
    "TemporaryEquityCarryingAmountAttributableToParent", "TemporaryEquityCarryingAmount",
    "RedeemableNoncontrollingInterestEquityCarryingAmount",
    "TemporaryEquityCarryingAmountIncludingPortionAttributableToNoncontrollingInterests",
)

#: Columns filled by the first tag found, in order.
FIRST_FOUND: dict[str, tuple[str, ...]] = {
    "total_assets": ("Assets", "LiabilitiesAndStockholdersEquity"),
    "revenue": (
        "Revenues", "RevenueFromContractWithCustomerExcludingAssessedTax", "SalesRevenueNet",
        "RevenueFromContractWithCustomerIncludingAssessedTax",
    ),
    "cash": (
        "CashAndCashEquivalentsAtCarryingValue",
        "CashCashEquivalentsRestrictedCashAndRestrictedCashEquivalents", "Cash",
        "CashAndDueFromBanks",
    ),
    "rd_expense": (
        "ResearchAndDevelopmentExpense",
        "ResearchAndDevelopmentExpenseExcludingAcquiredInProcessCost",
    ),
    "current_assets": ("AssetsCurrent",),
    "current_liabilities": ("LiabilitiesCurrent",),
    "retained_earnings": ("RetainedEarningsAccumulatedDeficit",),
    "ebit": ("OperatingIncomeLoss",),
}

_INSTANT = (
    "Assets", "LiabilitiesAndStockholdersEquity", "Liabilities", "AssetsCurrent",
    "LiabilitiesCurrent", "StockholdersEquity", "PartnersCapital", "MembersEquity",
    *EQUITY_WITH_NCI, "MinorityInterest", *TEMPORARY_EQUITY,
    "RetainedEarningsAccumulatedDeficit", *PPE_NET, *OIL_GAS_UTILITY, PPE_GROSS,
    PPE_ACCUMULATED, "RealEstateInvestmentPropertyNet",
    "CashAndCashEquivalentsAtCarryingValue",
    "CashCashEquivalentsRestrictedCashAndRestrictedCashEquivalents", "Cash",
    "CashAndDueFromBanks", "OperatingLeaseLiability", "OperatingLeaseLiabilityCurrent",
    "OperatingLeaseLiabilityNoncurrent", *DEBT_TAGS,
)
_FLOW = (
    "OperatingIncomeLoss", *D_AND_A, "Depreciation", "DepreciationNonproduction",
    "AmortizationOfIntangibleAssets", *PRETAX, *INTEREST, *FIRST_FOUND["revenue"],
    *FIRST_FOUND["rd_expense"], "PaymentsOfDividends", "PaymentsOfDividendsCommonStock",
)

#: How each us-gaap tag is selected: balance-sheet "instant" (qtrs 0, money), "flow"
#: (qtrs 4, money), "shares_instant" (qtrs 0, shares) or "shares_flow" (qtrs 4, shares).
TAG_KINDS: dict[str, str] = {
    **dict.fromkeys(_INSTANT, "instant"),
    **dict.fromkeys(_FLOW, "flow"),
    "CommonStockSharesOutstanding": "shares_instant",
    "WeightedAverageNumberOfSharesOutstandingBasic": "shares_flow",
}

#: Cover-page (dei) tags, selected by their own date rules (see ``levgap.ingest.sec_facts``).
DEI_TAGS: tuple[str, ...] = ("EntityCommonStockSharesOutstanding", "EntityPublicFloat")

#: Every standard tag the importer reads from num.txt (besides the balance-sheet lines).
NEEDED_TAGS: tuple[str, ...] = (*TAG_KINDS, *DEI_TAGS)


@dataclass(frozen=True, slots=True)
class Item:
    """Values of one column for every row, with the formula and flags behind each.

    Parameters
    ----------
    value : numpy.ndarray of float
        NaN where missing.
    label : numpy.ndarray of object
        The tag or formula that produced each value; ``""`` where missing.
    flag : numpy.ndarray of object
        ``;``-joined flags of each value; ``""`` when none.
    """

    value: np.ndarray
    label: np.ndarray
    flag: np.ndarray

    @staticmethod
    def missing(n: int) -> Item:
        """An item missing on every row."""
        return Item(np.full(n, np.nan), np.full(n, "", dtype=object),
                    np.full(n, "", dtype=object))

    def flagged(self, where: np.ndarray, flag: str) -> Item:
        """The same item with ``flag`` added where ``where`` holds (and a value exists)."""
        add = where & ~np.isnan(self.value)
        joined = np.where(self.flag == "", flag, self.flag + ";" + flag)
        return Item(self.value, self.label, np.where(add, joined, self.flag).astype(object))

    def where(self, mask: np.ndarray) -> Item:
        """The item where ``mask`` holds, missing elsewhere."""
        return Item(np.where(mask, self.value, np.nan),
                    np.where(mask, self.label, "").astype(object),
                    np.where(mask, self.flag, "").astype(object))


def tag_item(wide: pd.DataFrame, tag: str) -> Item:
    """One tag as an item (missing where the frame has no value)."""
    if tag in wide.columns:
        v = wide[tag].to_numpy(dtype=float, na_value=np.nan)
    else:
        v = np.full(len(wide), np.nan)
    label = np.where(np.isnan(v), "", tag).astype(object)
    return Item(v, label, np.full(len(v), "", dtype=object))


def _wrap(label: np.ndarray) -> np.ndarray:
    compound = np.char.find(label.astype(str), " ") >= 0
    return np.where(compound, "(" + label + ")", label).astype(object)


def first(*items: Item) -> Item:
    """The first item with a value, row by row."""
    out = Item.missing(len(items[0].value))
    v, lab, flag = out.value, out.label, out.flag
    for it in reversed(items):
        have = ~np.isnan(it.value)
        v = np.where(have, it.value, v)
        lab = np.where(have, it.label, lab)
        flag = np.where(have, it.flag, flag)
    return Item(v, lab.astype(object), flag.astype(object))


def _join_flags(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    both = (a != "") & (b != "")
    return np.where(both, a + ";" + b, np.where(a != "", a, b)).astype(object)


def combine(a: Item, b: Item, sign: int, *, b_required: bool) -> Item:
    """``a + sign * b``; missing when ``a`` is, or when ``b`` is and ``b_required``."""
    have_b = ~np.isnan(b.value)
    ok = ~np.isnan(a.value) & (have_b | (not b_required))
    v = np.where(ok, a.value + sign * np.where(have_b, b.value, 0.0), np.nan)
    op = " + " if sign > 0 else " - "
    lab = np.where(have_b, _wrap(a.label) + op + _wrap(b.label), a.label)
    flag = np.where(have_b, _join_flags(a.flag, b.flag), a.flag)
    return Item(v, np.where(ok, lab, "").astype(object), np.where(ok, flag, "").astype(object))


def sum_present(*items: Item) -> Item:
    """Sum of the items present; missing when none is."""
    vals = np.column_stack([it.value for it in items])
    have = ~np.isnan(vals)
    any_ = have.any(axis=1)
    v = np.where(any_, np.nansum(np.where(have, vals, 0.0), axis=1), np.nan)
    single = have.sum(axis=1) == 1
    lab = np.full(len(v), "", dtype=object)
    flag = np.full(len(v), "", dtype=object)
    for it in items:
        part = np.where(np.isnan(it.value), "",
                        np.where(single, it.label, _wrap(it.label))).astype(object)
        lab = np.where(lab == "", part, np.where(part == "", lab, lab + " + " + part))
        flag = _join_flags(flag, np.where(np.isnan(it.value), "", it.flag).astype(object))
    return Item(v, lab.astype(object), flag)


def absolute(item: Item, flag: str) -> Item:
    """Absolute values; rows whose value was negative get ``flag``."""
    negative = item.value < 0
    out = Item(np.abs(item.value), item.label, item.flag)
    return out.flagged(negative, flag)


def _first_found(tags: tuple[str, ...]) -> Callable[[pd.DataFrame], Item]:
    def build(wide: pd.DataFrame) -> Item:
        return first(*(tag_item(wide, name) for name in tags))

    return build


def build_book_equity(wide: pd.DataFrame) -> Item:
    """Equity of the parent's shareholders (noncontrolling interests left out)."""
    t = lambda name: tag_item(wide, name)  # noqa: E731
    with_nci = first(*(t(name) for name in EQUITY_WITH_NCI))
    return first(
        t("StockholdersEquity"), t("PartnersCapital"), t("MembersEquity"),
        combine(with_nci, t("MinorityInterest"), -1, b_required=False),
    )


def build_ppe_net(wide: pd.DataFrame, gross_is_net: np.ndarray | None = None) -> Item:
    """Net property, plant and equipment (see the module table).

    Parameters
    ----------
    wide : pandas.DataFrame
    gross_is_net : numpy.ndarray of bool, optional
        Rows whose balance sheet labels its ``PropertyPlantAndEquipmentGross`` line "net".
    """
    t = lambda name: tag_item(wide, name)  # noqa: E731
    n = len(wide)
    net = first(*(t(name) for name in PPE_NET))
    special = sum_present(*(t(name) for name in OIL_GAS_UTILITY))
    beside = ~np.isnan(net.value) & (special.value > net.value)
    with_special = first(
        sum_present(net, special).where(beside),
        net,
        special,
    )
    accumulated = t(PPE_ACCUMULATED)
    gross_net = combine(t(PPE_GROSS), accumulated, -1, b_required=True)
    mask = np.zeros(n, dtype=bool) if gross_is_net is None else np.asarray(gross_is_net)
    labelled_net = t(PPE_GROSS).where(mask & np.isnan(accumulated.value))
    labelled_net = labelled_net.flagged(np.ones(n, dtype=bool), "ppe_net_from_gross_tag")
    reit = t("RealEstateInvestmentPropertyNet").flagged(np.ones(n, dtype=bool),
                                                          "ppe_real_estate")
    return first(with_special, gross_net, labelled_net, reit)


def build_dna(wide: pd.DataFrame) -> Item:
    """Depreciation and amortisation, absolute value (flagged when filed negative)."""
    t = lambda name: tag_item(wide, name)  # noqa: E731
    dna = first(
        *(t(name) for name in D_AND_A),
        combine(t("Depreciation"), t("AmortizationOfIntangibleAssets"), 1, b_required=False),
        combine(t("DepreciationNonproduction"), t("AmortizationOfIntangibleAssets"), 1,
                b_required=False),
    )
    return absolute(dna, "dna_sign_flipped")


def build_interest(wide: pd.DataFrame) -> Item:
    """Interest expense, absolute value (flagged when filed negative)."""
    return absolute(_first_found(INTEREST)(wide), "interest_sign_flipped")


def build_ebitda(wide: pd.DataFrame) -> Item:
    """Operating income + D&A; else pretax income + interest expense + D&A (flagged)."""
    dna = build_dna(wide)
    operating = combine(tag_item(wide, "OperatingIncomeLoss"), dna, 1, b_required=True)
    pretax = first(*(tag_item(wide, name) for name in PRETAX))
    alternative = combine(combine(pretax, build_interest(wide), 1, b_required=True), dna, 1,
                          b_required=True)
    alternative = alternative.flagged(np.ones(len(wide), dtype=bool), "ebitda_from_pretax")
    no_operating = np.isnan(tag_item(wide, "OperatingIncomeLoss").value)
    return first(operating, alternative.where(no_operating))


def build_total_liabilities(wide: pd.DataFrame) -> Item:
    """Liabilities; else total liabilities and equity minus equity and temporary equity."""
    t = lambda name: tag_item(wide, name)  # noqa: E731
    with_nci = first(
        *(t(name) for name in EQUITY_WITH_NCI),
        combine(first(t("StockholdersEquity"), t("PartnersCapital"), t("MembersEquity")),
                t("MinorityInterest"), 1, b_required=False),
    )
    derived = combine(t("LiabilitiesAndStockholdersEquity"), with_nci, -1, b_required=True)
    temporary = first(*(t(name) for name in TEMPORARY_EQUITY))
    derived = combine(derived, temporary, -1, b_required=False)
    derived = derived.flagged(np.ones(len(wide), dtype=bool), "liabilities_derived")
    return first(t("Liabilities"), derived)


def build_dividends(wide: pd.DataFrame) -> Item:
    """Cash dividends paid, absolute value (flagged when filed negative)."""
    paid = _first_found(("PaymentsOfDividends", "PaymentsOfDividendsCommonStock"))(wide)
    return absolute(paid, "dividends_sign_flipped")


def build_leases(wide: pd.DataFrame) -> Item:
    """Operating lease liabilities (finance leases on the balance sheet are debt)."""
    t = lambda name: tag_item(wide, name)  # noqa: E731
    return first(
        t("OperatingLeaseLiability"),
        sum_present(t("OperatingLeaseLiabilityCurrent"), t("OperatingLeaseLiabilityNoncurrent")),
    )


def build_shares(wide: pd.DataFrame) -> Item:
    """Shares outstanding: cover page, balance sheet, then the basic average (flagged)."""
    t = lambda name: tag_item(wide, name)  # noqa: E731
    average = t("WeightedAverageNumberOfSharesOutstandingBasic")
    average = average.flagged(np.ones(len(wide), dtype=bool), "shares_weighted_average")
    return first(t(COVER_SHARES), t("CommonStockSharesOutstanding"), average)


#: Builders of the columns that depend on the wide fact frame alone (debt and PP&E, which
#: also read the presentation, are built by the caller).
BUILDERS: dict[str, Callable[[pd.DataFrame], Item]] = {
    **{col: _first_found(tags) for col, tags in FIRST_FOUND.items()},
    "book_equity": build_book_equity,
    "ebitda": build_ebitda,
    "interest_expense": build_interest,
    "total_liabilities": build_total_liabilities,
    "dividends_paid": build_dividends,
    "lease_liabilities": build_leases,
    "shares_outstanding": build_shares,
}


def build_columns(wide: pd.DataFrame, gross_is_net: np.ndarray | None = None) -> dict[str, Item]:
    """Every column the data sets fill from tags alone (all but ``total_debt``).

    Parameters
    ----------
    wide : pandas.DataFrame
        One row per submission and fiscal year, one column per selected tag (us-gaap tags by
        bare name, the cover-page facts as ``COVER_SHARES`` and ``PUBLIC_FLOAT``), NaN
        where absent.
    gross_is_net : numpy.ndarray of bool, optional
        See :func:`build_ppe_net`.

    Returns
    -------
    dict of str to Item
    """
    out = {col: build(wide) for col, build in BUILDERS.items()}
    out["ppe_net"] = build_ppe_net(wide, gross_is_net)
    return out
