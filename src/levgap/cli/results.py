"""Commands that read a results folder: ``report`` (``screen`` and ``explain`` have their own
modules; ``table`` is in ``levgap.cli.research``)."""

from __future__ import annotations

from pathlib import Path

import typer

from levgap.cli.app import app
from levgap.cli.common import echo, guard


@app.command()
def report(
    out_dir: Path = typer.Argument(..., help="Folder written by levgap analyze."),
    accept_edits: bool = typer.Option(
        False, "--accept-edits",
        help="Accept tables edited since the run and record them as the run's files."),
) -> None:
    """Rebuild report.html from the outputs in a folder (copied whole, or with tables edited
    and --accept-edits).

    Example: levgap report results/
    """
    with guard():
        from levgap.report.html import build_report

        path = build_report(out_dir, accept_edits=accept_edits)
        echo(f"Report written to {path}.")


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
