"""Helpers shared by the command modules: one-line errors, consoles, notes, progress."""

from __future__ import annotations

import contextlib
import os
import re
from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Any

import typer

from levgap.errors import LevgapError

if TYPE_CHECKING:
    from levgap.config import RunConfig

MEASURE_CHOICES = ("book", "market", "both")
TOP_HELP = "Firms shown per list: the N furthest from their targets."
"""What ``--top N`` means, in every command that has it."""
TOP_DEFAULT = 10
BIG_PANEL = 50_000  # rows above which a progress bar is shown


_ESCAPE = re.compile(
    r"\x1b\[[0-?]*[ -/]*[@-~]"            # CSI: colours, cursor moves
    r"|\x1b\][^\x07\x1b]*(?:\x07|\x1b\\)?"  # OSC: titles, hyperlinks
    r"|\x1b[PX^_][^\x1b]*(?:\x1b\\)?"      # DCS, SOS, PM, APC strings
    r"|\x1b.?|\x9b[0-?]*[ -/]*[@-~]"       # any other escape, 8-bit CSI
)
_CONTROL = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f\u200e\u200f\u202a-\u202e"
                      "\u2066-\u2069]")


def plain(text: Any) -> str:
    """Text from data made safe for a terminal: escape sequences and control characters go.

    ANSI and OSC escape sequences (colours, cursor moves, window titles, hyperlinks), other
    C0 and C1 control characters and bidirectional overrides are removed; tabs and line
    breaks become spaces. Every command passes data through this before printing it.
    """
    s = _ESCAPE.sub("", str(text))
    return _CONTROL.sub("", s.replace("\t", " ").replace("\r", " ").replace("\n", " "))


def err(message: str) -> None:
    typer.echo(f"levgap: error: {' '.join(plain(message).split())}", err=True)


def echo(message: str) -> None:
    """Print one line of text that may hold data (paths, names), made plain."""
    typer.echo(plain(message))


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
    out += [c for c in caught if not any(c in r or c.endswith(f": {r}") for r in out)]
    return list(dict.fromkeys(out))


def matches(column: Any, value: str) -> Any:
    """Rows whose text equals ``value`` as typed or as written neutralised (leading ')."""
    text = column.astype(str)
    return (text == value) | (text == "'" + value)


def load_config(path: Path | None) -> RunConfig:
    from levgap.config import RunConfig

    return RunConfig.from_toml(path) if path is not None else RunConfig()


def parse_measures(measure: str) -> tuple[str, ...]:
    measure = measure.strip().casefold()  # any case, as ids and names
    if measure not in MEASURE_CHOICES:
        raise typer.BadParameter(f"must be one of {', '.join(MEASURE_CHOICES)}; got {measure!r}.",
                                 param_hint="--measure")
    return ("book", "market") if measure == "both" else (measure,)


def rich_console(stderr: bool = False) -> Any:
    from rich.console import Console

    # markup off: data and messages hold square brackets ([input], firm names) to show as is
    con = Console(stderr=stderr, highlight=False, soft_wrap=False, markup=False)
    if not con.is_terminal and "COLUMNS" not in os.environ:
        # Piped or captured output: wide enough that tables are not cut to 80 columns (a
        # COLUMNS setting, the terminal convention, is honoured as rich honours it).
        con = Console(stderr=stderr, highlight=False, soft_wrap=False, markup=False, width=160)
    return con


class _PlainConsole:
    """A rich console whose ``print`` makes text arguments plain (see :func:`plain`)."""

    def __init__(self, con: Any) -> None:
        self._con = con

    def print(self, *objects: Any, **kwargs: Any) -> None:
        if all(isinstance(o, str) for o in objects):
            kwargs.setdefault("soft_wrap", True)  # a line of text stays one line
        self._con.print(*(plain(o) if isinstance(o, str) else o for o in objects), **kwargs)

    def __getattr__(self, name: str) -> Any:
        return getattr(self._con, name)


def console(stderr: bool = False) -> Any:
    """The console commands print through: text is made plain; tables are built plain."""
    return _PlainConsole(rich_console(stderr))


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
        "{task.completed}/{task.total}"), TimeElapsedColumn(), console=rich_console(stderr=True),
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
