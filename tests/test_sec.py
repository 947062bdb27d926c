"""Tests of the SEC Financial Statement Data Sets importer (levgap.ingest.sec).

Fixture tests use the invented quarters in tests/fixtures/sec (see its README) and a panel
computed by hand. Real-data tests read the shared quarters found through the environment
variable LEVGAP_SEC_DATA and skip, saying why, when it is not set.
"""

from __future__ import annotations

import re
import zipfile
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from levgap.errors import ConfigError, SchemaError
from levgap.ingest.sec import (
    LEDGER_COLUMNS,
    PANEL_COLUMNS,
    SOURCE_COLUMNS,
    SecImport,
    fiscal_year_of,
    import_sec,
    parse_sic_ranges,
    read_prices,
    write_sec_import,
)
from levgap.ingest.sec_debt import debt_from_tags
from levgap.ingest.sec_files import locate_quarter, read_filtered
from levgap.ingest.sec_tags import (
    COVER_SHARES,
    PUBLIC_FLOAT,
    TAG_KINDS,
    build_columns,
)
from levgap.schema import BY_NAME

FIXTURE = Path(__file__).parent / "fixtures" / "sec"
CURRENT = FIXTURE / "current"
OLD = FIXTURE / "old"
TEXT = ("firm_id", "industry", "firm_name", "currency", "market_equity_source",
        "industry_name", "import_flags")
BOTH_FORMS = ("10-K", "10-K/A")


def _normalise(frame: pd.DataFrame) -> pd.DataFrame:
    out = frame.reindex(columns=list(PANEL_COLUMNS)).copy()
    for c in out.columns:
        if c in TEXT:
            s = out[c].astype(object)
            out[c] = s.where(s.notna(), None).map(lambda v: None if v is None else str(v))
        elif c == "fiscal_year":
            out[c] = out[c].astype("int64")
        else:
            out[c] = out[c].astype(float)
    out["import_flags"] = out["import_flags"].fillna("").astype(object)
    return out.reset_index(drop=True)


def _expected() -> pd.DataFrame:
    raw = pd.read_csv(FIXTURE / "expected_panel.csv", dtype=str, keep_default_na=False,
                      encoding="utf-8")
    raw = raw.replace("", None)
    return _normalise(raw)


@pytest.fixture(scope="module")
def both() -> SecImport:
    return import_sec([CURRENT, OLD], forms=BOTH_FORMS, exclude_sic=None, workers=1)


def _row(result: SecImport, firm: str, year: int) -> pd.Series:
    p = result.panel
    hit = p.loc[(p["firm_id"] == firm) & (p["fiscal_year"] == year)]
    assert len(hit) == 1
    return hit.iloc[0]


def _source(result: SecImport, firm: str, year: int, column: str) -> str:
    s = result.sources
    hit = s.loc[(s["firm_id"] == firm) & (s["fiscal_year"] == year) & (s["column"] == column)]
    assert len(hit) == 1, (firm, year, column, hit)
    return str(hit["source"].iloc[0])


# --- the hand-computed panel ------------------------------------------------------------


def test_fixture_matches_hand_computed_panel(both: SecImport) -> None:
    pd.testing.assert_frame_equal(_normalise(both.panel), _expected())
    assert list(both.panel.columns) == list(PANEL_COLUMNS)
    assert list(both.sources.columns) == list(SOURCE_COLUMNS)


def test_panel_dtypes_follow_schema(both: SecImport) -> None:
    p = both.panel
    assert p["fiscal_year"].dtype == np.int64
    for c in PANEL_COLUMNS:
        if c in BY_NAME and BY_NAME[c].kind == "number":
            assert p[c].dtype == np.float64, c
    assert set(p["firm_id"].map(type)) == {str}
    assert not p.duplicated(["firm_id", "fiscal_year"]).any()


def test_zips_give_the_same_panel_as_folders(tmp_path: Path, both: SecImport) -> None:
    zips = []
    for folder in (CURRENT, OLD):
        z = tmp_path / f"{folder.name}.zip"
        with zipfile.ZipFile(z, "w", zipfile.ZIP_DEFLATED) as zf:
            for f in sorted(folder.iterdir()):
                zf.write(f, f.name)
        zips.append(z)
    zipped = import_sec(zips, forms=BOTH_FORMS, exclude_sic=None)
    pd.testing.assert_frame_equal(zipped.panel, both.panel)
    pd.testing.assert_frame_equal(zipped.sources, both.sources)


def test_layouts_detected_from_the_header() -> None:
    assert locate_quarter(CURRENT).layout == "current"
    assert locate_quarter(OLD).layout == "old"
    assert set(locate_quarter(CURRENT).members) == {"sub", "num", "tag", "pre"}
    assert set(locate_quarter(OLD).members) == {"sub", "num"}


def test_old_layout_raw_quotes_keep_every_row() -> None:
    # The fixture bites: standard quoting silently joins rows after an unbalanced quote.
    lines = (OLD / "num.txt").read_text(encoding="utf-8").splitlines()
    quoted = pd.read_csv(OLD / "num.txt", sep="\t", dtype=str)
    assert len(quoted) < len(lines) - 1
    table, report = read_filtered(locate_quarter(OLD), "num", ("adsh", "tag", "footnote"))
    assert table.num_rows == len(lines) - 1
    assert report.skipped_rows == 0
    assert '"As restated, see Note 2' in table.column("footnote").to_pylist()


def test_current_layout_doubled_quotes_are_unquoted() -> None:
    table, _ = read_filtered(locate_quarter(CURRENT), "num", ("tag", "footnote"))
    notes = [n for n in table.column("footnote").to_pylist() if n]
    assert notes == ['Includes the "Series A" conversion.', 'Restated; see "Note 2."']


def test_latin1_fallback_is_reported(both: SecImport) -> None:
    assert _row(both, "9100005", 2009)["firm_name"] == "BR\u00c9VAL FOUNDRY INC"
    assert any("Latin-1" in w and "sub.txt" in w for w in both.warnings)


# --- selection rules ----------------------------------------------------------------------


def test_segment_coregistrant_prior_year_and_foreign_currency_rows_are_ignored(
    both: SecImport,
) -> None:
    # 880,000 consolidated; a co-registrant's 200,000 must not be added or chosen.
    assert _row(both, "9100001", 2009)["total_assets"] == 880_000
    # 10-K/A: 1,010,000 consolidated; the pumps segment (410,000) is ignored.
    assert _row(both, "9100001", 2020)["total_assets"] == 1_010_000
    # Revenue in USD only (a EUR fact of 700,000 exists); cover shares without the
    # co-registrant's 100.
    assert _row(both, "9100001", 2009)["shares_outstanding"] == 9_500


def test_restated_keeps_latest_filed_and_first_filed_keeps_original() -> None:
    latest = import_sec([CURRENT], forms=BOTH_FORMS)
    first = import_sec([CURRENT], forms=BOTH_FORMS, restated=False)
    r, f = _row(latest, "9100001", 2020), _row(first, "9100001", 2020)
    # 10-K/A: 55,000 + 200,000 + finance lease 12,000 (presented); 118,000 + 40,000.
    assert (r["total_assets"], r["total_debt"], r["ebitda"]) == (1_010_000, 267_000, 158_000)
    # 10-K (no presentation in pre.txt): DebtCurrent 50,000 + LongTermDebtNoncurrent 200,000.
    assert (f["total_assets"], f["total_debt"], f["ebitda"]) == (1_000_000, 250_000, 160_000)
    # Item by item: the original filed no lease line, so the first figure filed is the
    # amendment's.
    assert f["lease_liabilities"] == 30_000
    assert _source(first, "9100001", 2020, "total_debt") == (
        "DebtCurrent + LongTermDebtNoncurrent")
    s = latest.sources
    adsh = s.loc[(s["firm_id"] == "9100001") & (s["fiscal_year"] == 2020), "adsh"].unique()
    assert list(adsh) == ["0009100001-21-000031"]
    assert any("earlier figures dropped" in w for w in latest.warnings)


def test_a_partial_amendment_never_blanks_the_full_report() -> None:
    # The 10-K/A has no fiscal-2019 comparative; the 10-K's 900,000 stays (item by item).
    latest = import_sec([CURRENT], forms=BOTH_FORMS)
    assert _row(latest, "9100001", 2019)["total_assets"] == 900_000
    assert _source(latest, "9100001", 2019, "total_assets") == "Assets"
    s = latest.sources.set_index(["firm_id", "fiscal_year", "column"])
    assert s.loc[("9100001", 2019, "total_assets"), "adsh"] == "0009100001-21-000010"
    assert s.loc[("9100001", 2019, "total_assets"), "role"] == "comparative"
    assert s.loc[("9100001", 2019, "total_assets"), "fact_date"] == "2019-12-31"


def test_default_forms_keep_only_the_10k_and_skip_the_quarterly_report() -> None:
    result = import_sec([CURRENT], exclude_sic=None)
    assert _row(result, "9100001", 2020)["total_assets"] == 1_000_000
    assert "9100006" not in set(result.panel["firm_id"])  # its only filing is a 10-Q
    assert "9100006" not in set(result.excluded["firm_id"])  # a 10-Q is not a firm-year
    assert set(result.sources["form"]) == {"10-K"}


def test_empty_fp_on_a_10k_is_an_annual_report(both: SecImport) -> None:
    assert _row(both, "9100003", 2020)["total_assets"] == 820_000


def test_fiscal_year_rule() -> None:
    ends = pd.Series(pd.to_datetime(
        ["2021-01-31", "2021-05-31", "2021-06-30", "2020-12-31", "2010-03-31"]))
    assert fiscal_year_of(ends).tolist() == [2020, 2020, 2021, 2020, 2009]


def test_fiscal_year_ending_in_january_counts_as_previous_year(both: SecImport) -> None:
    s = both.sources
    periods = s.loc[s["firm_id"] == "9100002"].groupby("fiscal_year")["fact_date"].first()
    assert periods.to_dict() == {2009: "2010-01-31", 2019: "2020-01-31", 2020: "2021-01-31"}


def test_debt_sums_without_double_counting(both: SecImport) -> None:
    cases = {
        # The balance sheet as presented: current debt, long-term debt, finance leases.
        ("9100001", 2020): (
            "DebtCurrent + LongTermDebtNoncurrent + FinanceLeaseLiabilityNoncurrent", 267_000),
        # Only LongTermDebt (no presentation): it is the whole debt (current maturities in).
        ("9100002", 2020): ("LongTermDebt", 180_000),
        ("9100002", 2009): ("LongTermDebt", 170_000),
        # Presented: commercial paper and bank loans under "Total short-term borrowings"
        # (a subtotal, not added), the current portion, and long-term debt "less current
        # portion" with its net line (a subtotal after a negated line, not added).
        ("9100003", 2020): (
            "CommercialPaper + custom:BankLoans + LongTermDebtCurrent + LongTermDebt"
            " - LongTermDebtCurrent",
            315_000,
        ),
        ("9100001", 2009): ("LongTermDebtCurrent + LongTermDebtNoncurrent", 205_000),
        ("9100005", 2009): (
            "LongTermDebtAndCapitalLeaseObligationsCurrent"
            " + LongTermDebtAndCapitalLeaseObligations",
            100_000,
        ),
    }
    for (firm, year), (label, value) in cases.items():
        assert _source(both, firm, year, "total_debt") == label
        assert _row(both, firm, year)["total_debt"] == value


def test_custom_tags_are_not_standard(both: SecImport) -> None:
    # Firm 9100002 has a custom-taxonomy LongTermDebtNoncurrent of 999,999: not used.
    assert _row(both, "9100002", 2020)["total_debt"] == 180_000


def test_other_formulas_are_recorded(both: SecImport) -> None:
    assert _source(both, "9100003", 2020, "ppe_net") == (
        "PropertyPlantAndEquipmentGross - "
        "AccumulatedDepreciationDepletionAndAmortizationPropertyPlantAndEquipment")
    assert _source(both, "9100002", 2020, "ebitda") == (
        "OperatingIncomeLoss + (Depreciation + AmortizationOfIntangibleAssets)")
    assert _source(both, "9100001", 2020, "lease_liabilities") == "OperatingLeaseLiability"
    assert _source(both, "9100001", 2020, "shares_outstanding") == (
        "dei:EntityCommonStockSharesOutstanding")
    assert _source(both, "9100001", 2020, "market_equity") == "dei:EntityPublicFloat (proxy)"


def test_finance_leases_are_debt_and_only_operating_leases_are_lease_liabilities(
    both: SecImport,
) -> None:
    # 9100005's capital lease obligations are not operating leases: lease_liabilities empty.
    assert np.isnan(_row(both, "9100005", 2009)["lease_liabilities"])
    # 9100001 presents a finance lease line: inside total_debt, not in lease_liabilities.
    row = _row(both, "9100001", 2020)
    assert (row["total_debt"], row["lease_liabilities"]) == (267_000, 30_000)


def test_items_absent_stay_missing_not_zero(both: SecImport) -> None:
    fenwold = _row(both, "9100003", 2020)
    assert np.isnan(fenwold["ebitda"])  # no D&A tag (notes only)
    assert np.isnan(fenwold["interest_expense"])  # its fact has an empty value
    bank = _row(both, "9100004", 2020)
    assert np.isnan(bank["total_debt"])  # no presentation and no debt tag: missing, not 0
    assert (both.panel.select_dtypes("number") != 0).all().all()


def test_every_number_has_exactly_one_source(both: SecImport) -> None:
    numbers = [c for c in PANEL_COLUMNS if c in BY_NAME and BY_NAME[c].kind == "number"]
    long = both.panel.melt(id_vars=["firm_id", "fiscal_year"], value_vars=numbers,
                           var_name="column").dropna(subset=["value"])
    have = set(zip(long["firm_id"], long["fiscal_year"], long["column"], strict=True))
    s = both.sources
    sourced = list(zip(s["firm_id"], s["fiscal_year"], s["column"], strict=True))
    assert len(sourced) == len(set(sourced))
    assert set(sourced) == have
    assert (s["source"].str.len() > 0).all()


def test_pre_txt_names_the_statements(both: SecImport) -> None:
    s = both.sources.set_index(["firm_id", "fiscal_year", "column"])["statement"]
    assert s[("9100001", 2020, "total_debt")] == "BS"
    assert s[("9100001", 2020, "ebitda")] == "CF;IS"
    assert s[("9100001", 2009, "total_debt")] == ""  # the old quarter has no pre.txt


# --- market equity ------------------------------------------------------------------------


def test_market_equity_from_price_file_with_public_float_fallback() -> None:
    result = import_sec([CURRENT, OLD], forms=BOTH_FORMS, prices=FIXTURE / "prices.csv",
                        exclude_sic=None)
    q20 = _row(result, "9100001", 2020)
    assert (q20["share_price"], q20["market_equity"]) == (25.0, 250_000.0)
    assert q20["market_equity_source"] == "price_file"
    assert _row(result, "9100001", 2009)["market_equity"] == 20.0 * 9_500
    m = _row(result, "9100002", 2020)  # price dated two days before a 31 January year end
    assert (m["market_equity"], m["market_equity_source"]) == (12.5 * 5_000, "price_file")
    f = _row(result, "9100003", 2020)  # its price is two months old: float proxy instead
    assert np.isnan(f["share_price"])
    assert (f["market_equity"], f["market_equity_source"]) == (90_000, "public_float_proxy")
    assert _source(result, "9100001", 2020, "share_price") == "price file 2020-12-31"
    assert _source(result, "9100001", 2020, "market_equity") == (
        "share_price x shares_outstanding")
    bank = _row(result, "9100004", 2020)
    assert np.isnan(bank["market_equity"]) and bank["market_equity_source"] is None


@pytest.mark.parametrize(
    ("content", "match"),
    [
        ("cik,date,price\n9100001,2020-13-45,1\n", r"column date must be a date.*data row 1"),
        ("cik,date,price\n9100001,2020-12-31,1\nx1,2020-12-31,2\n", r"cik.*data row 2"),
        ("cik,date,price\n9100001,2020-12-31,-3\n", r"price must be a number >= 0.*data row 1"),
        ("cik,when,price\n9100001,2020-12-31,1\n", r"column 'date' is missing"),
        ("cik,date,price\n9100001,2020-12-31,1\n9100001,2020-12-31,2\n",
         r"one price per cik and date.*data row 2"),
    ],
)
def test_price_file_errors_name_row_and_column(tmp_path: Path, content: str, match: str) -> None:
    p = tmp_path / "prices.csv"
    p.write_text(content, encoding="utf-8")
    with pytest.raises(SchemaError, match=match):
        read_prices(p)


def test_price_file_missing(tmp_path: Path) -> None:
    with pytest.raises(SchemaError, match="price file must be a readable CSV"):
        import_sec([CURRENT], prices=tmp_path / "nope.csv")


# --- SIC filter ---------------------------------------------------------------------------


def test_exclude_sic_defaults_to_financials_and_utilities_and_lists_each_firm_year() -> None:
    result = import_sec([CURRENT, OLD], forms=BOTH_FORMS)  # the default ranges
    assert "9100004" not in set(result.panel["firm_id"])
    assert len(result.panel) == 8
    assert result.n_excluded_firms == 1
    ex = result.excluded.iloc[0]
    assert (ex["firm_id"], ex["fiscal_year"], ex["industry"], ex["reason"]) == (
        "9100004", 2020, "6035", "excluded_industry")
    assert ex["detail"] == "SIC 6035 in 6000-6999" and ex["adsh"] == "0009100004-21-000002"
    assert "9100004" not in set(result.sources["firm_id"])
    two = import_sec([CURRENT, OLD], forms=BOTH_FORMS, exclude_sic="3560, 2000-2299")
    assert two.excluded.groupby("firm_id").size().to_dict() == {"9100001": 3, "9100002": 3}
    assert set(two.excluded["reason"]) == {"excluded_industry"}
    every = import_sec([CURRENT, OLD], forms=BOTH_FORMS, exclude_sic=None)
    assert every.excluded.empty and len(every.panel) == 9


def test_parse_sic_ranges() -> None:
    assert parse_sic_ranges("6000-6999,4900-4999") == ((6000, 6999), (4900, 4999))
    assert parse_sic_ranges(" 6798 ") == ((6798, 6798),)


@pytest.mark.parametrize("bad", ["", "60a0-6999", "6999-6000", "6000-", "12345", "6000-6999,,"])
def test_bad_sic_ranges_are_config_errors(bad: str) -> None:
    with pytest.raises(ConfigError, match=r"exclude_sic must be comma-separated") as info:
        import_sec([CURRENT], exclude_sic=bad)
    assert "\n" not in str(info.value)


# --- bad input ----------------------------------------------------------------------------


def test_missing_num_txt_names_the_folder(tmp_path: Path) -> None:
    (tmp_path / "sub.txt").write_bytes((CURRENT / "sub.txt").read_bytes())
    with pytest.raises(SchemaError, match=rf"{tmp_path.name} must hold num.txt"):
        import_sec([tmp_path])


def test_missing_sub_txt_in_a_zip(tmp_path: Path) -> None:
    z = tmp_path / "2021q1.zip"
    with zipfile.ZipFile(z, "w") as zf:
        zf.write(CURRENT / "num.txt", "num.txt")
    with pytest.raises(SchemaError, match=r"2021q1.zip must hold sub.txt"):
        import_sec([z])


def test_not_a_zip_and_no_such_path(tmp_path: Path) -> None:
    bad = tmp_path / "q.zip"
    bad.write_text("not a zip", encoding="utf-8")
    with pytest.raises(SchemaError, match="must be a zip"):
        import_sec([bad])
    with pytest.raises(SchemaError, match="must be an existing zip or folder"):
        import_sec([tmp_path / "absent"])


def test_missing_column_is_named(tmp_path: Path) -> None:
    (tmp_path / "sub.txt").write_bytes((CURRENT / "sub.txt").read_bytes())
    text = (CURRENT / "num.txt").read_text(encoding="utf-8").replace("\tuom\t", "\tunit\t", 1)
    (tmp_path / "num.txt").write_text(text, encoding="utf-8")
    with pytest.raises(SchemaError, match=r"num.txt must have columns .*'uom' is missing"):
        import_sec([tmp_path])


def test_rows_with_wrong_field_count_are_skipped_with_a_warning(tmp_path: Path) -> None:
    (tmp_path / "sub.txt").write_bytes((CURRENT / "sub.txt").read_bytes())
    lines = (CURRENT / "num.txt").read_text(encoding="utf-8").splitlines(keepends=True)
    lines.insert(3, "0009100001-21-000010\tAssets\tbroken row\n")
    (tmp_path / "num.txt").write_text("".join(lines), encoding="utf-8")
    result = import_sec([tmp_path])
    assert any("1 rows with a wrong number of fields were skipped (first at data row 3)" in w
               for w in result.warnings)
    assert _row(result, "9100001", 2020)["total_assets"] == 1_000_000


@pytest.mark.parametrize("forms", [("10-Q",), (), ("20-F", "10-K")])
def test_unknown_forms_are_config_errors(forms: tuple[str, ...]) -> None:
    with pytest.raises(ConfigError, match="forms must be among"):
        import_sec([CURRENT], forms=forms)


def test_no_paths_is_a_config_error() -> None:
    with pytest.raises(ConfigError, match="at least one SEC quarter"):
        import_sec([])


def test_same_quarter_twice_is_used_once(both: SecImport) -> None:
    twice = import_sec([CURRENT, OLD, CURRENT], forms=BOTH_FORMS, exclude_sic=None)
    pd.testing.assert_frame_equal(twice.panel, both.panel)
    assert any("given more than once; it was read once" in w for w in twice.warnings)


# --- writing ------------------------------------------------------------------------------


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_write_panel_and_sources_beside_it(tmp_path: Path, both: SecImport, suffix: str) -> None:
    out = tmp_path / "sub" / f"panel{suffix}"
    panel_path, sources_path, excluded_path = write_sec_import(both, out)
    assert panel_path == out and sources_path == tmp_path / "sub" / "panel.sources.csv"
    assert excluded_path == tmp_path / "sub" / "panel.excluded.csv"
    ledger = pd.read_csv(excluded_path, dtype=str)
    assert list(ledger.columns) == list(LEDGER_COLUMNS)
    back = (pd.read_csv(out, dtype={"firm_id": str, "industry": str}) if suffix == ".csv"
            else pd.read_parquet(out))
    pd.testing.assert_frame_equal(_normalise(back), _expected())
    src = pd.read_csv(sources_path, dtype=str, keep_default_na=False)
    assert list(src.columns) == list(SOURCE_COLUMNS) and len(src) == len(both.sources)
    assert sorted(p.name for p in out.parent.iterdir()) == sorted(
        [out.name, "panel.sources.csv", "panel.excluded.csv", ".levgap-output"])  # no temp left


def test_write_refuses_other_suffixes(tmp_path: Path, both: SecImport) -> None:
    with pytest.raises(ConfigError, match=r"out must end in .csv or .parquet"):
        write_sec_import(both, tmp_path / "panel.xlsx")


# --- the tag formulas, checked another way --------------------------------------------------

_ALL_TAGS = sorted(TAG_KINDS) + [COVER_SHARES, PUBLIC_FLOAT]
_NAME = re.compile(r"(?:dei:)?[A-Z][A-Za-z0-9]+")


def _evaluate(label: str, values: dict[str, float]) -> float:
    """Evaluate a source label as arithmetic over the tag values it names."""
    expr = _NAME.sub(lambda m: repr(float(values.get(m.group(0), 0.0))), label)
    assert re.fullmatch(r"[0-9eE.+\-() ]+", expr), expr
    return float(eval(expr, {"__builtins__": {}}))  # noqa: S307 - digits and operators only


_rows = st.lists(
    st.dictionaries(st.sampled_from(_ALL_TAGS), st.integers(0, 10**6), max_size=14),
    min_size=1, max_size=12,
)


_signed_rows = st.lists(
    st.dictionaries(st.sampled_from(_ALL_TAGS), st.integers(-10**6, 10**6), max_size=14),
    min_size=1, max_size=12,
)
_ABSOLUTE = {"dna_sign_flipped", "interest_sign_flipped", "dividends_sign_flipped"}


@settings(max_examples=80, deadline=None)
@given(rows=_signed_rows)
def test_every_label_evaluates_to_its_value(rows: list[dict[str, int]]) -> None:
    wide = pd.DataFrame(rows, columns=_ALL_TAGS, dtype=float)
    columns = build_columns(wide)
    columns["total_debt"] = debt_from_tags(wide)
    for name, item in columns.items():
        for i, row in enumerate(rows):
            if np.isnan(item.value[i]):
                assert item.label[i] == "" and item.flag[i] == "", (name, row)
                continue
            expected = _evaluate(item.label[i], row)
            if set(item.flag[i].split(";")) & _ABSOLUTE:
                # An absolute value was taken somewhere inside: the label is exact up to it.
                assert abs(item.value[i]) <= sum(abs(row.get(t, 0)) for t in
                                                 _NAME.findall(item.label[i])), name
            else:
                assert expected == pytest.approx(item.value[i]), (name, item.label[i])
            assert set(_NAME.findall(item.label[i])) <= set(row), (name, item.label[i])


@settings(max_examples=120, deadline=None)
@given(rows=_rows)
def test_debt_formula_never_counts_a_component_twice(rows: list[dict[str, int]]) -> None:
    wide = pd.DataFrame(rows, columns=_ALL_TAGS, dtype=float)
    for label in debt_from_tags(wide).label:
        if not label:
            continue
        tags = set(_NAME.findall(label))
        coef = {t: _evaluate(label, {t: 1.0}) for t in tags}
        assert set(coef.values()) <= {-1.0, 0.0, 1.0}, label
        assert all(v >= 0 for t, v in coef.items() if t != "LongTermDebtCurrent"), label
        if coef.get("LongTermDebt") == 1.0:  # it already holds the current maturities
            assert coef.get("LongTermDebtCurrent", 0.0) <= 0.0, label
        assert not (coef.get("CommercialPaper") == 1.0 and coef.get("ShortTermBorrowings")), label
        assert not (coef.get("DebtCurrent") and coef.get("LongTermDebtCurrent") == 1.0), label


# --- the benchmark cannot rot ---------------------------------------------------------------


@pytest.mark.slow
def test_bench_sec_runs_on_a_small_synthetic_quarter(tmp_path: Path) -> None:
    import importlib.util

    path = Path(__file__).resolve().parents[1] / "benchmark" / "bench_sec.py"
    spec = importlib.util.spec_from_file_location("bench_sec", path)
    assert spec is not None and spec.loader is not None
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    figures = bench.run(60_000, quarters=2, workers=2, data_dir=tmp_path)
    assert figures["facts"] == 60_000 and figures["num_txt_mb"] > 5
    assert figures["pre_rows"] > 50_000 and figures["tag_rows"] > 2_000
    # Every 10-K gives its own year and its comparative, with total assets and debt.
    assert figures["panel_rows"] == 2 * figures["annual_reports"] > 200
    assert figures["assets_share"] == 1.0 and figures["debt_share"] == 1.0
    assert figures["peak_rss_mb"] > 0 and figures["seconds"] > 0
    assert figures["parallel_quarters"] == 2 and figures["parallel_worker_peak_rss_mb"] > 0
    assert figures["rss_ok"] is True


def test_notebook_rendering_names_the_counts(both: SecImport) -> None:
    html = both._repr_html_()
    assert html.startswith("<p>SEC import: 9 firm-years") and "<table" in html
    assert "0 firm-years in the ledger" in html
    assert "Latin-1" in html


def test_two_period_ends_in_one_fiscal_year_keep_the_later(tmp_path: Path) -> None:
    # A change of fiscal year end: a 10-KT for the three months to March 2021 falls in fiscal
    # 2020 (January to May count as the previous year), like the December 2020 10-K.
    for name in ("tag.txt", "pre.txt"):
        (tmp_path / name).write_bytes((CURRENT / name).read_bytes())
    num = (CURRENT / "num.txt").read_text(encoding="utf-8")
    num += "0009100002-21-000099\tAssets\tus-gaap/2020\t20210331\t0\tUSD\t\t\t650000.0000\t\n"
    (tmp_path / "num.txt").write_text(num, encoding="utf-8")
    lines = (CURRENT / "sub.txt").read_text(encoding="utf-8").splitlines(keepends=True)
    header = lines[0].rstrip("\n").split("\t")
    row = lines[3].rstrip("\n").split("\t")  # Marrowby's 10-K
    fields = dict(zip(header, row, strict=True))
    fields.update(adsh="0009100002-21-000099", form="10-KT", period="20210331",
                  filed="20210520", fp="FY")
    lines.append("\t".join(fields[h] for h in header) + "\n")
    (tmp_path / "sub.txt").write_text("".join(lines), encoding="utf-8")
    result = import_sec([tmp_path], forms=("10-K", "10-KT"))
    s = result.sources
    kept = s.loc[(s["firm_id"] == "9100002") & (s["fiscal_year"] == 2020),
                 ["adsh", "period"]].drop_duplicates()
    assert kept.to_dict("records") == [{"adsh": "0009100002-21-000099", "period": "2021-03-31"}]
    assert _row(result, "9100002", 2020)["total_assets"] == 650_000
    assert any("two period ends in one fiscal year" in w and "9100002" in w
               for w in result.warnings)


def test_no_matching_submission_gives_an_empty_panel_and_says_so() -> None:
    result = import_sec([CURRENT], forms=("10-KT",))
    assert result.panel.empty and list(result.panel.columns) == list(PANEL_COLUMNS)
    assert result.sources.empty
    # Every annual report filed is in the ledger, saying why.
    assert set(result.excluded["reason"]) == {"form_not_selected"}
    assert sorted(result.excluded["firm_id"]) == ["9100001", "9100002", "9100003", "9100004"]
    assert result.warnings == ("No annual submission matched the forms asked for; the panel "
                               "is empty.",)


def test_current_layout_quoted_newline_stays_in_its_field(tmp_path: Path) -> None:
    (tmp_path / "sub.txt").write_bytes((CURRENT / "sub.txt").read_bytes())
    text = (CURRENT / "num.txt").read_text(encoding="utf-8")
    text = text.replace('"Includes the ""Series A"" conversion."',
                        '"Includes the ""Series A""\nconversion."')
    (tmp_path / "num.txt").write_text(text, encoding="utf-8")
    table, report = read_filtered(locate_quarter(tmp_path), "num", ("tag", "footnote"))
    assert report.skipped_rows == 0
    assert 'Includes the "Series A"\nconversion.' in table.column("footnote").to_pylist()
    assert table.num_rows == len((CURRENT / "num.txt").read_text(encoding="utf-8")
                                 .splitlines()) - 1


def test_written_csv_neutralises_formula_like_text(tmp_path: Path, both: SecImport) -> None:
    import dataclasses

    panel = both.panel.copy()
    panel.loc[0, "firm_name"] = "=HYPERLINK(1)"
    write_sec_import(dataclasses.replace(both, panel=panel), tmp_path / "p.csv")
    back = pd.read_csv(tmp_path / "p.csv", dtype=str)
    assert back.loc[0, "firm_name"] == "'=HYPERLINK(1)"


# --- the command line -----------------------------------------------------------------------


def _invoke(args: list[str]) -> Any:
    from typer.testing import CliRunner

    from levgap.cli import app

    return CliRunner().invoke(app, args)


def test_cli_import_sec_writes_panel_and_sources(tmp_path: Path) -> None:
    out = tmp_path / "panel.csv"
    result = _invoke(["import-sec", str(CURRENT), str(OLD), "--out", str(out),
                      "--forms", "10-K,10-K/A", "--exclude-sic", "6000-6999"])
    assert result.exit_code == 0, result.output
    assert "8 firm-years of 4 firms" in result.output
    assert "left out: 1 firm-years (excluded_industry 1)" in result.output
    assert "Latin-1" in result.output
    back = pd.read_csv(out, dtype={"firm_id": str, "industry": str})
    expected = _expected().query("firm_id != '9100004'").reset_index(drop=True)
    pd.testing.assert_frame_equal(_normalise(back), expected)
    sources = pd.read_csv(tmp_path / "panel.sources.csv", dtype=str)
    assert set(sources["firm_id"]) == set(expected["firm_id"])
    ledger = pd.read_csv(tmp_path / "panel.excluded.csv", dtype=str)
    assert ledger[["firm_id", "reason"]].values.tolist() == [["9100004", "excluded_industry"]]


def test_cli_import_sec_default_and_all_industries(tmp_path: Path) -> None:
    out = tmp_path / "panel.csv"
    assert _invoke(["import-sec", str(CURRENT), "--out", str(out)]).exit_code == 0
    assert "9100004" not in set(pd.read_csv(out, dtype=str)["firm_id"])  # a bank (SIC 6035)
    result = _invoke(["import-sec", str(CURRENT), "--out", str(out), "--all-industries"])
    assert result.exit_code == 0, result.output
    assert "9100004" in set(pd.read_csv(out, dtype=str)["firm_id"])
    _one_line_error(_invoke(["import-sec", str(CURRENT), "--out", str(out), "--all-industries",
                             "--exclude-sic", "6000-6999"]), "must not be given together")


def test_cli_import_sec_first_filed_with_prices(tmp_path: Path) -> None:
    out = tmp_path / "panel.parquet"
    result = _invoke(["import-sec", str(CURRENT), "--out", str(out), "--forms", "10-K,10-K/A",
                      "--as-first-filed", "--prices", str(FIXTURE / "prices.csv")])
    assert result.exit_code == 0, result.output
    p = pd.read_parquet(out)
    row = p.loc[(p["firm_id"] == "9100001") & (p["fiscal_year"] == 2020)].iloc[0]
    assert (row["total_assets"], row["market_equity"]) == (1_000_000, 250_000)
    assert row["market_equity_source"] == "price_file"
    assert (tmp_path / "panel.sources.csv").exists()


def test_cli_import_sec_help_shows_an_example() -> None:
    result = _invoke(["import-sec", "--help"])
    assert result.exit_code == 0
    assert "Example: levgap import-sec" in result.output
    for option in ("--out", "--forms", "--as-first-filed", "--prices", "--exclude-sic",
                   "--all-industries", "--fx-rates", "--drop-subsidiaries", "--workers"):
        assert option in result.output


@pytest.mark.parametrize(
    ("extra", "pattern"),
    [
        (["--exclude-sic", "60-x"], "exclude_sic must be comma-separated"),
        (["--forms", "10-Q"], "forms must be among"),
        (["--prices", "missing-prices.csv"], "price file must be a readable CSV"),
    ],
)
def test_cli_import_sec_bad_options_are_one_line(tmp_path: Path, extra: list[str],
                                                 pattern: str) -> None:
    result = _invoke(["import-sec", str(CURRENT), "--out", str(tmp_path / "p.csv"), *extra])
    _one_line_error(result, pattern)
    assert not (tmp_path / "p.csv").exists()


def test_cli_import_sec_bad_inputs_are_one_line(tmp_path: Path) -> None:
    (tmp_path / "q").mkdir()
    (tmp_path / "q" / "sub.txt").write_bytes((CURRENT / "sub.txt").read_bytes())
    _one_line_error(_invoke(["import-sec", str(tmp_path / "q"), "--out",
                             str(tmp_path / "p.csv")]), "must hold num.txt")
    _one_line_error(_invoke(["import-sec", str(CURRENT), "--out", str(tmp_path / "p.xlsx")]),
                    "out must end in .csv or .parquet")


def _one_line_error(result: Any, pattern: str) -> None:
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    lines = [ln for ln in result.output.strip().splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("levgap: error:"), result.output
    assert pattern in lines[0], result.output
