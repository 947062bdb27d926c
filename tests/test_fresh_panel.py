"""Issue 13's acceptance on a panel made here, not by levgap's demo generator: text industry
labels with named parents (``[industries]``), its own leverage process (firm effects, an AR(1)
deviation), a firm that never borrows, a firm whose debt jumps in the last year only, and a
coverage list with ids in another case and one id that is not in the panel."""

from __future__ import annotations

import csv
import io
import re
import shutil
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

import levgap
from levgap.cli import app

runner = CliRunner()
LABELS = {"Motor homes": 0.30, "Trailers": 0.28, "Bakeries": 0.22, "Breweries": 0.35,
          "Software shops": 0.08, "Ferries": 0.45}
STANDING, SHOCKED = "Qz0007", "Qz0013"  # both Trailers


@dataclass(frozen=True)
class Fresh:
    out: Path
    targets: pd.DataFrame
    root: Path


def _panel(n_firms: int = 180, seed: int = 29) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    labels = list(LABELS)
    rows = []
    for i in range(n_firms):
        label = labels[i % len(labels)]
        fid, effect, size, dev = f"Qz{i:04d}", rng.normal(0, 0.05), rng.lognormal(6, 1), 0.0
        for year in range(2015, 2024):
            dev = 0.7 * dev + rng.normal(0, 0.03)
            assets = size * np.exp(rng.normal(0, 0.05))
            tang = float(np.clip(rng.normal(0.4, 0.15), 0.01, 0.95))
            prof = rng.normal(0.12, 0.04)
            lev = float(np.clip(LABELS[label] + 0.2 * (tang - 0.4) - 0.5 * (prof - 0.12)
                                + effect + dev, 0.0, 0.9))
            if fid == STANDING:
                lev = 0.0  # a standing policy: no debt in any year
            if fid == SHOCKED:
                lev = 0.25 + 0.2 * (tang - 0.4) + (0.30 if year == 2023 else 0.0)
            equity = assets * float(np.clip(0.95 - lev - rng.uniform(0, 0.1), 0.05, 1))
            rows.append({"firm_id": fid, "fiscal_year": year, "industry": label,
                         "total_assets": assets, "total_debt": lev * assets,
                         "ppe_net": tang * assets, "ebitda": prof * assets,
                         "book_equity": equity, "firm_name": f"Quern {label} {i}",
                         "market_equity": equity * rng.lognormal(0.3, 0.3)})
    return pd.DataFrame(rows)


@pytest.fixture(scope="module")
def fresh(tmp_path_factory: pytest.TempPathFactory) -> Fresh:
    root = tmp_path_factory.mktemp("fresh")
    _panel().to_csv(root / "panel.csv", index=False)
    (root / "run.toml").write_text(
        '[units]\ncurrency = "NOK"\nunit = "millions"\n[model]\nmeasures = ["book"]\n'
        '[industries]\n"Motor homes" = { parent = "Vehicles", name = "Motor homes and '
        'campers" }\n"Trailers" = { parent = "Vehicles" }\n', encoding="utf-8")
    out = root / "out"
    result = runner.invoke(app, ["analyze", str(root / "panel.csv"), "--config",
                                 str(root / "run.toml"), "--out", str(out), "--quiet"])
    assert result.exit_code == 0, result.output
    return Fresh(out, pd.read_csv(out / "targets.csv", dtype={"firm_id": str}), root)


def _last(fresh: Fresh, firm: str) -> pd.Series:
    t = fresh.targets[fresh.targets["firm_id"] == firm]
    return t[t["fiscal_year"] == t["fiscal_year"].max()].iloc[0]


def test_standing_is_persistent_and_shocked_is_new(fresh: Fresh) -> None:
    standing, shocked = _last(fresh, STANDING), _last(fresh, SHOCKED)
    assert standing["status"] == "under" and "persistent" in standing["flags"].split(";")
    assert standing["years_outside"] >= 3 and standing["gap_mean_prior"] < 0
    assert shocked["status"] == "over" and shocked["years_outside"] == 1
    assert shocked["flags"].split(";").count("newly_outside") == 1
    assert "persistent" not in shocked["flags"].split(";")
    new = runner.invoke(app, ["screen", str(fresh.out), "--new", "--format", "csv"])
    ids = {r["firm_id"] for r in csv.DictReader(io.StringIO(new.stdout))}
    assert SHOCKED in ids and STANDING not in ids
    told = {f: runner.invoke(app, ["explain", str(fresh.out), f.lower()]).output
            for f in (STANDING, SHOCKED)}
    assert "persistent, a standing policy" in told[STANDING] and ": new." not in told[STANDING]
    assert "moved over the band this year" in told[SHOCKED]
    assert "persistent," not in told[SHOCKED]


def test_coverage_list_returns_exactly_the_listed_firms_present(fresh: Fresh) -> None:
    listed = fresh.root / "list.txt"
    listed.write_text(f"{STANDING.lower()}\n  {SHOCKED} \nQz9999\nQz0102\n", encoding="utf-8")
    result = runner.invoke(app, ["screen", str(fresh.out), "--firms", str(listed),
                                 "--format", "csv"])
    assert result.exit_code == 0, result.output
    rows = list(csv.DictReader(io.StringIO(result.stdout)))
    assert sorted(r["firm_id"] for r in rows) == sorted([STANDING, SHOCKED, "Qz0102"])
    assert "Qz9999" in result.stderr and "Did you mean" in result.stderr
    names = {r["industry"]: r["industry_name"] for r in rows}
    assert names == {"Trailers": "", "Motor homes": "Motor homes and campers"}


def test_explain_peers_median_is_the_peer_median(fresh: Fresh) -> None:
    result = runner.invoke(app, ["explain", str(fresh.out), SHOCKED, "--peers"])
    m = re.search(r"peer median of the run: ([\d.]+)%; median of the peers listed: ([\d.]+)%",
                  result.output)
    assert m is not None and m.group(1) == m.group(2)
    peers = levgap.open_results(fresh.out).peers(SHOCKED)
    assert peers.median == pytest.approx(_last(fresh, SHOCKED)["peer_median"], abs=1e-12)
    assert set(peers.table["firm_id"]) <= set(
        fresh.targets.loc[fresh.targets["industry"] == "Trailers", "firm_id"])


@pytest.mark.skipif(shutil.which("chromium") is None and not Path("/usr/bin/chromium").exists(),
                    reason="Chromium is not installed")
def test_report_search_finds_them_and_tells_them_apart(fresh: Fresh, tmp_path: Path) -> None:
    from test_browser import load

    page = fresh.out / "report.html"
    for firm, words in ((STANDING, "persistent: under"), (SHOCKED, "new outside the band")):
        dom, console = load(page, tmp_path, f"q={firm.lower()}")
        assert console == [] and f'data-firm="{firm}"' in dom and 'data-matched="1"' in dom
        dom, _ = load(page, tmp_path, f"open={firm}")
        detail = re.search(rf'data-detail="{firm}">(.*?)(?:<tr class="firm"|<div class="pager">)',
                           dom, re.S)
        assert detail is not None and words in detail.group(1)


def test_lists_printed_together_show_the_same_columns(fresh: Fresh) -> None:
    from rich.console import Console

    from levgap.cli.screening import render_table

    t = fresh.targets[fresh.targets["fiscal_year"] == fresh.targets["fiscal_year"].max()]
    records = t.assign(industry_name="").to_dict("records")
    long_flags = [dict(r, flags="persistent;winsorised;few_peers") for r in records[:5]]
    short = [dict(r, flags="") for r in records[5:10]]

    def head(rows, fit=None) -> str:
        con = Console(width=150, record=True, file=io.StringIO())
        con.print(render_table(rows, "t", 150, "NOK millions", fit=fit))
        return next(ln for ln in con.export_text().splitlines() if "┃" in ln and "firm" in ln)

    assert head(long_flags) != head(short)  # each alone drops different columns
    both = long_flags + short
    cells = [c.strip() for c in head(long_flags, fit=both).split("┃")]
    assert cells == [c.strip() for c in head(short, fit=both).split("┃")]
