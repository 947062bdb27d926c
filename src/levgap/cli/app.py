"""The typer application and its root options; commands register themselves on ``app``."""

from __future__ import annotations

import typer

import levgap

app = typer.Typer(
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
