"""Helpers shared by the command modules: one-line errors, consoles, notes, progress."""

from __future__ import annotations

import contextlib
from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Any

import typer

from levgap.errors import LevgapError

if TYPE_CHECKING:
    from levgap.config import RunConfig

MEASURE_CHOICES = ("book", "market", "both")
BIG_PANEL = 50_000  # rows above which a progress bar is shown


def err(message: str) -> None:
    typer.echo(f"levgap: error: {' '.join(str(message).split())}", err=True)


@contextlib.contextmanager
def guard() -> Iterator[None]:
    """Turn a levgap error (or an operating-system error on a named file) into one line."""
    try:
        yield
    except LevgapError as exc:
        err(str(exc))
        raise typer.Exit(2) from None
    except OSError as exc:
        name = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
        err(f"{name}{exc.strerror or exc}")
        raise typer.Exit(2) from None


def merge_notes(recorded: tuple[str, ...] | list[str], caught: list[str]) -> list[str]:
    """The panel's recorded notes, plus caught warnings that do not repeat one of them."""
    out = [" ".join(str(w).split()) for w in recorded]
    out += [c for c in caught if not any(c in r or r.endswith(c) for r in out)]
    return list(dict.fromkeys(out))


def matches(column: Any, value: str) -> Any:
    """Rows whose text equals ``value`` as typed or as written neutralised (leading ')."""
    text = column.astype(str)
    return (text == value) | (text == "'" + value)


def load_config(path: Path | None) -> RunConfig:
    from levgap.config import RunConfig

    return RunConfig.from_toml(path) if path is not None else RunConfig()


def parse_measures(measure: str) -> tuple[str, ...]:
    if measure not in MEASURE_CHOICES:
        raise typer.BadParameter(f"must be one of {', '.join(MEASURE_CHOICES)}; got {measure!r}.")
    return ("book", "market") if measure == "both" else (measure,)


def console(stderr: bool = False) -> Any:
    from rich.console import Console

    # markup off: data and messages hold square brackets ([input], firm names) to show as is
    con = Console(stderr=stderr, highlight=False, soft_wrap=False, markup=False)
    if not con.is_terminal:
        # Piped or captured output: wide enough that tables are not cut to 80 columns.
        con = Console(stderr=stderr, highlight=False, soft_wrap=False, markup=False, width=160)
    return con


@contextlib.contextmanager
def collect_notes(collected: list[str]) -> Iterator[None]:
    """Collect data warnings as notes for the user instead of letting Python print them."""
    import warnings

    from levgap.errors import DataWarning

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", DataWarning)
        yield
    for c in caught:
        if issubclass(c.category, DataWarning):
            text = " ".join(str(c.message).split())
            if text not in collected:
                collected.append(text)
        else:
            warnings.warn_explicit(c.message, c.category, c.filename, c.lineno)


def progress_bar(enabled: bool) -> Any:
    """A rich progress bar on stderr, or a no-op context when disabled."""
    if not enabled:
        return contextlib.nullcontext(None)
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    return Progress(TextColumn("{task.description}"), BarColumn(), TextColumn(
        "{task.completed}/{task.total}"), TimeElapsedColumn(), console=console(stderr=True),
        transient=True)



def stepper(bar: Any) -> Any:
    """A ``progress(stage, done, total)`` callback drawing on ``bar`` (None: no callback)."""
    if bar is None:
        return None
    tasks: dict[str, Any] = {}

    def step(stage: str, done: int, total: int) -> None:
        if stage not in tasks:
            tasks[stage] = bar.add_task(stage, total=total)
        bar.update(tasks[stage], completed=done)

    return step



def screen_table(rows: list[dict[str, Any]], title: str) -> Any:
    from rich.table import Table

    table = Table(title=title, title_justify="left")
    for col, just in (("firm", "left"), ("name", "left"), ("industry", "left"),
                      ("year", "right"), ("actual", "right"), ("target", "right"),
                      ("gap pp", "right"), ("gap z", "right"), ("band", "right"),
                      ("status", "left")):
        table.add_column(col, justify=just)  # type: ignore[arg-type]
    for r in rows:
        z = r["gap_z"]
        table.add_row(
            str(r["firm_id"]), str(r["firm_name"] or ""), str(r["industry"]),
            str(r["fiscal_year"]), f"{r['actual']:.1%}", f"{r['target']:.1%}",
            f"{100 * r['gap']:+.1f}", "" if z is None or z != z else f"{z:+.2f}",
            f"{r['band_low']:.1%} to {r['band_high']:.1%}", str(r["status"]),
        )
    return table
