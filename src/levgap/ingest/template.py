"""The input template, generated from ``schema.py``: a CSV, its README, an example run.toml
and an example deal scenario file (``deal.toml``, from ``levgap.ingest.deal_template``).

``levgap template`` writes these four files (``levgap.report.files.write_template``); the
repository's ``data_templates/`` holds the same text and a test keeps the two identical, so
the documentation cannot drift from the schema the reader enforces.
"""

from __future__ import annotations

import csv
import io

from levgap.codes import (
    ANALYSIS_FLAGS,
    ANALYSIS_REASONS,
    FLAGS,
    MEASURE_REASONS,
    NA_TOKENS,
    REASONS,
    SEC_FLAGS,
    SEC_REASONS,
    YEAR_RANGE,
)
from levgap.definitions import DRIVERS as DRIVER_INFO
from levgap.glossary import glossary_markdown
from levgap.ingest.deal_template import deal_template
from levgap.schema import COLUMNS, SCHEMA_VERSION, Column

TEMPLATE_FILES: tuple[str, ...] = ("panel_template.csv", "README.md", "run.toml", "deal.toml")

# Invented example rows (a fictitious axle maker and a fictitious food co-operative); the
# first row is the schema's own examples.
_EXTRA_ROWS: tuple[dict[str, str], ...] = (
    {
        "firm_id": "NRD-001", "fiscal_year": "2022", "industry": "3714",
        "total_assets": "1588.1", "total_debt": "398.6", "ppe_net": "625.3", "ebitda": "201.7",
        "book_equity": "741.0", "firm_name": "Nordvik Axle Works", "market_equity": "",
        "shares_outstanding": "50.0", "share_price": "21.40", "revenue": "1377.5",
        "cash": "88.0", "interest_expense": "20.1", "rd_expense": "13.5",
        "lease_liabilities": "38.2", "current_assets": "566.2",
        "current_liabilities": "312.0", "total_liabilities": "847.1",
        "retained_earnings": "402.3", "ebit": "142.9", "dividends_paid": "25.0",
        "currency": "EUR", "fx_rate": "1.0",
    },
    {
        "firm_id": "0457", "fiscal_year": "2022", "industry": "2041",
        "total_assets": "318.0", "total_debt": "0", "ppe_net": "142.6", "ebitda": "-6.4",
        "book_equity": "-12.5", "firm_name": "Sunfield Mill Cooperative", "market_equity": "",
        "shares_outstanding": "", "share_price": "", "revenue": "402.9", "cash": "",
        "interest_expense": "", "rd_expense": "", "lease_liabilities": "",
        "current_assets": "", "current_liabilities": "", "total_liabilities": "",
        "retained_earnings": "", "ebit": "", "dividends_paid": "", "currency": "EUR",
        "fx_rate": "1.0",
    },
)


def template_csv() -> str:
    """The template panel: every schema-v1 column in order and three invented rows.

    Returns
    -------
    str
        CSV text (comma-separated, ``\\n`` line ends).
    """
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow([c.name for c in COLUMNS])
    writer.writerow([c.example for c in COLUMNS])
    for row in _EXTRA_ROWS:
        writer.writerow([row[c.name] for c in COLUMNS])
    return buf.getvalue()


def _minimum(c: Column) -> str:
    if c.name == "fiscal_year":
        return f"{YEAR_RANGE[0]}..{YEAR_RANGE[1]}"
    if c.minimum is None:
        return "any"
    return f"> {c.minimum:g}" if c.strict else f">= {c.minimum:g}"


def template_readme() -> str:
    """The template's README: columns, number formats, row numbers, reason codes and flags.

    Returns
    -------
    str
        Markdown text.
    """
    lo, hi = YEAR_RANGE
    cols = "\n".join(
        f"| `{c.name}` | {'yes' if c.required else 'no'} | {c.kind} | {c.unit} | "
        f"{_minimum(c) if c.kind != 'text' else '-'} | {c.meaning} |"
        for c in COLUMNS
    )
    reasons = "\n".join(f"| `{k}` | {v} |" for k, v in
                        {**REASONS, **ANALYSIS_REASONS, **MEASURE_REASONS}.items())
    flags = "\n".join(f"| `{k}` | {v} |" for k, v in {**FLAGS, **ANALYSIS_FLAGS}.items())
    glossary = glossary_markdown()
    blanks = ", ".join(f"`{t}`" for t in NA_TOKENS if t) + " and an empty cell"
    sec_reasons = "\n".join(f"| `{k}` | {v} |" for k, v in SEC_REASONS.items())
    sec_flags = "\n".join(f"| `{k}` | {v} |" for k, v in SEC_FLAGS.items())
    drivers = "\n".join(f"| `{d.name}` | {d.built} | {d.sign or '-'} | {d.source or '-'} |"
                        for d in DRIVER_INFO.values())
    return f"""# levgap input template (schema v{SCHEMA_VERSION})

`panel_template.csv` shows the layout levgap reads: one row per firm and fiscal year,
`firm_id` + `fiscal_year` unique. The example rows are invented. `run.toml` is an annotated
run configuration (`levgap analyze PANEL --config run.toml`); every key in it is optional.
`deal.toml` is an annotated deal scenario file (`levgap proforma RESULTS FIRM_ID --scenario
deal.toml`), written for the demo's firm TR0144.

Files may be CSV (comma, semicolon, tab or `|` separated; UTF-8 with or without BOM), Parquet
or XLSX (the first sheet, or `[input] sheet`; formulas are read as the values the spreadsheet
program last computed and saved). Headers may differ from the column names below
in case, spaces, `-` and `_` (`Total Assets` matches `total_assets`); other headers are mapped
in `[columns]` of `run.toml` (a header named there matches exactly, else regardless of case
and surrounding spaces: `total_debt = "total debt"` finds ` Total Debt `). Columns that are
not in the schema are ignored (and listed in
`run.json`).

## Columns

Money columns share one currency and unit within a file (for example millions). They are
multiplied by `[units] scale` and, where given, by `fx_rate`, to reach the reference unit and
currency; outputs are in that unit.

| column | required | type | unit | allowed | meaning |
|---|---|---|---|---|---|
{cols}

- `firm_id`, `industry`, `firm_name` and `currency` are text: leading zeros are kept
  (`0457` stays `0457`); surrounding spaces and NUL bytes are removed. A code written as a
  whole number with a `.0` fraction (`3711.0`, as spreadsheets export numbers) is the whole
  number (`3711`) in `firm_id` and `industry`, as a number cell of a workbook is, so `3711`
  and `3711.0` are one industry.
- `fiscal_year` must be a whole number between {lo} and {hi} (`2021` or `2021.0`).
- Numbers use `.` as the decimal mark unless `[input] decimal` says otherwise. A thousands
  mark is read only where `[input] thousands` gives one (a space there also accepts no-break
  spaces) or, with `decimal = ","`, as `.` when none is given; it must group the digits by
  three: with `decimal = ","`, `147.782` is 147782 and `1.234.567,8` is 1234567.8, while
  `1.5` is not a number (the row is excluded as `non_numeric`) rather than a guess. With a
  decimal comma a dot is never a decimal point: with another thousands mark (`thousands =
  " "`) a value holding a dot (`147.782`, `1.5`, `.782`) is not a number, and a decimal
  comma needs a digit after it (`147.782,` is not a number). With the default `decimal =
  "."`, `147.782` is 147.782 and `1,5` is not a number. `decimal` is `.` or `,`;
  `thousands` is one of `.`, `,`, a space (or a no-break space) and `'`. Exponents
  (`1.5e3`) and accounting negatives (`(12.5)` is -12.5) are accepted; currency signs and
  `%` are not.
- Blank values: {blanks} (case ignored) are read as a blank, not as text, in every column:
  a `firm_id` of `NA` or `null` is a blank `firm_id` (reason `missing_value`).
- `market_equity`: when blank, `shares_outstanding * share_price` is used where both are
  given.
- `currency` must be an ISO 4217 code (case ignored; the list ships with levgap, withdrawn
  codes such as `DEM` included); another value excludes the row (`unknown_currency`).
- `currency` and `fx_rate`: when several currencies appear, or rows carry a currency other
  than `[units] currency`, a file without an `fx_rate` column is refused; with the column,
  every row whose currency is not `[units] currency` needs a value, a row with a blank
  `currency` included (it is not assumed to be in the reference currency). A blank `fx_rate`
  otherwise counts as 1.
- Money after `[units] scale` and `fx_rate` must stay within +/-1e300 (ratios and sums of
  larger values overflow); a row beyond it is excluded (`money_overflow`).

## Drivers

The model's drivers (`[model] drivers`; the first five are the default), how each is built,
and the sign the literature reports (written beside every estimate in `coefficients.csv` as
`expected_sign`, `agrees` and `sign_source`). `[model] input_drivers` adds numeric columns of
your file as further drivers, as given.

| driver | built as | expected sign | source |
|---|---|---|---|
{drivers}

## What happens to each row

Every data row ends in exactly one place: used, or listed in `exclusions.csv` with its
`source_row`, a reason code and a detail naming the columns and values. `source_row` is the
1-based data row of the input: the first row below the header is 1. Blank rows (empty lines,
or rows whose every cell is empty) are counted in this numbering but are not data rows and are
not listed; a quoted cell spanning several lines is one row; lines skipped with
`[input] skip_rows` (and blank lines above the header) are not counted. In a spreadsheet the
row number is therefore `source_row + 1 + skip_rows`.

### Reason codes (the row is left out of every measure)

A row gets the first code that applies, in this order; the detail lists every problem found.

| reason | meaning |
|---|---|
{reasons}

Exact copies are compared value by value after reading (`30` and `30.0` are the same).
A firm-year that appears in rows which differ is left out entirely: levgap cannot tell
which copy is right.

Rows left out of one measure only (for example no market equity, so no `market` target) are
listed in `exclusions.csv` with that measure in the `measure` column.

### Flags (the row is kept)

Flags appear, `;`-joined, in the `flags` column of the outputs.

| flag | meaning |
|---|---|
{flags}

Optional numbers that are not numbers, or below their allowed minimum, are treated as blank,
the row is flagged `invalid_<column>`, and a warning names the rows.

## Reference files (optional)

- `industry_names` (`[input] industry_names`, or `levgap analyze --industry-names`): a CSV
  with a header `code,name`; each industry code or label and its readable name. Without it,
  four-digit numeric codes take the SEC's SIC titles shipped with levgap (two-digit codes
  their major group's), unless `[input] sic_titles = false`.
- `peers` (`[input] peers`, or `levgap analyze --peers`): a CSV with a header
  `firm_id,peer_id`, one row per pair. A listed firm's peer median and driver profile come
  from its listed peers present in the same fiscal year (flag `peers_listed`); when none is,
  from its usual peers (flag `peer_list_unmatched`).
- a coverage list (`levgap screen --firms FILE`): one firm id a line; blank lines and lines
  starting with `#` are skipped.

Each is UTF-8 text; a blank cell, a firm listed as its own peer, or a code given two names
stops the run with one line naming the file, the row and the column.

## Glossary

The labels the command line, the report and the workbook show, with their units:

{glossary}
## Panels built by `levgap import-sec`

A panel written by `levgap import-sec` (the SEC's Financial Statement Data Sets) carries,
beside the columns above, `industry_name` (the SEC's title of the SIC code),
`market_equity_source` and `import_flags`, which levgap's analysis ignores. Its conventions:

- `book_equity` excludes noncontrolling interests: StockholdersEquity; else PartnersCapital
  or MembersEquity; else the total including noncontrolling interests minus the
  noncontrolling-interest line.
- `total_debt` is the sum of the debt lines the filer presents on its balance sheet
  (subtotals not added; finance and capital leases presented there included), so
  `lease_liabilities` holds operating leases only and `leases_as_debt` adds just those.
- `fiscal_year` is the calendar year of the balance-sheet date, one less for dates in
  January to May; a 10-K also gives the previous year (its comparatives), and the latest
  filing's figure is used for a year reported twice unless `--as-first-filed`.
- `PANEL.sources.csv` names, for every number, the tag or formula (every line summed), the
  filing (`adsh`), the date of the fact, whether it is the filing's own year or a
  comparative, the statement that presented it and its flags.

### Import flags (`import_flags`, the row is kept)

| flag | meaning |
|---|---|
{sec_flags}

### Import reasons (`PANEL.excluded.csv`, the firm-year is not in the panel)

| reason | meaning |
|---|---|
{sec_reasons}

## Whole-file errors (exit code 2, one line naming the file)

- a required column is missing (the message lists the missing columns and the columns found);
- a `[columns]` entry names a header the file lacks, or a column matches several headers;
- several currencies, or a currency other than `[units] currency`, without an `fx_rate`
  column;
- the file cannot be read: not CSV/Parquet/XLSX, not a regular file (a device or a pipe), an
  unclosed quote in the header, a row with more or fewer fields than the header (the message
  names the row), bytes that are not text in the configured `[input] encoding`. Without a
  configured encoding, text that is not UTF-8 is read as Windows-1252/Latin-1 with a
  warning, and UTF-16 without a byte-order mark is refused (set `[input] encoding`).
"""


TEMPLATE_TOML = """\
# levgap run configuration (TOML). Every table and key is optional; the values shown are the
# defaults unless marked "example". Unknown tables or keys are an error naming the allowed ones.
# Use: levgap analyze panel.csv --config run.toml --out results/

[columns]
# schema column = "the header in your file". Headers that differ from the schema names only in
# case, spaces, "-" or "_" are matched without an entry here. Examples:
# firm_id = "Ticker"
# fiscal_year = "FY"
# industry = "SIC code"
# total_assets = "Total assets (EUR k)"
# total_debt = "Debt (m)"
# ppe_net = "Net PP&E"
# ebitda = "EBITDA"
# book_equity = "Shareholders' equity"
# market_equity = "Market cap"

[input]
# delimiter = ";"       # CSV field separator; default: detected from the header line
decimal = "."           # decimal mark of numbers ("," for many European exports)
# thousands = "."       # thousands separator, if numbers carry one (" " also takes no-break spaces)
# encoding = "latin-1"  # default: UTF-8 (BOM allowed), else Windows-1252/Latin-1 with a warning
# sheet = "Panel"       # XLSX only; default: the first sheet
skip_rows = 0           # lines above the header line (titles, notes)
# industry_names = "industry_names.csv"  # example; CSV "code,name": readable industry names
# peers = "peers.csv"   # example; CSV "firm_id,peer_id": a firm's own peers for the attribution
sic_titles = true       # name 4-digit (and 2-digit) numeric codes by the SEC's SIC titles;
                        # false for other code lists (NAICS, your own)

[units]
scale = 1.0             # every money column is multiplied by this (0.001: thousands -> millions)
# currency = "EUR"      # reference currency; rows in it need no fx_rate
# unit = "millions"     # the money unit after scale, for labels ("EUR millions")

[industries]
# label = { parent = "...", name = "..." } for industry labels (as the model's industry level
# shows them). parent: a small industry is pooled toward the industries naming the same parent
# and looks for peers among them; numeric codes without one use their leading digits. Example:
# "Motor homes" = { parent = "Vehicles", name = "Motor homes and campers" }
# "Caravans" = { parent = "Vehicles" }

[model]
measures = ["book", "market"]  # book = debt / assets; market = debt / (debt + market equity)
cluster = "firm"               # standard errors clustered by "firm", "firm-year" or "industry"
winsorize = [0.01, 0.99]       # drivers clipped at these quantiles within each fiscal year
min_industry_firms = 5         # smaller industries are pooled toward a parent group
industry_digits = 0            # industry effect: 0 code as given; n: its first n characters
peer_digits = 0                # peers (attribution): 0 code as given; n: first n characters
min_peers = 5                  # a peer median on fewer peers is flagged few_peers
drivers = ["tangibility", "profitability", "earnings_volatility", "size", "market_to_book"]
                               # also: "rd_intensity", "log_revenue", "dividend_payer",
                               # "industry_median_leverage" (needs effects = "year" or "none")
input_drivers = []             # numeric columns of your file used as drivers, as given
effects = "industry,year"      # "industry,year", "year", "none"; "firm,year": levgap estimate
estimator = "pooled"           # "pooled"; "fama-macbeth": levgap estimate
fm_errors = "newey-west"       # Fama-MacBeth standard error: "newey-west" or "plain"
# nw_lags = 2                  # Newey-West lags; default floor(4 (T/100)^(2/9)), at most T - 1
leases_as_debt = false         # add lease_liabilities to total_debt
folds = 5                      # grouped cross-fit folds (by firm)
seed = 0                       # seed of the fold assignment
coverage = 0.8                 # coverage of the band around each target
model = "fractional"           # "fractional" (logit, targets in [0, 1]) or "linear"
# year = 2023                  # report only this fiscal year (the model uses every year)
lag_drivers = false            # true: explain leverage with the previous fiscal year's drivers
pooling = "shrink"             # small industries: "shrink" toward the parent, or "parent" outright
band_prior_rows = 10           # firm-years at which an industry's own spread sets half its band
"""
"""Annotated example ``run.toml``; parses to the default configuration."""


def template_files() -> dict[str, str]:
    """File name -> text of the four template files.

    Returns
    -------
    dict of str to str
    """
    return {
        "panel_template.csv": template_csv(),
        "README.md": template_readme(),
        "run.toml": TEMPLATE_TOML,
        "deal.toml": deal_template(),
    }
