"""Outputs: tables and the run manifest (``tables``), and the reports built on them."""

from __future__ import annotations

from levgap.report.tables import neutralise, read_outputs, write_tables, write_template

__all__ = ["neutralise", "read_outputs", "write_tables", "write_template"]
