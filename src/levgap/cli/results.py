"""Commands that read a results folder: ``report`` and ``table`` (``screen`` and ``explain`` have
their own modules)."""

from __future__ import annotations

from pathlib import Path

import typer

from levgap.cli.app import app
from levgap.cli.common import echo, guard


@app.command()
def report(
    out_dir: Path = typer.Argument(..., help="Folder written by levgap analyze."),
) -> None:
    """Rebuild report.html from the outputs in a folder (after editing or copying them).

    Example: levgap report results/
    """
    with guard():
        from levgap.report.html import build_report

        path = build_report(out_dir)
        echo(f"Report written to {path}.")


@app.command()
def table(
    out_dir: Path = typer.Argument(..., help="Folder written by levgap analyze."),
    fmt: str = typer.Option("latex", "--format", help="latex, markdown or csv."),
    digits: int = typer.Option(3, "--digits", min=0, max=8,
                               help="Decimals of estimates and standard errors."),
    output: Path = typer.Option(None, "--output", "-o",
                                help="Write the table to this file instead of printing it."),
) -> None:
    """Print the regression table of a run: one column per measure, standard errors in
    parentheses, significance marks, N, R², fixed effects and clustering.

    Example: levgap table results/ --format latex -o table.tex
    """
    with guard():
        from levgap.report.publication import FORMATS, regression_table
        from levgap.report.tables import read_outputs

        if fmt not in FORMATS:
            raise typer.BadParameter(f"must be latex, markdown or csv; got {fmt!r}.",
                                     param_hint="--format")
        protected = _refuse_run_files(out_dir, output) if output is not None else []
        tables, manifest = read_outputs(out_dir, names=["coefficients", "model_fit"])
        missing = [n for n in ("coefficients", "model_fit") if n not in tables]
        if missing:
            raise typer.BadParameter(f"{out_dir} holds no {missing[0]} table.",
                                     param_hint="DIR")
        text = regression_table(tables["coefficients"], tables["model_fit"], manifest,
                                fmt=fmt, digits=digits)
        if output is None:
            typer.echo(text, nl=False)
        else:
            from levgap.outputs import atomic_write_bytes

            atomic_write_bytes(output, text.encode("utf-8"), inputs=protected)
            echo(f"Table written to {output}.")


def _refuse_run_files(out_dir: Path, target: Path) -> list[Path]:
    """Refuse an output path that is a file of the run or one of its inputs; return the inputs.

    Inputs are recognised by path (as recorded in run.json) and, for a file already at the
    target, by content (its SHA-256 equals a recorded input's), so a panel moved since the run
    is still never replaced.
    """
    from levgap.errors import OutputError
    from levgap.outputs import check_replaceable, file_digest, verify_run

    run = verify_run(out_dir)
    inputs = [p for p, _ in run.inputs()]
    if target.is_file():
        sha = file_digest(target)[1]
        for path, digest in run.inputs():
            if digest == sha:
                raise OutputError(
                    f"{target}: an output must never replace an input file; got a file with "
                    f"the content of the run's input {path}. Choose another output path."
                )
    check_replaceable(target, inputs)  # the run's own files: its marker says whose they are
    return inputs
