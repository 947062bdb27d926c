"""Reading the targets table with pyarrow alone, for the commands that must answer at once.

``levgap screen`` only filters and sorts ``targets``; importing pandas would cost more than
the whole answer, so this module reads and filters the table with pyarrow and nothing else.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

from levgap.errors import OutputError

TEXT = ("firm_id", "firm_name", "industry", "measure", "status", "flags")


def read_targets(out_dir: str | Path, columns: Sequence[str] | None = None) -> Any:
    """The ``targets`` table a run wrote, as a ``pyarrow.Table``.

    Parameters
    ----------
    out_dir : str or pathlib.Path
        A folder written by ``levgap analyze``; checked first with
        ``levgap.outputs.verify_run``.
    columns : sequence of str, optional
        Columns to read; default all.

    Raises
    ------
    OutputError
        The folder does not hold one complete run, or the table cannot be read, lacks a
        contract column or holds a wrong type (the message names the file and column).
    """
    import pyarrow as pa

    from levgap.analysis import check_table_columns
    from levgap.outputs import verify_run

    out = Path(out_dir)
    run = verify_run(out)
    path = run.tables.get("targets")
    if path is None:
        raise OutputError(f"{out}: the folder must hold a targets table; got none.")
    try:
        if path.suffix == ".parquet":
            import pyarrow.parquet as pq

            table = pq.read_table(path)
        else:
            import pyarrow.csv as pv

            table = pv.read_csv(
                path,
                convert_options=pv.ConvertOptions(
                    column_types={c: pa.string() for c in TEXT},
                    strings_can_be_null=False,
                ),
            )
    except (OSError, pa.ArrowException) as exc:
        raise OutputError(
            f"{path}: a levgap table must be readable; got {' '.join(str(exc).split())[:200]}. "
            "Re-run `levgap analyze`."
        ) from None
    check_table_columns(path, "targets", {n: _kind(table[n]) for n in table.column_names},
                        lambda c: _example(table[c]), legacy=run.run_id is None)
    for c in TEXT:
        if c in table.column_names and not pa.types.is_string(table[c].type):
            i = table.column_names.index(c)
            table = table.set_column(i, c, table[c].cast(pa.string()))
    return table.select(list(columns)) if columns else table


def _kind(col: Any) -> str:
    import pyarrow as pa
    import pyarrow.compute as pc

    t = col.type
    if pa.types.is_integer(t):
        return "integer"
    if pa.types.is_floating(t):
        vals = pc.drop_null(col)
        vals = pc.filter(vals, pc.invert(pc.is_nan(vals)))
        if len(vals) == 0:
            return "integer"
        if pc.any(pc.is_inf(vals)).as_py():
            return "number"
        return "integer" if pc.all(pc.equal(vals, pc.round(vals))).as_py() else "number"
    if pa.types.is_null(t):
        return "integer"  # an empty column: nothing of the wrong type in it
    if pa.types.is_string(t) or pa.types.is_large_string(t):
        return "text"
    return "other"


def _example(col: Any) -> str:
    import pyarrow as pa

    if not (pa.types.is_string(col.type) or pa.types.is_large_string(col.type)):
        return ""
    for v in col.to_pylist()[:1000]:
        if v and v.strip():
            try:
                float(v)
            except ValueError:
                return repr(v if len(v) <= 30 else v[:27] + "...")
    return ""


def screen_rows(
    table: Any,
    *,
    measure: str,
    status: str | None = None,
    industry: str | None = None,
    year: int | None = None,
    top: int = 20,
) -> tuple[list[dict[str, Any]], int, int | None]:
    """Rows of one measure and year, filtered and ordered for a screen.

    Order: by gap, largest first for ``over``, smallest first for ``under``, else by the size
    of ``gap_z``. Returns the first ``top`` rows (as dicts), how many matched, and the year.
    """
    import pyarrow.compute as pc

    def keep(t: Any, column: str, wanted: Sequence[Any]) -> Any:
        # Compare with Arrow scalars taken from the column itself: turning a Python value into
        # an Arrow scalar makes pyarrow import pandas, which costs more than the whole screen.
        levels = pc.unique(t[column])
        hits = [levels[i] for i, v in enumerate(levels.to_pylist()) if v in wanted]
        if not hits:
            return t.slice(0, 0)
        mask = pc.equal(t[column], hits[0])
        for h in hits[1:]:
            mask = pc.or_(mask, pc.equal(t[column], h))
        return t.filter(mask)

    t = keep(table, "measure", [measure])
    if t.num_rows == 0:
        return [], 0, None
    latest = pc.max(t["fiscal_year"])
    yr = int(latest.as_py()) if year is None else int(year)
    t = t.filter(pc.equal(t["fiscal_year"], latest)) if year is None else keep(
        t, "fiscal_year", [yr])
    if industry is not None:
        t = keep(t, "industry", [industry, "'" + industry])
    if status is not None:
        t = keep(t, "status", [status])
    if status == "under":
        t = t.sort_by([("gap", "ascending")])
    elif status == "over":
        t = t.sort_by([("gap", "descending")])
    else:
        t = t.append_column("_size", pc.abs(t["gap_z"])).sort_by([("_size", "descending")])
    return t.slice(0, top).to_pylist(), t.num_rows, yr
