"""Command-line interface (typer), a thin layer over the Python API.

Only this package prints or exits. Each module holds one group of commands and registers them
on the one ``app`` (``levgap.cli.app``); heavy libraries are imported inside the commands that
need them, so ``--help``, ``--version``, ``check``, ``screen``, ``explain`` and ``template``
answer quickly. Exit codes: 0 done, 2 bad input or usage, 1 an internal error.
"""

from __future__ import annotations

import sys
from importlib import import_module

from levgap.cli.app import app
from levgap.cli.common import err

__all__ = ["app", "main"]

COMMAND_MODULES = ("run", "screening", "explaining", "results", "research", "models",
                   "deal", "opendata")
"""Modules whose commands register on ``app`` when imported, in the order ``--help`` lists."""
for _module in COMMAND_MODULES:
    import_module(f"levgap.cli.{_module}")


def main() -> None:
    """Console entry point: no traceback ever reaches the user."""
    try:
        app()
    except SystemExit:
        raise
    except KeyboardInterrupt:
        err("interrupted.")
        sys.exit(130)
    except Exception as exc:  # last line of defence: an internal error, not the user's
        err(f"internal error ({type(exc).__name__}: {exc}). This is a bug in levgap; please "
             "report it with the command you ran.")
        sys.exit(1)
