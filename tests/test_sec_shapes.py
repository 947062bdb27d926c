"""The statement rules of the SEC importer on invented filers in the shapes real filings take.

Each firm of ``_sec_shapes`` reproduces the structure of a balance sheet, income statement or
filing found in the shared 2010 quarters (the real filer is named in a comment, for the
reader); names, CIKs and most numbers are invented. Every expected value is computed by
hand beside its assertion. Quarters are written in both layouts of the data sets.
"""

from __future__ import annotations

import sys
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from levgap.ingest.sec import SecImport, import_sec

sys.path.insert(0, str(Path(__file__).parent))
from _sec_shapes import PRIOR, TWO_BACK, Firm, Line, basic, flow, instant, write_quarter  # noqa: E402,I001


def _firms() -> list[Firm]:
    return [
        # Separate notes lines, no "total debt" line (Amgen's 2009 balance sheet: 0 + 4,512
        # + 6,089 = 10,601 million); prior-year values give a fiscal-2019 row; flows of
        # three years give a 2018 year that has no balance sheet.
        basic(9200001, "ALDERCROFT BIOLOGICS", [
            Line("NotesPayableCurrent", "Current portion of other long-term debt", 0, 0),
            Line("ConvertibleDebtNoncurrent", "Convertible notes", 4512, 4257),
            Line("LongTermNotesPayable", "Other long-term debt", 6089, 5095),
            Line("AssetsCurrent", "Total current assets", 18932, 16000),
            Line("LiabilitiesCurrent", "Total current liabilities", 3873, 3500),
            Line("RetainedEarningsAccumulatedDeficit", "Accumulated deficit", -4322, -4000),
        ], assets=39629, facts=[
            flow("OperatingIncomeLoss", 5000), flow("OperatingIncomeLoss", 4800, PRIOR),
            flow("OperatingIncomeLoss", 4600, TWO_BACK),
            flow("DepreciationDepletionAndAmortization", 1100),
            flow("DepreciationDepletionAndAmortization", 1000, PRIOR),
            flow("DepreciationDepletionAndAmortization", 900, TWO_BACK),
            flow("PaymentsOfDividends", 250), flow("Revenues", 14642),
            instant("PropertyPlantAndEquipmentNet", 5738), instant("Liabilities", 16962),
            instant("PropertyPlantAndEquipmentNet", 5879, PRIOR),
        ]),
        # Repurchase agreements inside "total short-term borrowings", and a "total borrowed
        # funds" line (Regions Financial's 2009 balance sheet: 1,893 + 1,775 = 3,668;
        # 3,668 + 18,464 = 22,132 million).
        basic(9200002, "BRACKENRIDGE BANCORP", [
            Line("FederalFundsPurchasedAndSecuritiesSoldUnderAgreementsToRepurchase",
                 "Federal funds purchased and securities sold under agreements to repurchase",
                 1893),
            Line("OtherShortTermBorrowings", "Other short-term borrowings", 1775),
            Line("ShortTermBorrowings", "Total short-term borrowings", 3668),
            Line("LongTermDebt", "Long-term borrowings", 18464),
            Line("DebtAndCapitalLeaseObligations", "Total borrowed funds", 22132),
        ], assets=142318),
        # Filer-defined debt lines whose labels name debt (Target's 2009 balance sheet:
        # 796 + 900 + 10,643 + 4,475 = 16,814 million).
        basic(9200003, "CASTERLY GOODS STORES", [
            Line("OtherShortTermBorrowings", "Unsecured debt and other borrowings", 796),
            Line("NonrecourseDebtCollateralizedByCreditCardReceivablesCurrent",
                 "Nonrecourse debt collateralized by credit card receivables", 900,
                 custom=True),
            Line("UnsecuredLongTermDebt", "Unsecured debt and other borrowings", 10643),
            Line("NonrecourseDebtCollateralizedByCreditCardReceivablesLongTerm",
                 "Nonrecourse debt collateralized by credit card receivables", 4475,
                 custom=True),
        ], assets=44533),
        # Filer-defined tags whose labels name only the business line, the tag names the
        # debt (Caterpillar's 2009 balance sheet).
        basic(9200004, "DUNMORE EARTHMOVERS", [
            Line("ShortTermBorrowingsMachineryAndEngines", "Machinery and Engines", 433,
                 custom=True),
            Line("ShortTermBorrowingsFinancialProducts", "Financial Products", 3650,
                 custom=True),
            Line("LongTermDebtDueAfterOneYearFinancialProducts", "Financial Products", 16195,
                 custom=True),
        ], assets=60038),
        # A line that mixes capital leases with other liabilities, no debt line (Yahoo's
        # 2009 balance sheet): 0, flagged zero and possibly partial.
        basic(9200005, "EASTWICK SEARCH", [
            Line("CapitalLeaseObligationsAndOtherLiabilitiesNoncurrent",
                 "Capital lease and other long-term liabilities", 83, custom=True),
        ], assets=14936),
        # No debt line at all (Google's 2009 balance sheet): 0, flagged.
        basic(9200006, "FAIRLEA SOFTWARE", [
            Line("AccountsPayableCurrent", "Accounts payable", 215),
        ], assets=40497),
        # No debt line, but debt facts of a segment: missing, not 0.
        basic(9200007, "GLENHOLM HOLDINGS", [], assets=5000, facts=[
            instant("LongTermDebt", 700, segments="LegalEntity=GlenholmFinanceLlc;",
                    coreg="GlenholmFinanceLlc"),
        ]),
        # "Total long-term debt" after its lines (Safeway's 2009 balance sheet: 509.2 + 31.6
        # + 3,874.3 + 486.6 = 4,901.7; the total 4,360.9 is not added).
        basic(9200008, "HARROWGATE GROCERS", [
            Line("LongTermDebtCurrent", "Current maturities of notes and debentures", 509.2),
            Line("CapitalLeaseObligationsCurrent", "Current obligations under capital leases",
                 31.6),
            Line("LongTermDebtNoncurrent", "Notes and debentures", 3874.3),
            Line("CapitalLeaseObligationsNoncurrent", "Obligations under capital leases",
                 486.6),
            Line("LongTermDebtAndCapitalLeaseObligations", "Total long-term debt", 4360.9),
        ], assets=14963.6),
        # A noncurrent line equal by chance to the two current lines above it: not a
        # subtotal (a noncurrent total cannot sum current lines): 20 + 30 + 50 = 100.
        basic(9200009, "INGLEBY TOOLS", [
            Line("ShortTermBorrowings", "Short-term borrowings", 20),
            Line("LongTermDebtCurrent", "Current portion of long-term debt", 30),
            Line("LongTermDebtNoncurrent", "Long-term debt", 50),
        ], assets=1000),
        # A multi-registrant filing whose consolidated figures sit under coreg
        # ParentCompany (Textron's 2009 10-K): used when they balance.
        Firm(9200010, "JESSOP CONGLOMERATE", facts=[
            instant("Assets", 18940, segments="LegalEntity=ParentCompany;",
                    coreg="ParentCompany"),
            instant("LiabilitiesAndStockholdersEquity", 18940,
                    segments="LegalEntity=ParentCompany;", coreg="ParentCompany"),
            instant("StockholdersEquity", 2826, segments="LegalEntity=ParentCompany;",
                    coreg="ParentCompany"),
            instant("LongTermDebt", 9000, segments="LegalEntity=ParentCompany;",
                    coreg="ParentCompany"),
            instant("Assets", 7512, segments="BusinessSegments=FinanceGroup;"),
        ]),
        # The same, not balancing: left out.
        Firm(9200011, "KELLOW UTILITY GROUP", sic="3560", facts=[
            instant("Assets", 500, segments="LegalEntity=ParentCompany;",
                    coreg="ParentCompany"),
            instant("LiabilitiesAndStockholdersEquity", 480,
                    segments="LegalEntity=ParentCompany;", coreg="ParentCompany"),
        ]),
        # A foreign private issuer's annual report.
        basic(9200012, "LANTERN OVERSEAS PLC", [], form="20-F"),
        # A 10-K in the IFRS taxonomy.
        Firm(9200013, "MARRICK INTERNATIONAL", facts=[
            instant("Assets", 900, version="ifrs-full/2020"),
        ]),
        # A filer reporting in Canadian dollars (Imperial Oil, Tim Hortons in 2010q1).
        Firm(9200014, "NORTHCOTE PETROLEUM", facts=[
            instant("Assets", 16000, uom="CAD"), instant("StockholdersEquity", 9000, uom="CAD"),
            instant("LongTermDebtNoncurrent", 200, uom="CAD"),
            instant("Assets", 15000, uom="CAD", ddate=PRIOR),
        ]),
        # A listed parent and its operating partnership with the same total assets (Equity
        # Residential and ERP Operating LP): the one with the larger float is the parent.
        basic(9200015, "OAKHURST RESIDENTIAL TRUST", [
            Line("NotesPayable", "Notes, net", 5000),
        ], assets=15417.515, facts=[instant("EntityPublicFloat", 9000, ddate="20200630")]),
        basic(9200016, "OAKHURST OPERATING LP", [
            Line("NotesPayable", "Notes, net", 5000),
        ], assets=15417.515),
        # Oil-and-gas property beside a smaller PP&E line (Range Resources' 2009 balance
        # sheet: 91.8 + 4,898.8 = 4,990.6 million).
        Firm(9200017, "PENROSE ENERGY", facts=[
            instant("Assets", 5395.9), instant("PropertyPlantAndEquipmentNet", 91.8),
            instant("OilAndGasPropertySuccessfulEffortMethodNet", 4898.8),
        ]),
        # Equity including noncontrolling interests, no StockholdersEquity line (Verizon's
        # 2009 balance sheet: 84,367 - 42,761 = 41,606 million).
        Firm(9200018, "QUAYLE TELECOM", facts=[
            instant("Assets", 227251),
            instant("StockholdersEquityIncludingPortionAttributableToNoncontrollingInterest",
                    84367),
            instant("MinorityInterest", 42761),
        ]),
        # D&A filed negative (Southwest Airlines' 2009 cash-flow statement: 262 + |-616| =
        # 878 million).
        Firm(9200019, "REDMIRE AIRWAYS", facts=[
            instant("Assets", 14269), flow("OperatingIncomeLoss", 262),
            flow("DepreciationAndAmortization", -616),
        ]),
        # No operating income (Target's single-step income statement): pretax income +
        # interest expense (filed negative) + D&A = 3,872 + 707 + 2,023 = 6,602.
        Firm(9200020, "SALTWICK MERCHANTS", facts=[
            instant("Assets", 44533),
            flow("IncomeLossFromContinuingOperationsBeforeIncomeTaxesMinorityInterestAndIncome"
                 "LossFromEquityMethodInvestments", 3872),
            flow("InterestExpense", -707), flow("DepreciationDepletionAndAmortization", 2023),
        ]),
        # A REIT: real estate, no PP&E line.
        Firm(9200021, "THORNBURY PROPERTIES", sic="6798", facts=[
            instant("Assets", 12000), instant("RealEstateInvestmentPropertyNet", 9500),
        ]),
        # A net PP&E line tagged gross, no accumulated depreciation filed.
        Firm(9200022, "UPTON MILLS", lines=[
            Line("PropertyPlantAndEquipmentGross", "Property, plant and equipment, net", 420),
            Line("Assets", "Total assets", 1000),
        ]),
        # A balance-sheet line whose fact the file lost.
        Firm(9200023, "VERNHAM FOODS", lines=[
            Line("Assets", "Total assets", 800),
            Line("LongTermDebtNoncurrent", "Long-term debt", 300),
        ], lost=("LongTermDebtNoncurrent",)),
        # A 10-K/A alone when only 10-K reports are asked for.
        basic(9200024, "WADDINGTON CABLE", [], form="10-K/A"),
        # Only the weighted-average share count.
        Firm(9200025, "YEADON PRINTWORKS", facts=[
            instant("Assets", 100), flow("WeightedAverageNumberOfSharesOutstandingBasic", 40,
                                         uom="shares"),
        ]),
        # A filer-defined line "including" the lines above it, one of them a fair-value hedge
        # adjustment that is not debt (Kroger's balance sheet at 31 Jan 2010: 7,420 + 57 =
        # 7,477; total debt 579 + 7,477 = 8,056, and 558 + 7,505 = 8,063 a year earlier).
        basic(9200026, "ABBOTSLEY MARKETS", [
            Line("LongTermDebtAndCapitalLeaseObligationsCurrent", "Current portion of long-term "
                 "debt including obligations under capital leases and financing obligations",
                 579, 558),
            Line("AccountsPayableTradeCurrent", "Trade accounts payable", 3890, 3822),
            Line("LiabilitiesCurrent", "Total current liabilities", 7714, 7629),
            Line("LongTermDebtAndCapitalLeaseObligations", "Face-value of long-term debt "
                 "including obligations under capital leases and financing obligations", 7420,
                 7460),
            Line("AdjustmentRelatedToFairValueInterestRateHedges",
                 "Adjustment related to fair-value of interest rate hedges", 57, 45,
                 custom=True),
            Line("LongTermDebtIncludingObligationsUnderCapitalLeasesAndFinancingObligations",
                 "Long-term debt including obligations under capital leases and financing "
                 "obligations", 7477, 7505, custom=True),
        ], assets=23093),
        # A filer-defined total of the long-term liabilities other than debt, its tag named
        # "excluding debt" (CIK 740761's balance sheet at 31 Dec 2009: 7.566 + 499.666).
        basic(9200027, "BARNSDALE INDUSTRIAL", [
            Line("DebtCurrent", "Current maturities of long-term debt and short-term "
                 "obligations", 7.566),
            Line("DeferredTaxLiabilitiesNoncurrent", "Deferred income taxes", 82.26),
            Line("PensionAndOtherPostretirementDefinedBenefitPlansLiabilitiesNoncurrent",
                 "Pension and other", 198),
            Line("NoncurrentLiabilitiesExcludingDebt", "Total Long-Term Liabilities", 280.26,
                 custom=True),
            Line("LongTermDebtNoncurrent", "LONG-TERM DEBT, less current maturities", 499.666),
        ], assets=2704.112),
        # A filer-defined tag named debt whose label names a derivative (CIK 1130310's
        # balance sheet at 31 Dec 2009: "Indexed debt securities derivative" 201 under
        # IndexedDebtCurrent is not debt; 541 + 6,314 are).
        basic(9200028, "CALDERBROOK POWER", [
            Line("OtherLongTermDebtCurrent", "Current portion of other long-term debt", 541),
            Line("IndexedDebtCurrent", "Indexed debt securities derivative", 201, custom=True),
            Line("OtherLongTermDebtNoncurrent", "Other", 6314),
        ], assets=19773),
        # Debt lines whose facts are filed only for segments (PACCAR's 2009 balance sheet:
        # commercial paper and bank loans 3,011.2 of Financial Services; the old layout
        # drops these facts): the debt exists, the value is missing, not 0.
        basic(9200029, "DALBY TRUCKWORKS", [
            Line("LongTermDebtNoncurrent", "Long-term debt", 172.3),
            Line("CommercialPaperAndBankLoans", "Commercial paper and bank loans", 3011.2,
                 custom=True),
            Line("MediumTermNotes", "Term notes", 2889.3),
        ], assets=14569.3, lost=("LongTermDebtNoncurrent", "CommercialPaperAndBankLoans",
                                 "MediumTermNotes"),
            facts=[instant("LongTermDebtNoncurrent", 172.3, segments="Scenario=Truck;"),
                   instant("MediumTermNotes", 2889.3, segments="Scenario=Financial;")]),
        # A debt line filed as 0 a year earlier and nil now, under a heading line (CIK
        # 889900: LongTermLineOfCredit 0; the old layout's pre.txt lists headings such as
        # "Long-term debt:", which have no facts): 0 both years, flagged.
        basic(9200030, "EDGECOTT DESIGNS", [
            Line("LongTermDebtAndCapitalLeaseObligationsAbstract", "Long-term debt:", None),
            Line("LongTermLineOfCredit", "Line of credit", None, 0),
        ], assets=700),
        # A liabilities line "including" others that equals by chance the total assets and
        # the borrowings between them (1,000 + 100): not their subtotal; 100 + 1,100.
        Firm(9200032, "GARSTANG WORKS", lines=[
            Line("Assets", "Total assets", 1000),
            Line("ShortTermBorrowings", "Short-term borrowings", 100),
            Line("LongTermDebt", "Notes payable, including current portion", 1100),
        ]),
        # A noncurrent line "including" others equal by chance to the two current lines
        # above it: not their subtotal (20 + 30 + 50).
        basic(9200033, "HATHERLEIGH TOOLS", [
            Line("ShortTermBorrowings", "Short-term borrowings", 20),
            Line("LongTermDebtCurrent", "Current portion of long-term debt", 30),
            Line("LongTermDebtIncludingCapitalLeases", "Long-term debt including capital leases",
                 50, custom=True),
        ], assets=1000),
        # A filer-defined debt line alone, its fact lost: missing and said.
        basic(9200034, "INCHCAPE FABRICS", [
            Line("BankLoansPayable", "Bank loans", 40, custom=True),
        ], assets=400, lost=("BankLoansPayable",)),
        # No presentation, debt tags filed as 0: 0 from the tags, flagged.
        Firm(9200031, "FENWICK ASSAYS", facts=[
            instant("Assets", 300), instant("DebtCurrent", 0),
            instant("LongTermDebtNoncurrent", 0),
        ]),
    ]


@pytest.fixture(scope="module", params=["current", "old"])
def shapes(request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory
           ) -> tuple[str, SecImport]:
    folder = write_quarter(tmp_path_factory.mktemp(request.param), _firms(), request.param)
    return request.param, import_sec([folder], exclude_sic=None, workers=1)


def _row(result: SecImport, cik: int, year: int = 2020) -> pd.Series:
    p = result.panel
    hit = p.loc[(p["firm_id"] == str(cik)) & (p["fiscal_year"] == year)]
    assert len(hit) == 1, (cik, year)
    return hit.iloc[0]


def _source(result: SecImport, cik: int, column: str, year: int = 2020) -> str:
    s = result.sources
    hit = s.loc[(s["firm_id"] == str(cik)) & (s["fiscal_year"] == year) & (s["column"] == column)]
    assert len(hit) == 1, (cik, column)
    return str(hit["source"].iloc[0])


def _flags(result: SecImport, cik: int, year: int = 2020) -> set[str]:
    return set(str(_row(result, cik, year)["import_flags"]).split(";")) - {""}


def _ledger(result: SecImport, cik: int) -> pd.DataFrame:
    return result.excluded.loc[result.excluded["firm_id"] == str(cik)]


def test_separate_debt_lines_are_summed(shapes: tuple[str, SecImport]) -> None:
    _, r = shapes
    assert _row(r, 9200001)["total_debt"] == 0 + 4512 + 6089
    assert _source(r, 9200001, "total_debt") == (
        "NotesPayableCurrent + ConvertibleDebtNoncurrent + LongTermNotesPayable")
    assert _row(r, 9200001, 2019)["total_debt"] == 0 + 4257 + 5095  # the comparative


def test_a_total_that_holds_repurchase_agreements_counts_as_presented(
    shapes: tuple[str, SecImport],
) -> None:
    _, r = shapes
    assert _row(r, 9200002)["total_debt"] == 22132  # 3,668 + 18,464; 1,775 not twice
    assert _source(r, 9200002, "total_debt") == "ShortTermBorrowings + LongTermDebt"


def test_filer_defined_debt_lines_count_by_their_labels(shapes: tuple[str, SecImport]) -> None:
    _, r = shapes
    assert _row(r, 9200003)["total_debt"] == 796 + 900 + 10643 + 4475
    assert "debt_by_label" in _flags(r, 9200003)
    assert "custom:NonrecourseDebtCollateralizedByCreditCardReceivablesLongTerm" in _source(
        r, 9200003, "total_debt")
    assert _row(r, 9200004)["total_debt"] == 433 + 3650 + 16195  # by the tags' names


def test_no_debt_line_gives_a_flagged_zero_unless_debt_sits_elsewhere(
    shapes: tuple[str, SecImport],
) -> None:
    layout, r = shapes
    assert _row(r, 9200006)["total_debt"] == 0 and "debt_zero" in _flags(r, 9200006)
    assert _source(r, 9200006, "total_debt") == "0 (no debt line on the balance sheet)"
    mixed = _row(r, 9200005)
    assert mixed["total_debt"] == 0
    assert {"debt_zero", "debt_partial"} <= _flags(r, 9200005)
    # Debt facts of a legal-entity segment (a co-registrant in the old layout): missing.
    assert np.isnan(_row(r, 9200007)["total_debt"])


def test_subtotals_are_not_added_and_coincidences_are_not_subtotals(
    shapes: tuple[str, SecImport],
) -> None:
    _, r = shapes
    assert _row(r, 9200008)["total_debt"] == pytest.approx(509.2 + 31.6 + 3874.3 + 486.6)
    assert "LongTermDebtAndCapitalLeaseObligations" not in _source(r, 9200008, "total_debt")
    assert _row(r, 9200009)["total_debt"] == 20 + 30 + 50


def test_a_line_including_other_lines_and_a_hedge_adjustment_is_counted_alone(
    shapes: tuple[str, SecImport],
) -> None:
    _, r = shapes
    assert _row(r, 9200026)["total_debt"] == 579 + 7477  # not + 7,420 (inside 7,477)
    assert _row(r, 9200026, 2019)["total_debt"] == 558 + 7505
    assert _row(r, 9200032)["total_debt"] == 100 + 1100  # assets are not its lines
    assert _row(r, 9200033)["total_debt"] == 20 + 30 + 50  # a noncurrent line sums no current
    assert _source(r, 9200026, "total_debt") == (
        "LongTermDebtAndCapitalLeaseObligationsCurrent + custom:LongTermDebtIncludingObligations"
        "UnderCapitalLeasesAndFinancingObligations")


def test_labels_that_exclude_debt_or_name_a_derivative_are_not_debt(
    shapes: tuple[str, SecImport],
) -> None:
    _, r = shapes
    assert _row(r, 9200027)["total_debt"] == pytest.approx(7.566 + 499.666)
    assert "debt_by_label" not in _flags(r, 9200027)
    assert _row(r, 9200028)["total_debt"] == 541 + 6314
    assert "IndexedDebtCurrent" not in _source(r, 9200028, "total_debt")


def test_debt_filed_only_for_segments_is_missing_not_zero(
    shapes: tuple[str, SecImport],
) -> None:
    _, r = shapes  # both layouts: the old one has no segment facts at all
    for cik in (9200029, 9200023, 9200034):
        assert np.isnan(_row(r, cik)["total_debt"])
        assert "debt_zero" not in _flags(r, cik) and "statement_facts_missing" in _flags(r, cik)


def test_every_zero_is_flagged(shapes: tuple[str, SecImport]) -> None:
    _, r = shapes
    assert _row(r, 9200030)["total_debt"] == 0 and "debt_zero" in _flags(r, 9200030)
    assert _source(r, 9200030, "total_debt") == (
        "0 (no value on the balance sheet's debt lines (nil))")
    assert _row(r, 9200030, 2019)["total_debt"] == 0 and "debt_zero" in _flags(r, 9200030, 2019)
    assert _source(r, 9200030, "total_debt", 2019) == "LongTermLineOfCredit"  # filed as 0
    assert _row(r, 9200031)["total_debt"] == 0
    assert {"debt_zero", "debt_from_tags"} <= _flags(r, 9200031)
    p = r.panel
    assert ((p["total_debt"] == 0) == p["import_flags"].str.contains("debt_zero")).all()


def test_parent_company_facts_are_used_when_they_balance(shapes: tuple[str, SecImport]) -> None:
    _, r = shapes
    row = _row(r, 9200010)
    assert (row["total_assets"], row["book_equity"]) == (18940, 2826)
    assert "parent_company_facts" in _flags(r, 9200010)
    out = _ledger(r, 9200011)
    assert out["reason"].tolist() == ["no_consolidated_facts"]


@pytest.mark.parametrize(("cik", "reason"), [
    (9200012, "foreign_private_issuer_form"), (9200013, "ifrs_filer"),
    (9200014, "non_usd_currency"), (9200024, "form_not_selected"),
])
def test_filings_left_out_are_in_the_ledger(shapes: tuple[str, SecImport], cik: int,
                                            reason: str) -> None:
    _, r = shapes
    assert str(cik) not in set(r.panel["firm_id"])
    out = _ledger(r, cik)
    assert out["reason"].tolist() == [reason] and out["fiscal_year"].tolist() == [2020]
    assert out["adsh"].tolist() == [f"{cik:010d}-21-000001"]


def test_every_filed_firm_year_is_in_the_panel_or_the_ledger(
    shapes: tuple[str, SecImport],
) -> None:
    _, r = shapes
    filed = {(str(f.cik), 2020) for f in _firms()}
    used = set(zip(r.panel["firm_id"], r.panel["fiscal_year"], strict=True))
    left = set(zip(r.excluded["firm_id"], r.excluded["fiscal_year"], strict=True))
    assert filed <= used | left and not (used & left)
    # 2018 is reported only by flows (two years back): in the ledger, said why.
    two_back = _ledger(r, 9200001)
    assert two_back[["fiscal_year", "reason"]].values.tolist() == [[2018, "no_balance_sheet"]]


def test_a_foreign_currency_filer_is_kept_with_an_exchange_rate(tmp_path: Path) -> None:
    folder = write_quarter(tmp_path / "q", _firms())
    rates = tmp_path / "fx.csv"
    rates.write_text("currency,date,rate\nCAD,2020-12-31,0.785\nCAD,2019-12-31,0.770\n",
                     encoding="utf-8")
    r = import_sec([folder], exclude_sic=None, fx_rates=rates, workers=1)
    row = _row(r, 9200014)
    assert (row["currency"], row["fx_rate"], row["total_assets"]) == ("CAD", 0.785, 16000)
    assert _row(r, 9200014, 2019)["fx_rate"] == 0.770
    late = tmp_path / "late.csv"
    late.write_text("currency,date,rate\nCAD,2021-03-31,0.79\n", encoding="utf-8")
    r = import_sec([folder], exclude_sic=None, fx_rates=late, workers=1)
    assert set(_ledger(r, 9200014)["reason"]) == {"no_fx_rate"}


def test_subsidiaries_with_the_parents_assets_are_flagged_or_dropped(tmp_path: Path) -> None:
    folder = write_quarter(tmp_path / "q", _firms())
    r = import_sec([folder], exclude_sic=None, workers=1)
    assert "subsidiary_duplicate" in _flags(r, 9200016)
    assert "subsidiary_duplicate" not in _flags(r, 9200015)  # the larger float: the parent
    note = r.sources.loc[(r.sources["firm_id"] == "9200016")
                         & (r.sources["column"] == "import_flags"), "source"]
    # Both years: the balance sheets of 2020 and of the 2019 comparative are the same.
    assert note.str.contains("CIK 9200015").all() and len(note) == 2
    dropped = import_sec([folder], exclude_sic=None, workers=1, drop_subsidiaries=True)
    assert "9200016" not in set(dropped.panel["firm_id"])
    assert set(_ledger(dropped, 9200016)["reason"]) == {"subsidiary_duplicate"}


def test_ppe_equity_and_ebitda_shapes(shapes: tuple[str, SecImport]) -> None:
    _, r = shapes
    assert _row(r, 9200017)["ppe_net"] == pytest.approx(91.8 + 4898.8)
    assert _source(r, 9200017, "ppe_net") == (
        "PropertyPlantAndEquipmentNet + OilAndGasPropertySuccessfulEffortMethodNet")
    assert _row(r, 9200018)["book_equity"] == 84367 - 42761
    south = _row(r, 9200019)
    assert south["ebitda"] == 262 + 616 and "dna_sign_flipped" in _flags(r, 9200019)
    single = _row(r, 9200020)
    assert single["ebitda"] == 3872 + 707 + 2023 and single["interest_expense"] == 707
    assert {"ebitda_from_pretax", "interest_sign_flipped"} <= _flags(r, 9200020)
    assert np.isnan(single["ebit"])
    reit = _row(r, 9200021)
    assert reit["ppe_net"] == 9500 and "ppe_real_estate" in _flags(r, 9200021)
    assert reit["industry_name"] == "REAL ESTATE INVESTMENT TRUSTS"


def test_a_gross_tag_labelled_net_is_net_only_with_a_presentation(
    shapes: tuple[str, SecImport],
) -> None:
    _, r = shapes
    row = _row(r, 9200022)
    assert row["ppe_net"] == 420 and "ppe_net_from_gross_tag" in _flags(r, 9200022)


def test_optional_statement_items(shapes: tuple[str, SecImport]) -> None:
    _, r = shapes
    row = _row(r, 9200001)
    assert (row["current_assets"], row["current_liabilities"], row["total_liabilities"]) == (
        18932, 3873, 16962)
    assert (row["retained_earnings"], row["ebit"], row["dividends_paid"]) == (-4322, 5000, 250)
    assert (row["revenue"], row["ppe_net"]) == (14642, 5738)
    assert row["ebitda"] == 5000 + 1100
    assert _row(r, 9200001, 2019)["ebitda"] == 4800 + 1000


def test_lost_facts_and_share_fallback_are_flagged(shapes: tuple[str, SecImport]) -> None:
    _, r = shapes
    assert "statement_facts_missing" in _flags(r, 9200023)
    assert _row(r, 9200025)["shares_outstanding"] == 40
    assert "shares_weighted_average" in _flags(r, 9200025)
    assert any("no fact in num.txt" in w for w in r.warnings)


def test_the_same_submissions_given_twice_are_read_once(tmp_path: Path) -> None:
    # The shapes include a filer reporting in another currency, whose ledger line made the
    # same quarter given twice crash (InvalidIndexError) before.
    folder = write_quarter(tmp_path / "q", _firms())
    old = write_quarter(tmp_path / "q_old", _firms(), "old")
    packed = tmp_path / "q.zip"
    with zipfile.ZipFile(packed, "w") as zf:
        for name in ("sub.txt", "pre.txt", "num.txt"):
            zf.write(folder / name, name)
    once = import_sec([folder], exclude_sic=None, workers=1)
    for paths in ([packed, folder], [folder, old], [packed, packed]):
        twice = import_sec(paths, exclude_sic=None, workers=1)
        pd.testing.assert_frame_equal(twice.panel, once.panel)
        pd.testing.assert_frame_equal(twice.sources, once.sources)
        pd.testing.assert_frame_equal(twice.excluded, once.excluded)
        assert any("read once" in w for w in twice.warnings)
        assert len(set(twice.warnings)) == len(twice.warnings)  # each note once
        # The same path twice is not even read twice.
        assert any("given more than once" in w for w in twice.warnings) == (
            paths[0] == paths[1])
    # Two copies that differ (one lost a fact): the first given supplies the whole filing,
    # never a mixture of the two.
    firms = _firms()
    firms[0].lost = ("ConvertibleDebtNoncurrent", "AssetsCurrent")
    poorer = write_quarter(tmp_path / "q_lost", firms)
    alone = import_sec([poorer], exclude_sic=None, workers=1)
    mixed = import_sec([poorer, folder], exclude_sic=None, workers=1)
    pd.testing.assert_frame_equal(mixed.panel, alone.panel)
    assert _row(mixed, 9200001)["total_debt"] == 0 + 6089  # the first copy's sum, flagged
    assert np.isnan(_row(mixed, 9200001)["current_assets"])  # not 18,932 from the second
    assert "statement_facts_missing" in _flags(mixed, 9200001)


@pytest.mark.parametrize("twice", [("zip", "zip"), ("zip", "folder"), ("zip", "old")])
def test_cli_reads_a_quarter_given_twice_once(tmp_path: Path, twice: tuple[str, str]) -> None:
    from typer.testing import CliRunner

    from levgap.cli import app

    folder = write_quarter(tmp_path / "q", _firms())
    paths = {"folder": folder, "old": write_quarter(tmp_path / "q_old", _firms(), "old"),
             "zip": tmp_path / "q.zip"}
    with zipfile.ZipFile(paths["zip"], "w") as zf:
        for name in ("sub.txt", "pre.txt", "num.txt"):
            zf.write(folder / name, name)
    out = tmp_path / "x.csv"
    result = CliRunner().invoke(app, ["import-sec", *(str(paths[k]) for k in twice),
                                      "--out", str(out), "--all-industries"])
    assert result.exit_code == 0, result.output
    assert "read once" in result.output and out.exists()


@pytest.mark.parametrize("content", ["quarterly", "header"])
@pytest.mark.parametrize("layout", ["current", "old"])
def test_a_quarter_without_annual_reports_gives_an_empty_panel_and_says_so(
    tmp_path: Path, content: str, layout: str,
) -> None:
    from typer.testing import CliRunner

    from levgap.cli import app

    folder = write_quarter(tmp_path / "q", [basic(9200090, "JARROW QUARTERLY", [
        Line("LongTermDebt", "Long-term debt", 5)], form="10-Q", fp="Q3")], layout)
    if content == "header":  # sub.txt, pre.txt and num.txt hold their header only
        for name in ("sub.txt", "pre.txt", "num.txt"):
            text = (folder / name).read_text(encoding="utf-8")
            (folder / name).write_text(text.splitlines()[0] + "\n", encoding="utf-8")
    r = import_sec([folder], exclude_sic=None, workers=1)
    assert r.panel.empty and r.excluded.empty and r.sources.empty
    assert len(r.warnings) == 1 and "hold no annual report" in r.warnings[0]
    if (content, layout) != ("quarterly", "current"):
        return
    # With a quarter that has annual reports, the empty one changes nothing.
    full = write_quarter(tmp_path / "full", _firms()[:3], layout)
    both = import_sec([folder, full], exclude_sic=None, workers=1)
    pd.testing.assert_frame_equal(both.panel,
                                  import_sec([full], exclude_sic=None, workers=1).panel)
    out = tmp_path / "x.csv"
    result = CliRunner().invoke(app, ["import-sec", str(folder), "--out", str(out)])
    assert result.exit_code == 0, result.output
    assert "hold no annual report" in result.output and out.exists()
