"""Debt from the balance sheet as the filer presented it (``pre.txt``).

The statement-true total debt is the sum of the debt lines on the face of the balance sheet
(``stmt`` BS, not parenthetical), each valued at the balance-sheet date of the row. Rules:

Debt lines
    A line is debt when its tag is one of :data:`~levgap.ingest.sec_tags.DEBT_TAGS`
    (current and noncurrent debt, notes, convertible, senior, secured, unsecured and
    subordinated debt, lines of credit, commercial paper, short-term borrowings and bank
    loans, capital and finance lease obligations: whichever the filer presents, before or
    after ASC 842), or when a line on the liabilities side whose tag is filer-defined
    (custom), or a standard tag for something broader than debt (``DueToRelatedParties``,
    but not equity, securities, receivables, deferred items, taxes, interest, ...), carries
    a label that names borrowing (``debt``, ``borrowings``, ``notes payable``, ``loan``,
    ``debentures``, ``credit facility``, ``commercial paper``, ``lease obligations``, ...)
    and nothing else (flag ``debt_by_label``). A filer-defined tag's name counts as a
    second label ("Machinery and Engines" under ``ShortTermBorrowingsMachineryAndEngines``)
    unless the label names something that is not debt ("indexed debt securities derivative"
    under ``IndexedDebtCurrent``). A label that excludes borrowing ("liabilities excluding
    debt") does not name it.
Subtotals
    A debt line whose value equals the sum of the lines directly above it in the same
    statement (two or more, or one when its label says "total"; ``negating`` lines
    subtracted; within half a unit) is a subtotal when it says it sums: its label says
    "total"; its tag names a total (:data:`~levgap.ingest.sec_tags.DEBT_AGGREGATES`:
    ``DebtCurrent``, ``LongTermDebtNoncurrent``, ``LongTermDebtAndCapitalLeaseObligations``,
    ``DebtAndCapitalLeaseObligations``, ...); its label says it includes other lines
    ("including", "includes", "inclusive of", "together with", "combined", "... and ...
    obligations"); or the lines above include a "less ..." line. Without a "total" label the
    lines summed must lie on the line's side of the balance sheet (a noncurrent total sums
    no current line). A subtotal of debt lines only is not counted (its lines are). A
    total whose lines include lines that are not debt (a repurchase-agreement line inside
    "total short-term borrowings", a fair-value hedge adjustment inside "long-term debt
    including obligations under capital leases") is counted as presented, and the debt
    lines inside it are not. The rule reads the statement's own arithmetic, never a
    filer's numbers: a line that says it sums and equals the lines above it is their sum.
Doubtful lines
    A liabilities line that is not counted but whose label names borrowing together with
    something else ("capital lease and other long-term liabilities") makes the value
    ``debt_partial``: it may hold debt the total leaves out. A presented debt line whose
    tag has no fact at all in the filing's consolidated facts (lost in the file, or filed
    only for segments) beside lines that are counted leaves the sum as it is; the row
    carries ``statement_facts_missing``.
No debt line
    A balance sheet that presents no debt line, or whose debt lines carry no value at the
    row's date (nil: the line's tag has a fact at another date of the filing), gives 0; so
    do debt lines filed as 0 (the provenance then lists them). Every 0 is flagged
    ``debt_zero``, also one from the tags alone. The value is missing instead when the
    filing has debt facts at that date outside its consolidated statements (segments,
    co-registrants) or presents a debt line whose tag has no fact at all in its
    consolidated facts (the old layout of the data sets drops segment facts, so a line
    filed only for segments has none): the debt exists but is not in the file as a
    consolidated figure.
No presentation
    A filing without ``pre.txt`` lines falls back on the tags alone (flag
    ``debt_from_tags``): a combined total when filed; else the current side (DebtCurrent;
    else the sum of LongTermDebtAndCapitalLeaseObligationsCurrent or LongTermDebtCurrent with
    the short-term borrowing tags) plus the noncurrent side (LongTermDebtNoncurrent;
    LongTermDebtAndCapitalLeaseObligations; LongTermDebt minus LongTermDebtCurrent). A side
    that is absent is absent, not 0: the value is then the side found, flagged
    ``debt_partial``.

Headings and dimension members (tags ending ``Abstract``, ``Table``, ``Axis``, ``Domain``,
``Member``, ``LineItems``; the old layout's ``pre.txt`` lists them) are never lines.

The provenance label lists every line summed (custom tags as ``custom:Tag``; a subtracted
line with ``-``).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from levgap.ingest.sec_tags import (
    DEBT_AGGREGATES,
    DEBT_TAGS,
    Item,
    combine,
    first,
    sum_present,
    tag_item,
)

_BORROWING = re.compile(
    r"\b(?:debt|borrowings?|notes?\s+payable|loans?\s+payable|bank\s+loans?|term\s+loans?|"
    r"loans?|debentures?|senior\s+(?:secured\s+|unsecured\s+)?notes|subordinated\s+notes|"
    r"convertible\s+(?:senior\s+)?notes|notes\s+due|bonds?|credit\s+facilit(?:y|ies)|"
    r"lines?\s+of\s+credit|revolv\w*|commercial\s+paper|(?:capital|finance)\s+lease\s+"
    r"(?:obligations?|liabilit(?:y|ies))|lease\s+financing|financing\s+obligations?|"
    r"mortgages?\s+payable|mortgage\s+notes|indebtedness|borrowed\s+funds)\b",
    re.IGNORECASE,
)
# Labels that mention borrowing but are not borrowing.
_NOT_DEBT = re.compile(
    r"receivable|investment|securities|\bassets?\b|interest\b(?!-bearing)|issuance\s+cost|"
    r"deferred\s+(?:financing|debt)|hedg|derivative|guarantee|allowance|retirement|"
    r"performance\s+bond|available.for.sale|held.to.maturity|loss(?:es)?\s+on|gain",
    re.IGNORECASE,
)
# Labels that name borrowing together with something else.
_MIXED = re.compile(
    r"\band\s+other\b|other\s+(?:long-term\s+)?liabilities|accrued|accounts\s+payable|"
    r"deposits?|reserves?\b(?!\s+bank)|\bcollateral\b|deferred|payables?\s+to\s+customers",
    re.IGNORECASE,
)
# Standard tags for things that are not borrowing, whatever their label says.
_NOT_DEBT_TAG = re.compile(
    r"Equity|Stock|Temporary|FinancialInstruments|Securities|Receivable|Investment|Derivative|"
    r"Deferred|Interest|Deposit|Tax|Accrued|AccountsPayable|Dividend|Pension|Benefit|"
    r"Retirement|Contingenc|Commitment|Minority|Noncontrolling|Capital(?!Lease)"
)
# Headings and dimension members of a statement (the old layout's pre.txt lists them):
# never a line with a value.
_STRUCTURAL_TAG = re.compile(r"(?:Abstract|Table|Axis|Domain|Member|LineItems)$")
_TOTAL = re.compile(r"\btotal\b", re.IGNORECASE)
# Labels that say the line includes other lines (a subtotal when it equals them).
_INCLUDES = re.compile(
    r"\binclud(?:ing|es|ed)\b|\binclusive\s+of\b|\btogether\s+with\b|\bcombined\b|"
    r"\band\b[^,;()]*\bobligations?\b",
    re.IGNORECASE,
)
# Words before a borrowing word that turn the label away from debt ("liabilities excluding
# debt").
_EXCLUDES = re.compile(r"\b(?:excluding|excludes|except|other\s+than)\b", re.IGNORECASE)
_CURRENT = re.compile(r"current|short-term|short term|within one year", re.IGNORECASE)
_NONCURRENT = re.compile(r"noncurrent|non-current|long-term|long term|net of current|"
                         r"less current|excluding current", re.IGNORECASE)

#: Liabilities-side totals that are not debt however they are labelled.
_LIABILITY_TOTALS = frozenset({
    "Liabilities", "LiabilitiesCurrent", "LiabilitiesNoncurrent",
    "LiabilitiesAndStockholdersEquity", "StockholdersEquity",
    "StockholdersEquityIncludingPortionAttributableToNoncontrollingInterest",
})

#: Most lines above a debt line searched for the lines it may total.
MAX_COMPONENTS = 40


@dataclass(frozen=True, slots=True)
class LineKind:
    """What one balance-sheet line is, for the debt sum.

    Parameters
    ----------
    debt : numpy.ndarray of bool
        Counted as debt.
    doubtful : numpy.ndarray of bool
        Not counted, but its label names borrowing with something else.
    by_label : numpy.ndarray of bool
        Counted by its label (a filer-defined tag, or a standard tag for something broader
        than debt, whose label names borrowing).
    side : numpy.ndarray of str
        ``"current"``, ``"noncurrent"`` or ``"either"``.
    """

    debt: np.ndarray
    doubtful: np.ndarray
    by_label: np.ndarray
    side: np.ndarray


def classify_lines(lines: pd.DataFrame) -> LineKind:
    """Classify balance-sheet lines (one filing's lines in presentation order, or many).

    Parameters
    ----------
    lines : pandas.DataFrame
        Columns ``tag``, ``custom`` (bool), ``label`` and ``liabilities`` (bool: the line
        is below the total-assets line of its statement, or the statement has none).

    Returns
    -------
    LineKind
    """
    tag = lines["tag"].astype(str).to_numpy()
    custom = lines["custom"].to_numpy(dtype=bool)
    liab = lines["liabilities"].to_numpy(dtype=bool)
    # Labels and tags repeat across filings: each distinct text is looked at once.
    label_codes, labels = pd.factorize(lines["label"].astype(str).to_numpy(dtype=object))
    texts = pd.Series(labels, dtype=object)

    def per_label(test: object) -> np.ndarray:
        if callable(test):
            return texts.map(test).to_numpy(dtype=bool)[label_codes]
        return texts.str.contains(test).to_numpy(dtype=bool)[label_codes]

    says = per_label(_names_borrowing).copy()
    # A filer-defined tag's name counts as a second label ("Machinery and Engines" under a
    # tag named ShortTermBorrowingsMachineryAndEngines).
    tag_codes, tag_names = pd.factorize(tag)
    words = pd.Series(tag_names, dtype=object).str.replace(r"(?<=[a-z0-9])(?=[A-Z])", " ",
                                                           regex=True)
    by_name = words.map(_names_borrowing).to_numpy(dtype=bool)[tag_codes]
    # ... unless the label itself names something that is not debt ("indexed debt securities
    # derivative" under a tag named IndexedDebtCurrent).
    says |= custom & by_name & ~per_label(_NOT_DEBT)
    mixed = per_label(_MIXED)
    not_debt_tag = pd.Series(tag_names, dtype=object).str.contains(_NOT_DEBT_TAG).to_numpy(
        dtype=bool)[tag_codes]
    standard_debt = ~custom & np.isin(tag, list(DEBT_TAGS))
    broader = ~custom & ~standard_debt & ~not_debt_tag
    totals = np.isin(tag, list(_LIABILITY_TOTALS)) | pd.Series(
        tag_names, dtype=object).str.contains(_STRUCTURAL_TAG).to_numpy(dtype=bool)[tag_codes]
    says_debt = liab & says & ~totals
    by_label = (custom | broader) & says_debt & ~mixed
    doubtful = says_debt & ~standard_debt & ~by_label & (custom | broader)
    doubtful &= ~per_label(_TOTAL)
    side = np.array([DEBT_TAGS.get(t, "either") for t in tag_names], dtype=object)[tag_codes]
    is_current = per_label(_CURRENT)
    is_noncurrent = per_label(_NONCURRENT)
    label_side = np.where(is_noncurrent, "noncurrent", np.where(is_current, "current", "either"))
    side = np.where(custom | broader, label_side, side)
    return LineKind(standard_debt | by_label, doubtful, ~standard_debt & by_label,
                    side.astype(object))


def _names_borrowing(label: str) -> bool:
    """The label names borrowing: a borrowing word with no not-debt word before it or
    within the three words after it ("debt collateralized by receivables" is debt, "loan
    receivable" and "accrued interest on debt" are not)."""
    m = _BORROWING.search(label)
    if m is None:
        return False
    after = " ".join(label[m.end():].split()[:3])
    before = label[: m.start()]
    return not (_NOT_DEBT.search(before) or _EXCLUDES.search(before)
                or _NOT_DEBT.search(m.group(0) + " " + after))


def presented_debt(
    lines: pd.DataFrame,
    values: pd.DataFrame,
    rows: pd.DataFrame,
    outside: set[tuple[str, int]],
) -> Item:
    """Total debt of each row from the balance-sheet lines its filing presents.

    Parameters
    ----------
    lines : pandas.DataFrame
        Balance-sheet lines (not parenthetical) of the filings: ``adsh``, ``report``,
        ``line`` (ints), ``tag``, ``custom`` (bool), ``label``, ``negating`` (bool),
        ``liabilities`` (bool).
    values : pandas.DataFrame
        Balance-sheet facts at each row's date: ``adsh``, ``fiscal_year``, ``tag``,
        ``value`` (one per tag).
    rows : pandas.DataFrame
        The rows to value: ``adsh``, ``fiscal_year``.
    outside : set of (str, int)
        Rows whose filing has debt facts at that date outside its consolidated statements.

    Returns
    -------
    Item
        One value per row of ``rows``; missing for rows whose filing presents no balance
        sheet.
    """
    n = len(rows)
    out_v = np.full(n, np.nan)
    out_l = np.full(n, "", dtype=object)
    out_f = np.full(n, "", dtype=object)
    if not n or lines.empty:
        return Item(out_v, out_l, out_f)
    kind = classify_lines(lines)
    lines = lines.assign(_debt=kind.debt, _doubt=kind.doubtful, _custom=kind.by_label,
                         _side=kind.side)
    keyed = rows[["adsh", "fiscal_year"]].assign(_row=np.arange(n))
    grid = keyed.merge(lines, on="adsh", how="inner")
    grid = grid.merge(values[["adsh", "fiscal_year", "tag", "value"]],
                      on=["adsh", "fiscal_year", "tag"], how="left")
    # A line whose tag has a consolidated fact at some date of the filing (else it is lost,
    # or filed only for segments).
    known = values[["adsh", "tag"]].drop_duplicates().assign(_known=True)
    grid = grid.merge(known, on=["adsh", "tag"], how="left")
    grid["_known"] = grid["_known"].notna().to_numpy()
    grid = grid.sort_values(["_row", "report", "line"], kind="stable")
    row_ids = grid["_row"].to_numpy()
    if not len(row_ids):
        return Item(out_v, out_l, out_f)
    starts = np.flatnonzero(np.r_[True, row_ids[1:] != row_ids[:-1]])
    ends = np.r_[starts[1:], len(row_ids)]
    grid["_filer"] = grid["custom"].to_numpy(dtype=bool)
    cols = {c: grid[c].to_numpy() for c in ("tag", "label", "report", "_debt", "_doubt",
                                            "_custom", "_filer", "_side", "negating", "value",
                                            "liabilities", "_known")}
    rows_adsh = rows["adsh"].to_numpy()
    rows_fy = rows["fiscal_year"].to_numpy()
    for s, e in zip(starts, ends, strict=True):
        r = int(row_ids[s])
        v, lab, flags = _one_balance_sheet({c: a[s:e] for c, a in cols.items()},
                                           (str(rows_adsh[r]), int(rows_fy[r])) in outside)
        out_v[r], out_l[r], out_f[r] = v, lab, flags
    return Item(out_v, out_l, out_f)


def _one_balance_sheet(c: dict[str, np.ndarray], has_outside: bool) -> tuple[float, str, str]:
    value = c["value"].astype(float)
    negating = c["negating"].astype(bool)
    signed = np.where(negating, -value, value)
    debt = c["_debt"].astype(bool)
    report = c["report"]
    tag = c["tag"]
    label = c["label"]
    side = c["_side"]
    status = np.where(debt, "in", "").astype(object)
    valued = ~np.isnan(value)
    liab = c["liabilities"].astype(bool)
    for i in np.flatnonzero(debt & valued):
        total_label = bool(_TOTAL.search(str(label[i])))
        total_like = total_label or tag[i] in DEBT_AGGREGATES or bool(
            _INCLUDES.search(str(label[i])))
        # A liabilities line sums liabilities lines only.
        above = (np.arange(len(value)) < i) & (report == report[i]) & valued & (
            liab | ~liab[i])
        # Only a total-like line, or a line below a "less ..." line, can be a subtotal.
        if not total_like and not (negating & above).any():
            continue
        comps = _components(signed, np.flatnonzero(above), signed[i], total_label)
        if comps is None:
            continue
        if total_like and not total_label:
            total_like = _sides_fit(side[i], side[comps], signed[comps])
        has_less = bool(negating[comps].any())
        if debt[comps].all():
            if total_like or has_less:
                status[i] = "subtotal"
        elif total_like:
            status[comps[debt[comps]]] = "covered"
    counted = (status == "in") & valued
    # Debt lines whose tag has no consolidated fact at any date of the filing.
    lost = debt & ~c["_known"].astype(bool)
    flags = []
    if c["_doubt"].astype(bool)[valued & (value != 0)].any():
        flags.append("debt_partial")
    if not counted.any():
        if has_outside or lost.any():
            return np.nan, "", ""
        why = ("no value on the balance sheet's debt lines (nil)" if debt.any()
               else "no debt line on the balance sheet")
        return 0.0, f"0 ({why})", ";".join(["debt_zero", *flags])
    if (c["_custom"].astype(bool) & counted).any():
        flags.append("debt_by_label")
    total = float(signed[counted].sum())
    if total == 0:  # debt lines filed as 0
        flags.insert(0, "debt_zero")
    text = ""
    for j in np.flatnonzero(counted):
        name = f"custom:{tag[j]}" if c["_filer"][j] else str(tag[j])
        minus = bool(negating[j])
        text = (f"-{name}" if minus else name) if not text else \
            f"{text} {'-' if minus else '+'} {name}"
    return total, text, ";".join(flags)


def _components(signed: np.ndarray, above: np.ndarray, target: float, total_label: bool
                ) -> np.ndarray | None:
    """Indices of the valued lines right above a line that sum to it, nearest first."""
    if not len(above):
        return None
    near = above[::-1][:MAX_COMPONENTS]
    sums = np.cumsum(signed[near])
    k = np.arange(1, len(near) + 1)
    hit = np.flatnonzero((np.abs(sums - target) <= 0.5 + 1e-9 * abs(target))
                         & ((k >= 2) | total_label))
    return near[: hit[0] + 1] if len(hit) else None


def _sides_fit(total_side: str, sides: np.ndarray, signed: np.ndarray) -> bool:
    """A current total sums no noncurrent line and vice versa (subtracted lines aside)."""
    added = sides[signed >= 0]
    if total_side == "current":
        return not (added == "noncurrent").any()
    if total_side == "noncurrent":
        return not (added == "current").any()
    return True


def debt_from_tags(wide: pd.DataFrame) -> Item:
    """Total debt from tags alone, for filings without a presentation (flag debt_from_tags).

    Parameters
    ----------
    wide : pandas.DataFrame
        One row per submission and fiscal year, one column per balance-sheet tag.

    Returns
    -------
    Item
    """
    t = lambda name: tag_item(wide, name)  # noqa: E731
    n = len(wide)
    combined = first(t("DebtLongtermAndShorttermCombinedAmount"),
                     t("DebtAndCapitalLeaseObligations"))
    short = first(t("ShortTermBorrowings"), t("CommercialPaper"))
    current = first(
        t("DebtCurrent"),
        sum_present(t("LongTermDebtAndCapitalLeaseObligationsCurrent"), short,
                    t("NotesPayableCurrent"), t("LinesOfCreditCurrent"),
                    t("OtherShortTermBorrowings")).where(
            ~np.isnan(t("LongTermDebtAndCapitalLeaseObligationsCurrent").value)),
        sum_present(t("LongTermDebtCurrent"), short, t("NotesPayableCurrent"),
                    t("LinesOfCreditCurrent"), t("OtherShortTermBorrowings")),
    )
    long_total = t("LongTermDebt")
    noncurrent = first(
        t("LongTermDebtNoncurrent"),
        t("LongTermDebtAndCapitalLeaseObligations"),
        combine(long_total, t("LongTermDebtCurrent"), -1, b_required=False),
    )
    # LongTermDebt alone already holds the current maturities: no side is missing then.
    whole_long = ~np.isnan(long_total.value) & np.isnan(t("LongTermDebtNoncurrent").value) & \
        np.isnan(t("LongTermDebtAndCapitalLeaseObligations").value)
    one_side = np.isnan(current.value) ^ np.isnan(noncurrent.value)
    both = sum_present(current, noncurrent)
    both = both.flagged(one_side & ~whole_long, "debt_partial")
    out = first(combined, both)
    out = out.flagged(out.value == 0, "debt_zero")  # every 0 is flagged
    return out.flagged(np.ones(n, dtype=bool), "debt_from_tags")
