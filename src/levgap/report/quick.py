"""Reading the targets table with pyarrow alone, for the commands that must answer at once.

``levgap screen`` only filters and sorts ``targets``; importing pandas would cost more than
the whole answer, so this module reads and filters the table with pyarrow and nothing else.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

from levgap.errors import OutputError
from levgap.report.files import MARKER

TEXT = ("firm_id", "firm_name", "industry", "measure", "status", "flags")


def read_targets(out_dir: str | Path, columns: Sequence[str] | None = None) -> Any:
    """The ``targets`` table a run wrote, as a ``pyarrow.Table``.

    Parameters
    ----------
    out_dir : str or pathlib.Path
        A folder written by ``levgap analyze``.
    columns : sequence of str, optional
        Columns to read; default all.

    Raises
    ------
    OutputError
        The folder holds no levgap outputs, or the table cannot be read.
    """
    import pyarrow as pa

    out = Path(out_dir)
    if not (out / "run.json").is_file():
        raise OutputError(
            f"{out}: the folder must hold levgap outputs (run.json); got none. Run "
            f"`levgap analyze PANEL --out {out}` first."
        )
    try:
        listed = set((out / MARKER).read_text(encoding="utf-8").split())
    except (OSError, UnicodeDecodeError):
        listed = set()
    found = [p for p in (out / "targets.parquet", out / "targets.csv") if p.is_file()]
    if listed:
        found = [p for p in found if p.name in listed] or found
    if not found:
        raise OutputError(f"{out}: the folder must hold a targets table; got none.")
    path = max(found, key=lambda p: p.stat().st_mtime)
    try:
        if path.suffix == ".parquet":
            import pyarrow.parquet as pq

            table = pq.read_table(path, columns=list(columns) if columns else None)
        else:
            import pyarrow.csv as pv

            table = pv.read_csv(
                path,
                convert_options=pv.ConvertOptions(
                    column_types={c: pa.string() for c in TEXT},
                    include_columns=list(columns) if columns else None,
                    strings_can_be_null=False,
                ),
            )
    except (OSError, pa.ArrowException) as exc:
        raise OutputError(
            f"{path}: a levgap table must be readable; got {' '.join(str(exc).split())[:200]}. "
            "Re-run `levgap analyze`."
        ) from None
    return table


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
