"""``DealCheck``: the result of a deal check, and the columns of ``proforma.csv``."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

from levgap.deal.capacity import CONVENTIONS
from levgap.deal.scenario import Scenario
from levgap.deal.statement import LINES
from levgap.errors import ModelError

IDENTITY_TOL = 1e-9
CAPACITY_COLUMNS = tuple(f"capacity_to_{goal}_{conv}" for conv in CONVENTIONS
                         for goal in ("target", "band_top"))
PROFORMA_COLUMNS: tuple[str, ...] = (
    "scenario", "measure", "firm_id", "fiscal_year", *LINES,
    "actual", "target", "band_low", "band_high", "status", "gap", "gap_z", "peer_target",
    "peer_median", *CAPACITY_COLUMNS,
    "net_debt_to_ebitda", "debt_to_ebitda", "ebitda_to_interest",
    "altman_model", "altman_score", "altman_zone",
    "asset_value", "asset_volatility", "asset_volatility_source", "distance_to_default",
    "default_probability", "tax_shield_pv", "expected_distress_cost", "tradeoff_best_debt",
    "tradeoff_best_net", "flags", "notes",
)
"""Columns of ``proforma.csv``: one row per scenario (``before`` first) and measure."""


@dataclass(frozen=True, slots=True)
class DealCheck:
    """A deal check of one firm-year: every scenario beside the firm as it is.

    Parameters
    ----------
    firm_id, firm_name, industry : str
    fiscal_year : int
    run_id : str
        Run of the saved model.
    scenarios : tuple of Scenario
        As given (``before`` is not among them).
    table : pandas.DataFrame
        ``PROFORMA_COLUMNS``, one row per scenario and measure, ``before`` first.
    contributions : pandas.DataFrame
        ``scenario, measure, driver, value, raw_value, peer_value, contribution``;
        contributions sum to ``target - peer_target`` (checked here, 1e-9).
    tradeoff : pandas.DataFrame
        ``scenario, measure, debt, tax_shield, default_probability, distress_cost, net``.
    history : pandas.DataFrame
        The firm's rows of ``targets.csv`` (every year and measure).
    peers : pandas.DataFrame
        Rows of ``targets.csv`` of the firm's industry in its year, the firm left out.
    assumptions : dict
        Conventions, horizon, model, each scenario's rates and shares (``proforma.json``).
    notes : tuple of str
    """

    firm_id: str
    firm_name: str
    industry: str
    fiscal_year: int
    run_id: str
    scenarios: tuple[Scenario, ...]
    table: pd.DataFrame
    contributions: pd.DataFrame
    tradeoff: pd.DataFrame
    history: pd.DataFrame
    peers: pd.DataFrame
    assumptions: dict[str, Any] = field(default_factory=dict)
    notes: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        c = self.contributions.groupby(["scenario", "measure"], sort=False)["contribution"].sum()
        t = self.table.set_index(["scenario", "measure"])
        resid = (t["target"] - t["peer_target"]).reindex(c.index) - c
        if (resid.abs() > IDENTITY_TOL).any():
            raise ModelError(
                "driver contributions must sum to target - peer_target; got a difference of "
                f"{float(resid.abs().max()):.3g}. Please report this."
            )

    def tidy(self) -> pd.DataFrame:
        """The ``proforma.csv`` table."""
        return self.table

    def write(self, out_dir: str | Path, *, force: bool = False) -> list[Path]:
        """Write ``proforma.csv``, ``proforma.json`` and ``proforma.html`` into ``out_dir``."""
        from levgap.report.proforma import write_proforma

        return write_proforma(self, out_dir, force=force)

    def _repr_html_(self) -> str:
        cols = ["scenario", "measure", "actual", "target", "band_high", "status",
                "capacity_to_band_top_recap"]
        return (f"<p>levgap deal check: {self.firm_id}, fiscal {self.fiscal_year}</p>"
                + self.table[cols].to_html(index=False, float_format=lambda v: f"{v:.4f}"))
