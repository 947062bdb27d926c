"""Fixtures shared by several test modules."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import pandas as pd
import pytest

# The command line's tables are 160 columns wide when captured, unless COLUMNS says otherwise;
# a test that wants another width sets COLUMNS itself. An inherited COLUMNS must not decide:
# importing readline exports COLUMNS=80 into the process environment, which pytest-xdist's
# workers (`make test`) then start with.
for _name in ("COLUMNS", "LINES"):
    os.environ.pop(_name, None)

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


@dataclass(frozen=True)
class AnalystRun:
    """A results folder on a panel the project has not seen, with planted histories and a
    peer list (``levgap analyze --peers``)."""

    root: Path
    out: Path
    panel: pd.DataFrame
    targets: pd.DataFrame
    standing: str      # carries no debt in every year: persistent, under
    shocked: str       # within its band before, debt raised in the last year: new, over
    listed: str        # has its own peer list
    listed_peers: tuple[str, ...]
    long_id: str       # an id longer than usual, for the 80-column layout


@pytest.fixture(scope="session")
def analyst_run(tmp_path_factory: pytest.TempPathFactory) -> AnalystRun:
    """Another seed of the invented demo (53, used nowhere else), analysed once per session."""
    from typer.testing import CliRunner

    from levgap.cli import app
    from levgap.demo import make_panel

    root = tmp_path_factory.mktemp("analyst")
    panel = make_panel(seed=53)
    last = int(panel["fiscal_year"].max())
    full = panel.groupby("firm_id")["fiscal_year"].nunique()
    whole = sorted(full[full == full.max()].index)
    mills = [f for f in whole if (panel.loc[panel["firm_id"] == f, "industry"] == "2421").all()]
    inns = [f for f in whole if (panel.loc[panel["firm_id"] == f, "industry"] == "7011").all()]
    standing, shocked = mills[0], inns[1]
    panel.loc[panel["firm_id"] == standing, "total_debt"] = 0.0
    hit = (panel["firm_id"] == shocked) & (panel["fiscal_year"] == last)
    panel.loc[hit, "total_debt"] = (panel.loc[hit, "total_debt"]
                                    + 0.30 * panel.loc[hit, "total_assets"])
    long_id = "TARROW-REACH-HOLDINGS-000042"
    panel.loc[panel["firm_id"] == mills[3], "firm_id"] = long_id
    listed, peers = inns[2], (mills[1], mills[2], inns[3])
    peer_file = root / "peers.csv"
    peer_file.write_text("firm_id,peer_id\n" + "".join(f"{listed},{p}\n" for p in peers),
                         encoding="utf-8")
    path = root / "panel.csv"
    panel.to_csv(path, index=False)
    out = root / "out"
    result = CliRunner().invoke(app, ["analyze", str(path), "--out", str(out), "--quiet",
                                      "--peers", str(peer_file)])
    assert result.exit_code == 0, result.output
    targets = pd.read_csv(out / "targets.csv", dtype={"firm_id": str, "industry": str,
                                                      "flags": str}, keep_default_na=False,
                          na_values={c: [""] for c in ("gap_prev", "gap_change",
                                                       "gap_mean_prior", "peer_target")})
    return AnalystRun(root=root, out=out, panel=panel, targets=targets, standing=standing,
                      shocked=shocked, listed=listed, listed_peers=peers, long_id=long_id)
