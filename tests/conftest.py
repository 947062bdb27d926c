"""Fixtures shared by several test modules."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pandas as pd
import pytest

HOSTILE_NAME = "<script>document.title='pwned'</script> & =SUM(A1) Forge"


@dataclass(frozen=True)
class DealRun:
    """A results folder written by ``levgap analyze`` on a panel the project has not seen."""

    root: Path
    out: Path
    panel_path: Path
    panel: pd.DataFrame
    targets: pd.DataFrame
    firm: str          # under its band top in both measures, with cash and market equity
    partner: str       # another firm of the same industry
    hostile: str       # a firm whose name holds markup and a formula
    no_cash: str       # a firm whose cash is blank in every year


@pytest.fixture(scope="session")
def deal_run(tmp_path_factory: pytest.TempPathFactory) -> DealRun:
    """Another seed of the invented demo (never used elsewhere), analysed once per session."""
    from typer.testing import CliRunner

    from levgap.cli import app
    from levgap.demo import make_panel

    root = tmp_path_factory.mktemp("deal")
    panel = make_panel(seed=23)
    last = panel[panel["fiscal_year"] == panel["fiscal_year"].max()]
    iron = list(dict.fromkeys(last.loc[last["industry"] == "3312", "firm_id"]))
    mills = list(dict.fromkeys(last.loc[last["industry"] == "2421", "firm_id"]))
    hostile, no_cash = iron[0], mills[0]
    panel.loc[panel["firm_id"] == hostile, "firm_name"] = HOSTILE_NAME
    panel.loc[panel["firm_id"] == no_cash, "cash"] = float("nan")
    path = root / "panel.csv"
    panel.to_csv(path, index=False)
    out = root / "out"
    result = CliRunner().invoke(app, ["analyze", str(path), "--out", str(out), "--no-report",
                                      "--quiet"])
    assert result.exit_code == 0, result.output
    targets = pd.read_csv(out / "targets.csv", dtype={"firm_id": str, "industry": str})
    year = targets["fiscal_year"].max()
    t = targets[targets["fiscal_year"] == year]
    wide = t.pivot(index="firm_id", columns="measure", values="actual").dropna()
    top = t.pivot(index="firm_id", columns="measure", values="band_high").loc[wide.index]
    room = ((top - wide).min(axis=1) > 0.03) & wide.index.isin(
        last.loc[last["industry"] == "3312", "firm_id"]) & (wide.index != hostile)
    firm = sorted(wide.index[room])[0]
    partner = next(f for f in iron if f not in (firm, hostile))
    return DealRun(root=root, out=out, panel_path=path, panel=panel, targets=targets,
                   firm=firm, partner=partner, hostile=hostile, no_cash=no_cash)
