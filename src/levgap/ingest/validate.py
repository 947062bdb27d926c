"""Validation of a panel's cells against schema v1: the row rules and the exclusion ledger.

Every input row ends in exactly one place: ``Panel.data`` (kept, perhaps with flags) or
``Panel.exclusions`` (left out of every measure, ``measure`` empty, with one reason code and
a detail naming the columns and values). All checks are vectorised; Python loops run only to
word the details of excluded rows.

A whole file is refused (:class:`~levgap.errors.SchemaError`) when a required column is
missing, a header is repeated or ambiguous, or money in several currencies (or in one other than
the reference currency) comes without an ``fx_rate`` column.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Iterable, Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from levgap.codes import FLAGS, MONEY_LIMIT, YEAR_RANGE
from levgap.config import RunConfig
from levgap.currencies import CURRENCIES
from levgap.errors import SchemaError, warn_data
from levgap.ingest.cells import CODE_COLUMNS, parse_numbers, text_cells
from levgap.ingest.columns import (
    Column,
    arrow_ints,
    arrow_strings,
    cell,
    empty_text,
    is_empty_text,
    is_number,
    take,
    text_scalar,
    to_numpy_bool,
)
from levgap.ingest.copies import duplicates
from levgap.panel import Panel
from levgap.schema import BY_NAME, COLUMNS, MONEY, NUMERIC, REQUIRED

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["parse_numbers", "resolve_columns", "validate_columns", "validate_panel"]

_TEXT = tuple(c.name for c in COLUMNS if c.kind == "text")
_EXCLUDE_ON_BAD = frozenset(REQUIRED) | {"fx_rate"}

Texts = dict[str, pa.Array | pa.ChunkedArray]
Raw = dict[str, Column]
Arrays = dict[str, np.ndarray]
Describe = Callable[[np.ndarray], list[str]]


def validate_panel(
    frame: pd.DataFrame,
    *,
    source: str = "<memory>",
    config: RunConfig | None = None,
    n_input_rows: int | None = None,
    sha256: str | None = None,
    source_rows: Iterable[int] | None = None,
    notes: Iterable[str] = (),
) -> Panel:
    """Check a frame of panel cells against schema v1 and build the exclusion ledger.

    Parameters
    ----------
    frame : pandas.DataFrame
        One row per firm-year; columns under schema names or the user's headers (mapped by
        ``config.columns``; schema names also match regardless of case, spaces and ``-``/``_``).
        Cells may be numbers or text (text numbers follow ``config.input.decimal`` and
        ``thousands``).
    source : str, default="<memory>"
        Name of the input, used in messages.
    config : RunConfig, optional
        Column map, number format and units; defaults to ``RunConfig()``.
    n_input_rows : int, optional
        Data rows of the input; defaults to ``len(frame)``.
    sha256 : str, optional
        Digest of the input file, for the record.
    source_rows : iterable of int, optional
        1-based data row of each frame row; defaults to the frame's own integer
        ``source_row`` column (a frame taken from ``Panel.data``), else ``1..len(frame)``.
    notes : iterable of str, default=()
        Notes from the reader, carried into ``Panel.warnings``.

    Returns
    -------
    Panel
        ``data`` holds every schema column (absent optional numbers are NaN, absent optional
        text is ``""``), money multiplied by ``config.units.scale`` and by ``fx_rate``, plus
        ``source_row`` and ``flags``; ``exclusions`` holds one line per excluded row.

    Raises
    ------
    SchemaError
        A required column is missing, a header is repeated or ambiguous, or several currencies
        (or one other than ``config.units.currency``) appear without an ``fx_rate`` column.

    Warns
    -----
    DataWarning
        Optional values that are not numbers or below their minimum were set missing.
    """
    from levgap.ingest.columns import frame_columns

    return validate_columns(
        [str(c) for c in frame.columns], frame_columns(frame), len(frame), source=source,
        config=config, n_input_rows=n_input_rows, sha256=sha256, source_rows=source_rows,
        notes=notes)


def validate_columns(
    headers: Sequence[str],
    columns: Sequence[Column],
    n: int,
    *,
    source: str = "<memory>",
    config: RunConfig | None = None,
    n_input_rows: int | None = None,
    sha256: str | None = None,
    source_rows: Iterable[int] | None = None,
    notes: Iterable[str] = (),
) -> Panel:
    """:func:`validate_panel` on columns of cells (``levgap.ingest.columns``), pandas-free.

    ``headers[j]`` names ``columns[j]``, of ``n`` rows each; the other parameters, the
    result and the errors are ``validate_panel``'s. ``read_panel`` calls this with a reader's
    columns.
    """
    config = config or RunConfig()
    opts = config.input
    headers = [str(h) for h in headers]
    dupes = sorted({h for h in headers if headers.count(h) > 1})
    if dupes:
        raise SchemaError(
            f"{source}: column headers must be unique; got {_listing(dupes)} more than once. "
            "Rename or drop the copies."
        )
    by_header = dict(zip(headers, columns, strict=True))
    if source_rows is None and "source_row" in by_header:
        # a frame that came out of a Panel keeps its row numbers
        given = by_header["source_row"]
        if (is_number(given) and given.dtype.kind in "iu"
                and len(np.unique(given)) == len(given)):
            source_rows = given.astype(np.int64)
    rows = (
        np.arange(1, n + 1, dtype=np.int64)
        if source_rows is None
        else np.asarray(
            source_rows if hasattr(source_rows, "__len__") else list(source_rows), dtype=np.int64
        )
    )
    if len(rows) != n:
        raise SchemaError(
            f"{source}: source_rows must give one row number per frame row; got {len(rows)} "
            f"for {n} rows."
        )
    notes = list(notes)
    names = resolve_columns(headers, config.columns, source)
    derived = {"source_row", "flags"}
    extra_heads = input_driver_headers(headers, names, config.model.input_drivers, source)
    ignored = [h for h in headers if h not in set(names.values()) and h not in derived
               and h not in extra_heads.values()]
    if ignored:
        notes.append(f"columns not in schema v1 were ignored: {_listing(ignored)}")

    text: Texts = {}
    raw: Raw = {}
    for col in _TEXT:
        if col in names:
            text[col] = text_cells(by_header[names[col]], code=col in CODE_COLUMNS)
            raw[col] = by_header[names[col]]
        else:
            text[col] = empty_text(n)
    values: dict[str, np.ndarray] = {}
    blank: dict[str, np.ndarray] = {}
    bad: dict[str, np.ndarray] = {}
    for col in NUMERIC:
        if col in names:
            values[col], blank[col], bad[col] = parse_numbers(by_header[names[col]], opts)
            raw[col] = by_header[names[col]]
        else:
            values[col] = np.full(n, np.nan)
            blank[col] = np.ones(n, dtype=bool)
            bad[col] = np.zeros(n, dtype=bool)

    upper = pc.utf8_upper(text["currency"])
    currencies = sorted(c for c in pc.unique(upper).to_pylist() if c in CURRENCIES)
    reference = (config.units.currency or "").strip().upper()
    foreign = [c for c in currencies if reference and c != reference]
    needs_fx = len(currencies) > 1 or bool(foreign)
    if needs_fx and "fx_rate" not in names:
        why = (f"currencies {_listing(currencies, 8)} appear" if len(currencies) > 1 else
               f"rows are in {currencies[0]} and [units] currency is {reference}")
        raise SchemaError(
            f"{source}: an fx_rate column must be given when {why}; got no fx_rate column. "
            "Add fx_rate (money times fx_rate = reference currency) or split the file by "
            "currency."
        )

    checks = _row_checks(text, values, blank, bad, raw, reference, needs_fx,
                         config.units.scale)
    reason = np.full(n, "", dtype=object)
    details: dict[int, list[str]] = {}
    for code, mask, describe in checks:
        hit = np.flatnonzero(mask)
        if not len(hit):
            continue
        fresh = hit[reason[hit] == ""]
        reason[fresh] = code
        for i, msg in zip(hit, describe(hit), strict=True):
            details.setdefault(int(i), []).append(msg)

    dup_code, dup_detail = duplicates(text, values, bad, rows)
    for i in np.flatnonzero(dup_code != ""):
        if reason[i] == "":
            reason[i] = dup_code[i]
            details.setdefault(int(i), []).append(dup_detail[i])

    excluded = reason != ""
    values, flags, opt_notes = _optional_values(values, bad, names, rows, excluded)
    notes.extend(opt_notes)
    for msg in opt_notes:
        warn_data(f"{source}: {msg}", stacklevel=3)

    data = _kept(text, values, flags, rows, ~excluded, config.units.scale)
    if extra_heads:
        _input_drivers(data, by_header, extra_heads, opts, rows, ~excluded, notes, source)
    ledger = _ledger(np.flatnonzero(excluded), rows, text, values, bad, reason, details)
    return Panel(
        columns=data,
        excluded=ledger,
        source=str(source),
        sha256=sha256,
        n_input_rows=n if n_input_rows is None else int(n_input_rows),
        warnings=tuple(notes),
    )


# ---------------------------------------------------------------------------------------------
# columns


def _norm(name: str) -> str:
    return re.sub(r"[\s_\-]+", "_", name.strip().lower()).strip("_")


def resolve_columns(
    headers: list[str], mapping: Mapping[str, str], source: str = "<memory>"
) -> dict[str, str]:
    """Find the header of each schema column present in a file.

    Parameters
    ----------
    headers : list of str
        Headers of the file.
    mapping : mapping of str to str
        Schema column -> the user's header (``[columns]`` of ``run.toml``). A mapped header
        is matched exactly, else regardless of case and surrounding spaces.
    source : str, default="<memory>"
        Name of the input, for messages.

    Returns
    -------
    dict of str to str
        Schema column -> header, for the schema columns found.

    Raises
    ------
    SchemaError
        A mapped header is absent, a schema column matches several headers, or a required
        column is missing (the message names the missing columns and the columns found).
    """
    found: dict[str, str] = {}
    by_norm: dict[str, list[str]] = {}
    for h in headers:
        by_norm.setdefault(_norm(h), []).append(h)
    by_header: dict[str, list[str]] = {}
    for col, want in mapping.items():
        by_header.setdefault(str(want).strip().lower(), []).append(col)
    for cols in by_header.values():
        if len(cols) > 1:
            raise SchemaError(
                f"{source}: [columns] {' and '.join(cols)} must name different headers; got "
                f"both = {mapping[cols[0]]!r}. Map each schema column to its own header."
            )
    for col in BY_NAME:
        if col in mapping:
            want = mapping[col]
            if want in headers:
                found[col] = want
                continue
            loose = [h for h in headers if h.strip().lower() == want.strip().lower()]
            if len(loose) == 1:
                found[col] = loose[0]
                continue
            raise SchemaError(
                f"{source}: [columns] {col} = {want!r} must name a header of the file; got "
                f"{'several close matches' if loose else 'no such header'}. Headers found: "
                f"{_listing(headers)}."
            )
        if col in headers and col not in mapping.values():
            found[col] = col
            continue
        cands = [h for h in by_norm.get(_norm(col), []) if h not in mapping.values()]
        if len(cands) == 1:
            found[col] = cands[0]
        elif len(cands) > 1:
            raise SchemaError(
                f"{source}: column {col} must match one header; got {len(cands)}: "
                f"{_listing(cands)}. Rename one or map it in [columns]."
            )
    missing = [c for c in REQUIRED if c not in found]
    taken = {v: k for k, v in found.items() if k in mapping}
    for col in missing:
        own = [h for h in by_norm.get(_norm(col), []) if h in taken]
        if own:
            raise SchemaError(
                f"{source}: required column {col} matches the header {own[0]!r}, but [columns] "
                f"{taken[own[0]]} = {own[0]!r} takes that header; map {col} to another header "
                f"in [columns] or correct the {taken[own[0]]} entry."
            )
    if missing:
        raise SchemaError(
            f"{source}: required columns must be present; missing {', '.join(missing)}; "
            f"columns found: {_listing(headers) or '(none)'}. Add them or map your headers "
            "in [columns] of run.toml (see `levgap template`)."
        )
    return found


def input_driver_headers(headers: list[str], names: Mapping[str, str],
                         wanted: Iterable[str], source: str) -> dict[str, str]:
    """The header of each ``[model] input_drivers`` column that is not a schema column.

    Matched exactly, else regardless of case, spaces, ``-`` and ``_``; a schema column must be
    in the file. Raises SchemaError naming the column otherwise."""
    out: dict[str, str] = {}
    used = set(names.values())
    for name in wanted:
        if name in BY_NAME:
            if name not in names:
                raise SchemaError(
                    f"{source}: [model] input_drivers names {name}, which must be a column of "
                    f"the file; got none. Add it, or drop it from input_drivers.")
            if BY_NAME[name].kind == "text":
                raise SchemaError(f"{source}: [model] input_drivers must name numeric columns; "
                                  f"got the text column {name}.")
            continue
        if name in headers:
            out[name] = name
            continue
        cands = [h for h in headers if _norm(h) == _norm(name) and h not in used]
        if len(cands) != 1:
            raise SchemaError(
                f"{source}: [model] input_drivers names {name!r}, which must match one header "
                f"of the file; got {'several: ' + _listing(cands) if cands else 'none'}. "
                f"Headers found: {_listing(headers)}.")
        out[name] = cands[0]
    return out


def _input_drivers(data: dict[str, Any], columns: Mapping[str, Column],
                   heads: Mapping[str, str], opts: object, rows: np.ndarray, keep: np.ndarray,
                   notes: list[str], source: str) -> None:
    """Add the input-driver columns (as given) to the kept rows' columns; cells that are not
    numbers become missing, flagged ``invalid_input_driver`` (with a note)."""
    idx = np.flatnonzero(keep)
    for name, head in heads.items():
        values, _, bad = parse_numbers(columns[head], opts)  # type: ignore[arg-type]
        values = np.where(bad | ~np.isfinite(values), np.nan, values)[idx]
        hit = bad[idx]
        data[name] = values
        if hit.any():
            flags = np.array(data["flags"].to_pylist(), dtype=object)
            flags[hit] = np.where(flags[hit] == "", "invalid_input_driver",
                                  flags[hit] + ";invalid_input_driver")
            data["flags"] = arrow_strings(flags.tolist())
            shown = ", ".join(str(r) for r in rows[idx][hit][:10])
            msg = (f"input driver {name} must be a number; {int(hit.sum())} kept row(s) were "
                   f"not and are treated as missing (rows {shown}); flagged "
                   "invalid_input_driver")
            notes.append(msg)
            warn_data(f"{source}: {msg}", stacklevel=4)


def _listing(items: Iterable[str], limit: int = 40) -> str:
    items = [i if len(i) <= 40 else i[:37] + "..." for i in items]
    shown = ", ".join(
        repr(i) if (not i or i != i.strip() or "," in i or not i.isprintable()) else i
        for i in items[:limit]
    )
    return shown + (f", ... ({len(items) - limit} more)" if len(items) > limit else "")


def _show(raw: Column, i: int) -> str:
    return _shown(str(cell(raw, i)))


def _shown(s: str) -> str:
    s = s.replace("\x00", "\\0")
    return repr(s if len(s) <= 40 else s[:37] + "...")




# ---------------------------------------------------------------------------------------------
# row rules


def _row_checks(
    text: Texts,
    values: Arrays,
    blank: Arrays,
    bad: Arrays,
    raw: Raw,
    reference: str,
    needs_fx: bool,
    scale: float,
) -> list[tuple[str, np.ndarray, Describe]]:
    """(code, mask, describe) in the order of ``REASONS``; describe words each hit."""
    v = values
    n = len(v["total_assets"])

    def non_numeric(hit: np.ndarray) -> list[str]:
        out: dict[int, list[str]] = {int(i): [] for i in hit}
        for col in _numeric_checked():
            for i in np.flatnonzero(bad[col][hit]):
                out[int(hit[i])].append(
                    f"{col} must be a number; got {_show(raw[col], int(hit[i]))}"
                )
        return ["; ".join(out[int(i)]) for i in hit]

    miss_cols = list(REQUIRED)
    currency = pc.utf8_upper(text["currency"])
    no_currency = is_empty_text(currency)
    # With several currencies (or one other than the reference), a row's money reaches the
    # reference currency only through its fx_rate: a blank currency is not assumed to be the
    # reference one.
    fx_needed = (
        no_currency | to_numpy_bool(pc.not_equal(currency, text_scalar(reference)))
        if needs_fx else np.zeros(n, dtype=bool)
    )
    empty = {c: is_empty_text(text[c]) if c in text else blank[c] for c in miss_cols}

    def missing_mask() -> np.ndarray:
        m = np.zeros(n, dtype=bool)
        for c in miss_cols:
            m |= empty[c]
        return m | (fx_needed & blank["fx_rate"])

    def missing(hit: np.ndarray) -> list[str]:
        out = []
        for i in hit:
            cols = [f"{c}{_token(raw, c, int(i))}" for c in miss_cols if empty[c][i]]
            if fx_needed[i] and blank["fx_rate"][i]:
                why = ("currency is blank" if no_currency[i] else
                       f"currency is {cell(currency, int(i))}")
                cols.append(f"fx_rate{_token(raw, 'fx_rate', int(i))} ({why} in a file with "
                            "several currencies)")
            out.append(f"{', '.join(cols)} must have a value; got a blank")
        return out

    unknown = ~no_currency & ~to_numpy_bool(
        pc.is_in(currency, value_set=arrow_strings(sorted(CURRENCIES))))

    def unknown_currency(hit: np.ndarray) -> list[str]:
        return [f"currency must be an ISO 4217 code such as EUR; got "
                f"{_show(text['currency'], int(i))}" for i in hit]

    fx = np.where(np.isnan(v["fx_rate"]), 1.0, v["fx_rate"])
    with np.errstate(over="ignore", invalid="ignore"):
        factor = scale * fx
        scaled = {c: v[c] * factor for c in MONEY}
        scaled["market_equity (shares_outstanding * share_price)"] = (
            v["shares_outstanding"] * scaled["share_price"])
        too_big = {c: ~np.isnan(x) & ~(np.abs(x) <= MONEY_LIMIT) for c, x in scaled.items()}
    overflow = _any(too_big.values())

    def money_overflow(hit: np.ndarray) -> list[str]:
        return ["; ".join(f"{c} is {_num(scaled[c][i])} after [units] scale {_num(scale)} and "
                          f"fx_rate {_num(fx[i])}, beyond +/-{MONEY_LIMIT:g}"
                          for c in too_big if too_big[c][i]) for i in hit]

    year = v["fiscal_year"]
    lo, hi = YEAR_RANGE
    with np.errstate(invalid="ignore"):
        bad_year = ~np.isnan(year) & ((year != np.round(year)) | (year < lo) | (year > hi))

    def simple(template: str, *cols: str) -> Describe:
        def describe(hit: np.ndarray) -> list[str]:
            return [template.format(*(_num(v[c][i]) for c in cols)) for i in hit]
        return describe

    with np.errstate(invalid="ignore"):
        pos = v["total_assets"] > 0
        return [
            ("non_numeric", _any(bad[c] for c in _numeric_checked()), non_numeric),
            ("missing_value", missing_mask(), missing),
            ("bad_fiscal_year", bad_year,
             simple(f"fiscal_year must be a whole number in {lo}..{hi}; got {{}}",
                    "fiscal_year")),
            ("bad_fx_rate", v["fx_rate"] <= 0,
             simple("fx_rate must be > 0; got {}", "fx_rate")),
            ("unknown_currency", unknown, unknown_currency),
            ("money_overflow", overflow, money_overflow),
            ("assets_not_positive", v["total_assets"] <= 0,
             simple("total_assets must be > 0; got {}", "total_assets")),
            ("negative_debt", v["total_debt"] < 0,
             simple("total_debt must be >= 0; got {}", "total_debt")),
            ("negative_ppe", v["ppe_net"] < 0,
             simple("ppe_net must be >= 0; got {}", "ppe_net")),
            ("debt_above_assets", pos & (v["total_debt"] > v["total_assets"]),
             simple("total_debt must be <= total_assets; got {} > {}",
                    "total_debt", "total_assets")),
            ("ppe_above_assets", pos & (v["ppe_net"] > v["total_assets"]),
             simple("ppe_net must be <= total_assets; got {} > {}", "ppe_net", "total_assets")),
            ("ebitda_above_assets", pos & (np.abs(v["ebitda"]) > v["total_assets"]),
             simple("|ebitda| must be <= total_assets; got |{}| > {}", "ebitda",
                    "total_assets")),
        ]


def _token(raw: Raw, col: str, i: int) -> str:
    """`` ('NA' counts as blank)`` when the cell held a blank token rather than nothing."""
    if col not in raw:
        return ""
    v = cell(raw[col], i)
    if v is None or (isinstance(v, float) and v != v):
        return ""
    t = str(v).replace("\x00", "").strip()
    return f" ({_shown(t)} counts as blank)" if t else ""


def _numeric_checked() -> list[str]:
    return [c for c in NUMERIC if c in _EXCLUDE_ON_BAD]


def _any(masks: Iterable[np.ndarray]) -> np.ndarray:
    out = None
    for m in masks:
        out = m.copy() if out is None else out | m
    return out if out is not None else np.zeros(0, dtype=bool)


def _num(x: float) -> str:
    if x != x:
        return "blank"
    return f"{int(x)}" if float(x).is_integer() and abs(x) < 1e15 else f"{x:.6g}"


def _optional_values(
    values: Arrays, bad: Arrays, names: Mapping[str, str], rows: np.ndarray, excluded: np.ndarray
) -> tuple[Arrays, list[tuple[str, np.ndarray]], list[str]]:
    """Values with invalid optional numbers set missing; flags per row; notes per column."""
    values = dict(values)
    flags: list[tuple[str, np.ndarray]] = []
    notes = []
    for col in (c.name for c in COLUMNS if not c.required and c.kind == "number"):
        if col == "fx_rate" or col not in names:
            continue
        spec = BY_NAME[col]
        invalid = bad[col].copy()
        if spec.minimum is not None:
            with np.errstate(invalid="ignore"):
                below = (values[col] <= spec.minimum) if spec.strict else (
                    values[col] < spec.minimum)
            invalid |= below
        if invalid.any():
            values[col] = np.where(invalid, np.nan, values[col])
            flags.append((f"invalid_{col}", invalid))
            kept = invalid & ~excluded
            if kept.any():
                shown = ", ".join(str(r) for r in rows[kept][:10])
                more = f" and {int(kept.sum()) - 10} more" if kept.sum() > 10 else ""
                notes.append(
                    f"{col} must be a number >= {_num(spec.minimum or 0.0)}; {int(kept.sum())} "
                    f"kept row(s) were not and are treated as missing (rows {shown}{more}); "
                    f"flagged invalid_{col}"
                )
    with np.errstate(invalid="ignore"):
        flags.insert(0, ("negative_book_equity", values["book_equity"] < 0))
    return values, flags, notes


def _kept(
    text: Texts,
    values: Arrays,
    flags: list[tuple[str, np.ndarray]],
    rows: np.ndarray,
    keep: np.ndarray,
    scale: float,
) -> dict[str, Any]:
    """The columns of the kept rows: scaled money, filled market equity, flags."""
    idx = np.flatnonzero(keep)
    everything = len(idx) == len(keep)
    fx = values["fx_rate"][idx]
    fx = np.where(np.isnan(fx), 1.0, fx)
    factor = scale * fx
    out: dict[str, Any] = {}
    for c in COLUMNS:
        if c.kind == "text":
            out[c.name] = text[c.name] if everything else take(text[c.name], idx)
        elif c.name == "fiscal_year":
            out[c.name] = values[c.name][idx].astype(np.int64)
        elif c.money:
            out[c.name] = values[c.name][idx] * factor
        else:
            out[c.name] = values[c.name][idx].copy()
    me = out["market_equity"]
    derived = np.isnan(me) & ~np.isnan(out["shares_outstanding"]) & ~np.isnan(out["share_price"])
    me = np.where(derived, out["shares_outstanding"] * out["share_price"], me)
    out["market_equity"] = me
    all_flags = {code: mask[idx] for code, mask in flags}
    all_flags["market_equity_from_shares"] = derived
    all_flags["no_market_equity"] = np.isnan(me)
    out["source_row"] = rows[idx].astype(np.int64)
    out["flags"] = _join_flags(all_flags, len(idx))
    return out


def _join_flags(masks: dict[str, np.ndarray], n: int) -> pa.Array:
    """``;``-joined flag codes per row in the order of ``FLAGS``, one string per combination."""
    codes = [c for c in FLAGS if c in masks and masks[c].any()]
    if not codes:
        return empty_text(n)
    bits = np.zeros(n, dtype=np.int64)
    for k, c in enumerate(codes):
        bits |= masks[c].astype(np.int64) << k
    combos, inverse = np.unique(bits, return_inverse=True)
    words = [";".join(c for k, c in enumerate(codes) if combo >> k & 1) for combo in combos]
    return arrow_strings(words).take(arrow_ints(inverse.ravel()))


def _ledger(
    idx: np.ndarray,
    rows: np.ndarray,
    text: Texts,
    values: Arrays,
    bad: Arrays,
    reason: np.ndarray,
    details: Mapping[int, list[str]],
) -> dict[str, Any]:
    """The ledger's columns (``Panel.excluded``), ordered by source row."""
    idx = idx[np.argsort(rows[idx], kind="stable")]
    year = values["fiscal_year"][idx]
    good_year = ~np.isnan(year) & ~bad["fiscal_year"][idx]
    with np.errstate(invalid="ignore"):
        good_year &= (year == np.round(year)) & (np.abs(year) < 1e9)
    return {
        "source_row": rows[idx].astype(np.int64),
        "firm_id": take(text["firm_id"], idx),
        "fiscal_year": np.where(good_year, year, np.nan),
        "measure": np.full(len(idx), "", dtype=object),
        "reason": reason[idx],
        "detail": np.array(["; ".join(details.get(int(i), [])) for i in idx], dtype=object),
    }
