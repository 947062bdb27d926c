"""The typer application and its root options; commands register themselves on ``app``."""

from __future__ import annotations

import sys
from collections.abc import Sequence
from typing import Any

import typer
from typer.core import TyperGroup

import levgap
from levgap.cli.common import err


class _OneLineErrors(TyperGroup):
    """The command group, with usage errors printed as one line (exit 2), never a usage block,
    and ``levgap --help`` listing each command with its whole description (click would cut it
    to the terminal's width with "...")."""

    def format_commands(self, ctx: Any, formatter: Any) -> None:
        rows = []
        for name in self.list_commands(ctx):
            cmd = self.get_command(ctx, name)
            if cmd is not None and not cmd.hidden:
                rows.append((name, cmd.get_short_help_str(limit=10_000)))
        if rows:
            with formatter.section("Commands"):
                formatter.write_dl(rows)

    def main(self, args: Sequence[str] | None = None, prog_name: str | None = None,
             complete_var: str | None = None, standalone_mode: bool = True,
             **extra: Any) -> Any:
        try:
            rv = super().main(args=args, prog_name=prog_name, complete_var=complete_var,
                              standalone_mode=False, **extra)
        except typer.TyperException as exc:
            if not standalone_mode:
                raise
            ctx = getattr(exc, "ctx", None)
            if type(exc).__name__ == "NoArgsIsHelpError":  # `levgap` alone: the help
                typer.echo(exc.format_message())
            else:
                where = f" (see `{ctx.command_path} --help`)" if ctx is not None else ""
                err(f"{exc.format_message()}{where}")
            sys.exit(getattr(exc, "exit_code", 2))
        except typer.Abort:
            if not standalone_mode:
                raise
            err("aborted.")
            sys.exit(1)
        if not standalone_mode:
            return rv
        sys.exit(rv if isinstance(rv, int) else 0)


app = typer.Typer(
    cls=_OneLineErrors,
    add_completion=False,
    no_args_is_help=True,
    rich_markup_mode=None,
    help="levgap: is a company carrying more or less debt than its fundamentals justify "
    "against its industry peers? A statistical peer benchmark, not investment, credit or "
    "legal advice.\n\nExample: levgap analyze panel.csv --out results/",
)


def _version(value: bool) -> None:
    if value:
        typer.echo(f"levgap {levgap.__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: bool = typer.Option(
        False, "--version", callback=_version, is_eager=True, help="Print the version and exit."
    ),
) -> None:
    """levgap: leverage against industry peers, from a financial-statement panel.

    Example: levgap analyze panel.csv --out results/
    """
