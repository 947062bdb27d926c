"""Command-line interface (typer), a thin layer over the Python API."""

from __future__ import annotations

import typer

import levgap

app = typer.Typer(add_completion=False, no_args_is_help=True, help="levgap: leverage peer benchmark.")


def _version(value: bool) -> None:
    if value:
        typer.echo(f"levgap {levgap.__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True,
                                 help="Print the version and exit."),
) -> None:
    """levgap: leverage peer benchmark."""


def main() -> None:
    """Console entry point."""
    app()
