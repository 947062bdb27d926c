"""The Excel workbook of a levgap run: Summary, Targets, Drivers, Coefficients, Exclusions.

openpyxl (write-only mode) builds the workbook: the Summary sheet, the header row of each data
sheet, styles and number formats, frozen header rows, autofilters and column widths. The data
rows of the four table sheets are then streamed into the sheets' XML directly, because
openpyxl's pure-Python XML writer (without lxml) needs about 30 microseconds a cell, which
turns a 100,000 firm-year run into many minutes; the rows written here use openpyxl's own
style ids, and the tests read the file back with openpyxl.

No cell is ever a formula: text is neutralised as in every tabular output
(:func:`levgap.report.tables.neutralise`), data text is stored as inline strings (an XML
``<f>`` element is never written), and characters XML cannot hold are dropped.
"""

from __future__ import annotations

import functools
import io
import math
import re
import zipfile
from collections.abc import Iterable, Iterator, Mapping
from html import escape
from pathlib import Path, PurePosixPath
from typing import Any
from xml.etree import ElementTree as ET

import numpy as np
import pandas as pd

from levgap import glossary as g
from levgap.errors import warn_data

SHEETS: tuple[str, ...] = ("Summary", "Targets", "Drivers", "Coefficients", "Exclusions")
EXCEL_MAX_ROWS = 1_048_576
"""Rows of an Excel worksheet, header included (a limit of the file format)."""

PCT, PCT2, NUM2, NUM3, NUM4, MONEY, INT = (
    "0.0%", "0.00%", "0.00", "0.000", "0.0000", "#,##0.0", "0")
#: Number format of each column by sheet; ``None``: by row (a driver's own value).
FORMATS: dict[str, dict[str, str | None]] = {
    "Targets": {"fiscal_year": INT, "actual": PCT, "target": PCT, "gap": PCT, "gap_z": NUM2,
                "band_low": PCT, "band_high": PCT, "peer_median": PCT, "peer_count": INT,
                "peer_target": PCT, "debt_to_target": MONEY, "target_full": PCT,
                "gap_prev": PCT, "gap_change": PCT, "gap_mean_prior": PCT,
                "years_outside": INT},
    "Drivers": {"fiscal_year": INT, "firm_value": None, "raw_value": None, "peer_value": None,
                "contribution": PCT2},
    "Coefficients": {"estimate": NUM4, "std_error": NUM4, "t_stat": NUM2, "p_value": NUM3,
                     "ci_low": NUM4, "ci_high": NUM4},
    "Exclusions": {"source_row": INT, "fiscal_year": INT},
}
#: Drivers that are ratios to total assets (shown as percents); others are logs or multiples.
RATIO_DRIVERS = frozenset({"tangibility", "profitability", "earnings_volatility",
                           "rd_intensity"})
_SOURCES = {"Targets": "targets", "Drivers": "drivers", "Coefficients": "coefficients",
            "Exclusions": "exclusions"}
EXCEL_MAX_CHARS = 32_767
"""Characters an Excel cell holds (a limit of the file format); longer text is cut, with a
note in the cell and on the Summary sheet."""
_CUT_NOTE = " [cut by levgap: {n:,} characters; the CSV or Parquet output holds them all]"
_ILLEGAL_XML = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\ufffe\uffff]")
_NS = {"m": "http://schemas.openxmlformats.org/spreadsheetml/2006/main",
       "r": "http://schemas.openxmlformats.org/officeDocument/2006/relationships",
       "rel": "http://schemas.openxmlformats.org/package/2006/relationships"}
_CHUNK = 10_000


def write_workbook(
    tables: Mapping[str, pd.DataFrame], manifest: Mapping[str, Any], path: str | Path, *,
    inputs: Iterable[str | Path] = (),
) -> Path:
    """Write ``workbook.xlsx`` (or any ``path``) with the run's tables, atomically.

    Parameters
    ----------
    tables : Mapping of str to pandas.DataFrame
        ``targets``, ``drivers``, ``coefficients``, ``model_fit`` and ``exclusions``.
    manifest : Mapping
        The run manifest (``run.json``), summarised on the Summary sheet with the model fit.
    path : str or pathlib.Path
        Destination file; replaced only when levgap wrote it (``levgap.outputs.atomic_file``).
    inputs : iterable of path, default=()
        Files never replaced.

    Returns
    -------
    pathlib.Path
        The file written.

    Raises
    ------
    OutputError
        If a table is missing or the file cannot (or may not) be written.

    Warns
    -----
    DataWarning
        If a table has more rows than an Excel sheet holds (the sheet keeps the first rows),
        or a text longer than a cell holds (it is cut); the Summary says so, and the CSV or
        Parquet outputs hold everything.
    """
    from levgap.outputs import atomic_file

    with atomic_file(path, inputs=inputs) as tmp:
        build_workbook(tables, manifest, tmp)
    return Path(path)


def build_workbook(
    tables: Mapping[str, pd.DataFrame], manifest: Mapping[str, Any], path: str | Path
) -> None:
    """Write the workbook to ``path`` as it is (a run's stage; see :func:`write_workbook`)."""
    from openpyxl import Workbook

    from levgap.outputs import neutralise
    from levgap.report.html import _check_tables

    _check_tables(tables)
    wb = Workbook(write_only=True)
    truncated: dict[str, int] = {}
    data: dict[str, pd.DataFrame] = {}
    long_cells = 0
    for sheet, key in _SOURCES.items():
        frame = tables[key]
        if sheet == "Targets":
            frame = readable_targets(frame, manifest)
        if len(frame) > EXCEL_MAX_ROWS - 1:
            truncated[sheet] = len(frame)
            frame = frame.iloc[: EXCEL_MAX_ROWS - 1]
        data[sheet] = neutralise(frame)
        long_cells += _long_cells(data[sheet])
    _write_summary(wb.create_sheet("Summary"), tables, manifest, truncated, long_cells)
    plans: dict[str, _Plan] = {}
    for sheet, frame in data.items():
        plans[sheet] = _write_head(wb.create_sheet(sheet), frame, FORMATS.get(sheet, {}))
    buf = io.BytesIO()
    wb.save(buf)
    _splice(buf, Path(path), plans)
    for sheet, n in truncated.items():
        warn_data(
            f"{sheet} has {n:,} rows, more than an Excel sheet holds; workbook.xlsx keeps the "
            f"first {EXCEL_MAX_ROWS - 1:,}. The CSV or Parquet outputs hold every row.",
            stacklevel=2,
        )
    if long_cells:
        warn_data(
            f"{long_cells} text cell(s) are longer than the {EXCEL_MAX_CHARS:,} characters an "
            "Excel cell holds; workbook.xlsx cuts them with a note. The CSV or Parquet outputs "
            "hold the whole text.", stacklevel=2,
        )


def readable_targets(targets: pd.DataFrame, manifest: Mapping[str, Any]) -> pd.DataFrame:
    """The targets table with the words a reader needs beside the codes: ``industry_name``
    after ``industry`` and ``flag_notes`` (each flag in words, ``levgap.codes``) after
    ``flags``."""
    from levgap.codes import flag_words
    from levgap.matching import unneutralise

    names = dict(manifest.get("industry_names") or {})
    out = targets.copy(deep=False)
    codes, uniques = pd.factorize(out["industry"].astype(str))
    named = np.array([names.get(unneutralise(u), "") for u in uniques], dtype=object)
    out.insert(out.columns.get_loc("industry") + 1, "industry_name",
               named[codes] if len(uniques) else named)
    fcodes, funiques = pd.factorize(out["flags"].fillna("").astype(str))
    notes = np.array(["; ".join(f"{c}: {w}" for c, w in flag_words(u)) for u in funiques],
                     dtype=object)
    out.insert(out.columns.get_loc("flags") + 1, "flag_notes",
               notes[fcodes] if len(funiques) else notes)
    return out


def _long_cells(frame: pd.DataFrame) -> int:
    n = 0
    for col in frame.columns:
        s = frame[col]
        if s.dtype == object or isinstance(s.dtype, pd.StringDtype):
            text = s.astype("str")
            n += sum(_u16(v) > EXCEL_MAX_CHARS
                     for v in text[text.str.len() > EXCEL_MAX_CHARS // 2])
    return n


def _u16(text: str) -> int:
    """Length as Excel counts it (UTF-16 code units)."""
    return len(text.encode("utf-16-le")) // 2


def _fit(text: str) -> str:
    """Text cut to what an Excel cell holds, with a note saying so."""
    if len(text) <= EXCEL_MAX_CHARS // 2 or _u16(text) <= EXCEL_MAX_CHARS:
        return text
    note = _CUT_NOTE.format(n=len(text))
    keep = EXCEL_MAX_CHARS - len(note)
    cut = text[:keep]
    while (excess := _u16(cut) - keep) > 0:
        cut = cut[:-excess]
    return cut + note


# ----------------------------------------------------------------------------- values

def _py(v: Any) -> Any:
    """A plain Python value: no NaN or infinities, no pandas NA, no numpy scalars."""
    if v is None or v is pd.NA or v is pd.NaT:
        return None
    if isinstance(v, float):
        return v if math.isfinite(v) else None
    if hasattr(v, "item") and not isinstance(v, str):
        return _py(v.item())
    return v


def _clean_text(v: str) -> str:
    return _fit(_ILLEGAL_XML.sub("", v))


@functools.lru_cache(maxsize=65536)
def _inline(text: str) -> str:
    t = escape(_clean_text(text), quote=False)
    space = ' xml:space="preserve"' if t != t.strip() else ""
    return f'<is><t{space}>{t}</t></is>'


# ----------------------------------------------------------------------------- sheets

class _Plan:
    """What the splice step needs for one data sheet: its rows and their style ids."""

    def __init__(self, frame: pd.DataFrame, style: list[int | dict[bool, int] | None]) -> None:
        from openpyxl.utils import get_column_letter

        self.frame = frame
        self.style = style
        self.ref = f"A1:{get_column_letter(max(frame.shape[1], 1))}{len(frame) + 1}"


def _style_id(ws: Any, fmt: str) -> int:
    from openpyxl.cell import WriteOnlyCell

    cell = WriteOnlyCell(ws)
    cell.number_format = fmt
    return int(cell.style_id)  # registers the format in the workbook's styles


def _width(name: str, values: list[Any], fmt: str | None) -> float:
    sample = [v for v in values if v is not None]
    if fmt in (PCT, PCT2, None) and not any(isinstance(v, str) for v in sample):
        longest = 8
    elif sample and all(isinstance(v, int | float) and not isinstance(v, bool) for v in sample):
        longest = min(max(len(f"{v:,.4f}" if isinstance(v, float) else str(v))
                          for v in sample), 14)
    else:
        longest = max((len(str(v)) for v in sample), default=0)
    return float(min(max(len(name) + 3, longest + 2, 8), 48))


def _header_cells(ws: Any, names: list[str]) -> list[Any]:
    from openpyxl.cell import WriteOnlyCell
    from openpyxl.styles import Font, PatternFill

    bold, fill = Font(bold=True), PatternFill("solid", fgColor="E8ECF2")
    cells = []
    for name in names:
        cell = WriteOnlyCell(ws, value=_clean_text(str(name)))
        cell.data_type = "s"
        cell.font, cell.fill = bold, fill
        cells.append(cell)
    return cells


def _write_head(ws: Any, frame: pd.DataFrame, formats: Mapping[str, str | None]) -> _Plan:
    from openpyxl.utils import get_column_letter

    names = [str(c) for c in frame.columns]
    head = frame.head(300)
    style: list[int | dict[bool, int] | None] = []
    for j, name in enumerate(names, 1):
        values = [_py(v) for v in head[frame.columns[j - 1]].astype(object).tolist()]
        fmt = formats.get(name, "")
        ws.column_dimensions[get_column_letter(j)].width = _width(name, values, fmt)
        if fmt is None:  # a driver's own value: percent for ratios, else three decimals
            style.append({True: _style_id(ws, PCT), False: _style_id(ws, NUM3)})
        else:
            style.append(_style_id(ws, fmt) if fmt else None)
    ws.freeze_panes = "A2"
    ws.append(_header_cells(ws, names))
    ws.auto_filter.ref = f"A1:{get_column_letter(max(len(names), 1))}{len(frame) + 1}"
    return _Plan(frame, style)


def _row_xml(frame: pd.DataFrame, style: list[int | dict[bool, int] | None]) -> Iterator[str]:
    """The ``<row>`` elements of a sheet's data, from row 2, in chunks of ``_CHUNK`` rows.

    Cells are formatted column by column (text through its distinct values only), then
    joined row by row; about half a microsecond a cell.
    """
    from openpyxl.utils import get_column_letter

    letters = [get_column_letter(j + 1) for j in range(frame.shape[1])]
    for a in range(0, len(frame), _CHUNK):
        part = frame.iloc[a:a + _CHUNK]
        rows = range(a + 2, a + 2 + len(part))
        ratio = (part["driver"].astype(str).isin(RATIO_DRIVERS).tolist()
                 if "driver" in part.columns else None)
        cols = [_column_cells(part.iloc[:, j], letters[j], rows, style[j], ratio)
                for j in range(part.shape[1])]
        yield "".join(f'<row r="{r}">{"".join(cells)}</row>'
                      for r, cells in zip(rows, zip(*cols, strict=True), strict=True))


def _column_cells(col: pd.Series, letter: str, rows: range,
                  sid: int | dict[bool, int] | None, ratio: list[bool] | None) -> list[str]:
    dtype = col.dtype
    if pd.api.types.is_bool_dtype(dtype):
        return [f'<c r="{letter}{r}" t="b"><v>{int(v)}</v></c>' if isinstance(v, bool | int)
                else "" for r, v in zip(rows, col.astype(object).tolist(), strict=True)]
    if pd.api.types.is_numeric_dtype(dtype):
        if pd.api.types.is_integer_dtype(dtype) and not col.isna().any():
            values: list[Any] = col.to_numpy(dtype="int64").tolist()
        else:
            values = col.to_numpy(dtype=float, na_value=math.nan).tolist()
            values = [v if math.isfinite(v) else None for v in values]
        if isinstance(sid, dict):
            attrs = [f' s="{sid[bool(x)]}"' for x in (ratio or [False] * len(values))]
            return [f'<c r="{letter}{r}"{s}><v>{v!r}</v></c>' if v is not None else ""
                    for r, v, s in zip(rows, values, attrs, strict=True)]
        attr = f' s="{sid}"' if sid else ""
        return [f'<c r="{letter}{r}"{attr}><v>{v!r}</v></c>' if v is not None else ""
                for r, v in zip(rows, values, strict=True)]
    codes, uniques = pd.factorize(col, use_na_sentinel=True)
    inline = [_inline(str(u)) if str(u) != "" else "" for u in uniques]
    return [f'<c r="{letter}{r}" t="inlineStr">{inline[c]}</c>' if c >= 0 and inline[c] else ""
            for r, c in zip(rows, codes.tolist(), strict=True)]


def _sheet_paths(archive: zipfile.ZipFile) -> dict[str, str]:
    book = ET.fromstring(archive.read("xl/workbook.xml"))
    rels = ET.fromstring(archive.read("xl/_rels/workbook.xml.rels"))
    target = {r.get("Id"): r.get("Target") for r in rels.findall("rel:Relationship", _NS)}
    paths = {}
    for sheet in book.findall("m:sheets/m:sheet", _NS):
        t = str(target[sheet.get(f"{{{_NS['r']}}}id")])
        paths[str(sheet.get("name"))] = (t.lstrip("/") if t.startswith("/")
                                         else str(PurePosixPath("xl") / t))
    return paths


def _splice(source: io.BytesIO, dest: Path, plans: Mapping[str, _Plan]) -> None:
    """Copy the openpyxl package to ``dest``, adding the data rows to each planned sheet."""
    source.seek(0)
    with zipfile.ZipFile(source) as src, zipfile.ZipFile(
        dest, "w", compression=zipfile.ZIP_DEFLATED, compresslevel=3
    ) as out:
        by_path = {p: name for name, p in _sheet_paths(src).items() if name in plans}
        for info in src.infolist():
            body = src.read(info.filename)
            sheet = by_path.get(info.filename)
            if sheet is None:
                out.writestr(info, body)
                continue
            text = body.decode("utf-8")
            # openpyxl's write-only sheets carry no <dimension>; readers that trust it (its own
            # read-only mode among them) need it, and it comes right before <sheetViews>.
            text = text.replace("<sheetViews>", f'<dimension ref="{plans[sheet].ref}" />'
                                "<sheetViews>", 1)
            cut = text.index("</sheetData>")
            entry = zipfile.ZipInfo(info.filename, date_time=info.date_time)
            entry.compress_type = zipfile.ZIP_DEFLATED
            # Fast deflate: the sheet XML is repetitive, level 3 keeps most of the gain.
            level = "compress_level" if hasattr(entry, "compress_level") else "_compresslevel"
            setattr(entry, level, 3)
            with out.open(entry, "w", force_zip64=True) as fh:
                fh.write(text[:cut].encode("utf-8"))
                for chunk in _row_xml(plans[sheet].frame, plans[sheet].style):
                    fh.write(chunk.encode("utf-8"))
                fh.write(text[cut:].encode("utf-8"))


# ----------------------------------------------------------------------------- summary

def _describe(item: Any) -> str:
    if isinstance(item, Mapping):
        return ", ".join(f"{k} {v}" for k, v in item.items())
    return str(item)


def _write_summary(
    ws: Any, tables: Mapping[str, pd.DataFrame], manifest: Mapping[str, Any],
    truncated: Mapping[str, int], long_cells: int = 0,
) -> None:
    from openpyxl.cell import WriteOnlyCell
    from openpyxl.styles import Font

    from levgap.outputs import neutralise
    from levgap.report.html import CAUTION

    counts = manifest.get("counts", {}) or {}
    model = (manifest.get("options", {}) or {}).get("model", {}) or {}
    targets = tables["targets"]
    years = sorted({int(y) for y in targets["fiscal_year"].dropna().unique()})
    pairs: list[tuple[str, Any]] = [("levgap version", manifest.get("levgap_version", ""))]
    if manifest.get("run_id"):
        pairs.append(("run id", manifest.get("run_id")))
    for inp in manifest.get("inputs", []) or []:
        pairs += [("input file", inp.get("path")), ("input rows", inp.get("rows")),
                  ("input sha256", inp.get("sha256"))]
    pairs += [
        ("rows read", counts.get("rows_in")), ("rows used", counts.get("rows_used")),
        ("rows excluded", counts.get("rows_excluded", len(tables["exclusions"]))),
        ("firms", counts.get("firms", targets["firm_id"].nunique())),
        ("industries", counts.get("industries", targets["industry"].nunique())),
        ("fiscal years", f"{years[0]}-{years[-1]} ({len(years)})" if years else "none"),
        ("model", model.get("model", "linear")),
        ("measures", ", ".join(map(str, model.get("measures", [])))),
        ("standard errors clustered by", g.CLUSTERS.get(str(model.get("cluster")),
                                                        model.get("cluster"))),
        ("band coverage", model.get("coverage")),
        ("money", g.money_note((manifest.get("options", {}) or {}).get("units"))),
    ]
    for reason, n in sorted((counts.get("by_reason") or {}).items()):
        pairs.append((f"{g.label('excluded')}: {reason}", n))
    for b in manifest.get("pooled_industries", []) or []:
        pairs.append(("pooled industry effect", _describe(b)))
    for w in manifest.get("warnings", []) or []:
        pairs.append(("warning", str(w)))
    for sheet, n in truncated.items():
        pairs.append(("truncated", f"{sheet}: first {EXCEL_MAX_ROWS - 1:,} of {n:,} rows; "
                                   "the CSV or Parquet output holds them all"))
    if long_cells:
        pairs.append(("cut cells", f"{long_cells} text cell(s) longer than "
                                   f"{EXCEL_MAX_CHARS:,} characters are cut, with a note; "
                                   "the CSV or Parquet output holds the whole text"))
    pairs.append(("caution", CAUTION))
    info = neutralise(pd.DataFrame(
        {"item": [p[0] for p in pairs], "value": [_py(p[1]) for p in pairs]}, dtype=object))

    ws.column_dimensions["A"].width = 30
    ws.column_dimensions["B"].width = 72
    for col in "CDEFGH":
        ws.column_dimensions[col].width = 12
    ws.freeze_panes = "A2"
    bold = Font(bold=True)

    def text(value: str, font: Any = None) -> Any:
        cell = WriteOnlyCell(ws, value=_clean_text(value))
        cell.data_type = "s"  # a string cell, never a formula
        if font is not None:
            cell.font = font
        return cell

    def number(value: Any, fmt: str | None = None) -> Any:
        cell = WriteOnlyCell(ws, value=value)
        if fmt:
            cell.number_format = fmt
        return cell

    ws.append([text("levgap run summary", Font(bold=True, size=13))])
    for item, value in zip(info["item"], info["value"], strict=True):
        if isinstance(value, str):
            cell = text(value)
        elif value is None:
            cell = None
        else:
            cell = number(value, PCT if item == "band coverage" else None)
        ws.append([text(str(item), bold), cell])
    ws.append([])
    fit = neutralise(tables["model_fit"])
    ws.append(_header_cells(ws, [str(c) for c in fit.columns]))
    fmts = {"r2": NUM3, "r2_oos": NUM3, "rmse_oos": PCT}
    for row in fit.itertuples(index=False):
        cells = []
        for name, v in zip(fit.columns, row, strict=True):
            v = _py(v)
            cells.append(text(v) if isinstance(v, str) else
                         None if v is None else number(v, fmts.get(str(name))))
        ws.append(cells)
    ws.append([])
    ws.append([text("Glossary (the columns of the sheets)", Font(bold=True, size=12))])
    ws.append(_header_cells(ws, ["column", "label", "unit", "meaning"]))
    for key, term in g.TERMS.items():
        if term.meaning:
            ws.append([text(key), text(term.label), text(term.unit), text(term.meaning)])
