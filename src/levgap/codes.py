"""Reason codes, flags and reading constants as data (no pandas: the quick commands use them).

Validation (``levgap.ingest.validate``) and the analysis (``levgap.features``,
``levgap.pipeline``) write these codes; the template README lists them from here.
"""

from __future__ import annotations

from levgap.schema import COLUMNS

REASONS: dict[str, str] = {
    "non_numeric": "a required number (or fx_rate) holds text that is not a number",
    "missing_value": "a required value is blank, or one of the blank tokens (or fx_rate is "
    "blank where several currencies appear, including on a row with a blank currency)",
    "bad_fiscal_year": "fiscal_year is not a whole number between 1800 and 2200",
    "bad_fx_rate": "fx_rate is zero or negative",
    "unknown_currency": "currency is not an ISO 4217 code",
    "money_overflow": "a money value is beyond +/-1e300 after [units] scale and fx_rate (too "
    "large to compute with)",
    "assets_not_positive": "total_assets is zero or negative",
    "negative_debt": "total_debt is negative",
    "negative_ppe": "ppe_net is negative",
    "debt_above_assets": "total_debt is larger than total_assets",
    "ppe_above_assets": "ppe_net is larger than total_assets",
    "ebitda_above_assets": "the absolute value of ebitda is larger than total_assets",
    "duplicate_row": "an exact copy of an earlier row (the first copy is kept)",
    "conflicting_duplicate": "the same firm_id and fiscal_year appear in several rows that "
    "differ; every copy is left out",
}
"""Reason codes of whole-row exclusions, in the order they are tested (a row gets the first)."""

FLAGS: dict[str, str] = {
    "negative_book_equity": "book_equity is negative; the row is kept",
    "market_equity_from_shares": "market_equity was blank and is shares_outstanding * "
    "share_price",
    "no_market_equity": "no usable market_equity (nor shares and price); the row gets a book "
    "target only and a ledger line for the market measure",
    **{
        f"invalid_{c.name}": f"{c.name} was not a number or below its minimum and is treated "
        "as missing"
        for c in COLUMNS
        if not c.required and c.kind == "number" and c.name != "fx_rate"  # fx_rate excludes
    },
    "invalid_input_driver": "a [model] input_drivers cell is not a number and is treated as "
    "missing (the row is then left out, reason driver_missing)",
}
"""Flags of kept rows, written ``;``-joined into the ``flags`` column."""

NA_TOKENS: tuple[str, ...] = ("", "na", "n/a", "#n/a", "nan", "null", "none", "-", "--", ".")
"""Cell texts (compared without case and surrounding spaces) read as a blank value."""

YEAR_RANGE: tuple[int, int] = (1800, 2200)

MONEY_LIMIT = 1e300
"""Largest money value (after ``[units] scale`` and ``fx_rate``) a row may carry: ratios and
sums of such values stay finite in float64 (whose largest value is about 1.8e308)."""


ANALYSIS_FLAGS: dict[str, str] = {
    "volatility_imputed": "fewer than three fiscal years of profitability in the trailing "
    "five-year window: earnings_volatility is the industry-year median",
    "mtb_imputed": "no market equity: market_to_book is the industry-year median",
    "industry_effect_pooled": "the industry has fewer than [model] min_industry_firms firms: "
    "its effect is its parent group's plus a share of its own level, shrunk by empirical "
    "Bayes (run.json names the group and the share kept)",
    "industry_effect_from_parent": "in the cross-fit, the fit that left this firm out had no "
    "row of its industry: the target uses the parent group's effect",
    "winsorised": "at least one driver was clipped to its fiscal year's winsorising limits",
    "outside_fitted_range": "scored by a saved model: at least one driver lay outside the "
    "fitted range of its year and was clipped to it (the raw value is kept beside it)",
    "debt_above_assets_with_leases": "leases_as_debt is on and debt plus leases exceed "
    "total_assets: the row is left out of book leverage",
    "peers_other_years": "no other firm in the fiscal year: the peer profile and median come "
    "from every other firm-year of the panel",
    "no_peers": "the only firm-year of the panel with this measure: no peer profile, no "
    "contributions",
    "industry_not_in_model": "scored by a saved model: the industry was not in the fitted "
    "panel; its effect is that of the industries sharing the longest leading part of its code "
    "(else of all)",
    "year_not_in_model": "scored by a saved model: the fiscal year was not in the fitted panel; "
    "the latest earlier fitted year's effect and limits are used",
    "not_scorable": "scored by a saved model: a statement value breaks schema v1, firm_id or "
    "industry is blank, an input driver is blank or text, or the firm-year is given more than "
    "once (every copy; see the note column); the row is returned blank",
    "target_below_zero": "the target is below zero (linear model): debt to target repays all "
    "debt",
    "book_target_at_or_above_one": "a book target of 1 or more (linear model): debt to target "
    "finances every asset",
    "market_target_at_or_above_one": "a market target of 1 or more (linear model): debt to "
    "target replaces every share",
    "no_lease_data": "leases_as_debt is on but lease_liabilities is blank: counted as zero",
    "industry_median_imputed": "no other firm of the industry has the measure in that fiscal "
    "year: industry_median_leverage is the median of the year's other firms",
    "dividends_missing": "dividends_paid is blank: dividend_payer counts the row as not paying",
    "persistent": "outside the band on the same side for three or more consecutive fiscal "
    "years: a standing policy rather than a new event",
    "newly_outside": "outside the band this year, and not on that side the year before: a "
    "new event",
    "few_peers": "the peer median and profile rest on fewer peers than [model] min_peers",
    "peers_from_parent": "no other firm of the peer group that year: the peers are the "
    "industries of its parent group",
    "peers_whole_year": "no peer group or parent group with another firm that year: the "
    "peers are every other firm of the year",
    "peers_listed": "the peers are the firm's own list (peers.csv) present that year",
    "peer_list_unmatched": "the firm has a peer list but none of its peers is present that "
    "year: the usual peers are used",
}
"""Flags the analysis adds to kept rows (beside those of validation)."""


def flag_words(flags: object) -> list[tuple[str, str]]:
    """Each flag of a ``;``-joined flags cell with its meaning in words.

    Examples
    --------
    >>> flag_words("persistent;few_peers")[0][0]
    'persistent'
    """
    if flags is None or (isinstance(flags, float) and flags != flags):
        return []
    known = {**FLAGS, **ANALYSIS_FLAGS}
    return [(code, known.get(code, code)) for code in str(flags).split(";") if code]

ANALYSIS_REASONS: dict[str, str] = {
    "no_prior_year": "lag_drivers is on and the firm has no row for the previous fiscal year",
    "driver_missing": "a driver without an imputation rule has no value: log_revenue without "
    "revenue above zero, or a blank [model] input_drivers column (with lag_drivers: in the "
    "previous fiscal year)",
}
"""Reason codes of rows the analysis leaves out of every measure."""

MEASURE_REASONS: dict[str, str] = {
    "no_market_equity": "no usable market_equity (nor shares and price): left out of market "
    "leverage only",
    "no_market_value": "total_debt and market_equity are both zero: market leverage is "
    "undefined; left out of market leverage only",
    "debt_above_assets_with_leases": "leases_as_debt is on and debt plus leases exceed "
    "total_assets: left out of book leverage only",
}
"""Reason codes of rows the analysis leaves out of one measure (the ledger names it); ``levgap
check`` does not list them (it fits nothing)."""



SEC_REASONS: dict[str, str] = {
    "foreign_private_issuer_form": "a 20-F or 40-F annual report of a foreign private issuer "
    "(import-sec reads 10-K reports)",
    "form_not_selected": "an annual report of a form not asked for with --forms (a 10-K/A "
    "or 10-KT with no 10-K for that firm-year)",
    "not_fiscal_year_report": "a 10-K whose fiscal period (fp) is neither FY nor empty",
    "bad_submission_row": "sub.txt gives no usable CIK or period end for the report",
    "ifrs_filer": "the statements use the IFRS taxonomy, not US-GAAP",
    "non_usd_currency": "money is reported in a currency other than U.S. dollars and no "
    "--fx-rates file was given",
    "no_fx_rate": "the --fx-rates file has no rate for the filer's currency within 31 days "
    "before to 7 days after the balance-sheet date",
    "no_consolidated_facts": "every total-assets fact carries a co-registrant and the "
    "ParentCompany facts do not balance (assets differ from liabilities and equity)",
    "no_balance_sheet": "the year appears only in a comparative income or cash-flow "
    "statement (two years back); its balance sheet is in an earlier 10-K not given",
    "excluded_industry": "the SIC code lies in an --exclude-sic range (default financials "
    "6000-6999 and utilities 4900-4999; --all-industries keeps them)",
    "subsidiary_duplicate": "total assets equal another filer's at the same date: a "
    "subsidiary filing its own 10-K, left out with --drop-subsidiaries",
}
"""Reason codes of ``levgap import-sec``'s ledger (``PANEL.excluded.csv``): firm-years filed
but not in the panel."""

SEC_FLAGS: dict[str, str] = {
    "debt_zero": "total_debt is 0: the balance sheet presents no debt line, or its debt "
    "lines are nil or filed as 0 (without pre.txt: the debt tags are filed as 0), and the "
    "filing has no debt facts outside its consolidated statements; every 0 carries it",
    "debt_partial": "total_debt may leave debt out: a liabilities line that names borrowing "
    "with something else is not counted, or (without pre.txt) only one side of the balance "
    "sheet was found",
    "debt_by_label": "total_debt includes a line counted by its label: a filer-defined tag, "
    "or a standard tag for something broader than debt, whose label names borrowing",
    "debt_from_tags": "the filing has no presentation lines (pre.txt): total_debt is built "
    "from the debt tags alone",
    "ppe_net_from_gross_tag": "ppe_net is a line tagged gross whose label says net (no "
    "accumulated depreciation is filed)",
    "ppe_real_estate": "ppe_net is the real estate of a REIT (no property, plant and "
    "equipment line)",
    "dna_sign_flipped": "depreciation and amortisation was filed negative; its absolute value "
    "is used in ebitda",
    "interest_sign_flipped": "interest expense was filed negative; its absolute value is used",
    "dividends_sign_flipped": "dividends paid were filed negative; the absolute value is used",
    "ebitda_from_pretax": "no operating income: ebitda is pretax income + interest expense + "
    "D&A (the alternative definition)",
    "liabilities_derived": "total_liabilities is total liabilities and equity minus equity "
    "(with noncontrolling interests) and temporary equity",
    "shares_weighted_average": "no period-end share count: shares_outstanding is the "
    "weighted-average basic count",
    "parent_company_facts": "the filing's consolidated figures sit under coreg "
    "ParentCompany; they balance and are used",
    "statement_facts_missing": "the filing presents a statement line of interest that has no "
    "fact in num.txt (lost in the file, or filed only for segments); values built from it "
    "are missing (total_debt too when no other debt line has a value, never 0)",
    "subsidiary_duplicate": "total assets equal another filer's at the same date (a "
    "subsidiary filing its own 10-K); the sources name the filer taken for the parent",
}
"""Flags of ``levgap import-sec``'s panel rows, ``;``-joined in the ``import_flags`` column."""
