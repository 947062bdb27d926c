"""The analyst's screen on a panel the project has not seen (issue 13's acceptance): a standing
low-debt firm is persistent, a firm shocked in the last year is new, both told apart in
``explain``; a coverage list screens exactly the firms listed; the peers ``explain --peers``
lists have the run's peer median; a peer list and named parent groups are used."""

from __future__ import annotations

import csv
import io
import json
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

import levgap
from levgap import glossary as g
from levgap.cli import app

runner = CliRunner()


def _row(run, firm: str, measure: str = "book", year: int | None = None) -> pd.Series:
    t = run.targets
    t = t[(t["firm_id"] == firm) & (t["measure"] == measure)]
    return t[t["fiscal_year"] == (year or t["fiscal_year"].max())].iloc[0]


def _flags(row: pd.Series) -> set[str]:
    return set(str(row["flags"]).split(";"))


def test_planted_histories_are_persistent_and_new(analyst_run) -> None:
    standing = _row(analyst_run, analyst_run.standing)
    assert standing["status"] == "under" and standing["years_outside"] >= 3
    assert "persistent" in _flags(standing) and "newly_outside" not in _flags(standing)
    assert standing["gap_mean_prior"] < -0.05  # its standing deviation
    shocked = _row(analyst_run, analyst_run.shocked)
    before = _row(analyst_run, analyst_run.shocked, year=int(shocked["fiscal_year"]) - 1)
    assert before["status"] == "within"  # the planted shock moved it out this year
    assert shocked["status"] == "over" and shocked["years_outside"] == 1
    assert "newly_outside" in _flags(shocked) and "persistent" not in _flags(shocked)
    assert shocked["gap_change"] == pytest.approx(shocked["gap"] - before["gap"], abs=1e-12)
    assert shocked["gap_prev"] == pytest.approx(before["gap"], abs=1e-12)


def test_screen_new_and_persistent_tell_them_apart(analyst_run) -> None:
    out = str(analyst_run.out)
    new = runner.invoke(app, ["screen", out, "--new", "--format", "csv"])
    assert new.exit_code == 0, new.output
    ids = {r["firm_id"] for r in csv.DictReader(io.StringIO(new.stdout))}
    assert analyst_run.shocked in ids and analyst_run.standing not in ids
    t = analyst_run.targets
    last = t[(t["measure"] == "book") & (t["fiscal_year"] == t["fiscal_year"].max())]
    assert ids == set(last.loc[last["flags"].str.contains("newly_outside"), "firm_id"])
    standing = runner.invoke(app, ["screen", out, "--persistent", "--status", "under",
                                   "--format", "json"])
    body = json.loads(standing.stdout)
    got = [r["firm_id"] for r in body["rows"]]
    assert analyst_run.standing in got and analyst_run.shocked not in got
    assert all(r["years_outside"] >= 3 and r["status"] == "under" for r in body["rows"])


def test_explain_tells_them_apart(analyst_run) -> None:
    out = str(analyst_run.out)
    standing = runner.invoke(app, ["explain", out, analyst_run.standing])
    assert standing.exit_code == 0, standing.output
    text = " ".join(standing.output.split())
    assert "persistent, a standing policy rather than a new event" in text
    assert re.search(r"under the band for \d+ years in a row", text)
    shocked = runner.invoke(app, ["explain", out, analyst_run.shocked.lower()])  # any case
    text = " ".join(shocked.output.split())
    assert shocked.exit_code == 0, shocked.output
    assert "moved over the band this year" in text and "): new." in text
    assert "newly_outside: outside the band this year" in text  # the flag in words
    # the history chart: one line per fiscal year of the firm
    years = sorted(analyst_run.targets.loc[analyst_run.targets["firm_id"]
                                           == analyst_run.shocked, "fiscal_year"].unique())
    assert all(re.search(rf"^{y} ", shocked.output, flags=re.M) for y in years)


def test_firms_list_csv_returns_exactly_the_listed_firms_present(analyst_run,
                                                                  tmp_path: Path) -> None:
    listed = tmp_path / "list.txt"
    listed.write_text(f"firm_id\n# my coverage\n{analyst_run.shocked.lower()}\n\n"
                      f"{analyst_run.standing}\nNOPE-1\n{analyst_run.standing}\n"
                      f"{analyst_run.long_id}\n", encoding="utf-8")
    result = runner.invoke(app, ["screen", str(analyst_run.out), "--firms", str(listed),
                                 "--format", "csv"])
    assert result.exit_code == 0, result.output
    rows = list(csv.DictReader(io.StringIO(result.stdout)))
    assert sorted(r["firm_id"] for r in rows) == sorted(
        [analyst_run.shocked, analyst_run.standing, analyst_run.long_id])
    assert "NOPE-1" in result.stderr and "no book leverage row" in result.stderr
    assert list(rows[0]) == ["firm_id", "firm_name", "industry", "industry_name",
                             "fiscal_year", "measure", "actual", "target", "gap", "gap_z",
                             "band_low", "band_high", "status", "debt_to_target", "gap_prev",
                             "gap_change", "gap_mean_prior", "years_outside", "peer_median",
                             "peer_count", "flags"]
    # ordered by the size of gap z (the default without --status), as in the targets table
    t = analyst_run.targets
    z = {r["firm_id"]: abs(float(r["gap_z"])) for r in rows}
    assert [r["firm_id"] for r in rows] == sorted(z, key=lambda f: -z[f])
    assert float(rows[0]["gap"]) == pytest.approx(
        float(t[(t["firm_id"] == rows[0]["firm_id"]) & (t["measure"] == "book")
                & (t["fiscal_year"] == t["fiscal_year"].max())]["gap"].iloc[0]), abs=1e-12)


def test_screen_sorts_and_suggests(analyst_run) -> None:
    out = str(analyst_run.out)
    result = runner.invoke(app, ["screen", out, "--sort", "debt", "--format", "json",
                                 "--top", "15"])
    debt = [abs(r["debt_to_target"]) for r in json.loads(result.stdout)["rows"]]
    assert len(debt) == 15 and debt == sorted(debt, reverse=True)
    t = analyst_run.targets
    last = t[(t["measure"] == "book") & (t["fiscal_year"] == t["fiscal_year"].max())]
    assert debt[0] == pytest.approx(last["debt_to_target"].abs().max())
    change = runner.invoke(app, ["screen", out, "--sort", "change", "--format", "json"])
    ch = [abs(r["gap_change"]) for r in json.loads(change.stdout)["rows"]
          if r["gap_change"] is not None]
    assert ch == sorted(ch, reverse=True)
    # industries by code or by part of their name, any case; a typo gets suggestions
    by_name = runner.invoke(app, ["screen", out, "--industry", "sawmills", "--format", "json"])
    rows = json.loads(by_name.stdout)["rows"]
    assert rows and {r["industry"] for r in rows} == {"2421"}
    typo = runner.invoke(app, ["screen", out, "--industry", "242"])
    assert typo.exit_code == 2 and "Did you mean '2421'" in typo.output
    firm = runner.invoke(app, ["screen", out, "--firm", analyst_run.shocked[:-1] + "X"])
    assert firm.exit_code == 2 and "Did you mean" in firm.output
    bad = runner.invoke(app, ["screen", out, "--sort", "size"])
    assert bad.exit_code == 2 and "gap, gap_z, debt, change" in bad.output


def test_screen_fits_80_columns_without_cutting_ids(analyst_run, tmp_path: Path) -> None:
    listed = tmp_path / "list.txt"
    listed.write_text(f"{analyst_run.long_id}\n{analyst_run.standing}\n", encoding="utf-8")
    for args in (["--firms", str(listed)], ["--top", "12"], ["--sort", "change"]):
        result = runner.invoke(app, ["screen", str(analyst_run.out), *args],
                               env={"COLUMNS": "80"})
        assert result.exit_code == 0, result.output
        lines = result.stdout.splitlines()
        assert max(len(ln) for ln in lines) <= 80, max(lines, key=len)
        heads = next(ln for ln in lines if "firm" in ln and "┃" in ln)
        for must in ("firm", "status", "gap (pp)", "gap z", "debt to target"):
            assert must in heads, (must, heads)
    whole = runner.invoke(app, ["screen", str(analyst_run.out), "--firms", str(listed)],
                          env={"COLUMNS": "80"})
    assert f"│ {analyst_run.long_id} │" in whole.stdout  # the whole id, in its cell


def test_explain_fits_80_columns_without_cutting_years_ids_or_numbers(analyst_run) -> None:
    t = analyst_run.targets
    for firm in (analyst_run.long_id, analyst_run.shocked):
        result = runner.invoke(app, ["explain", str(analyst_run.out), firm, "--peers"],
                               env={"COLUMNS": "80"})
        assert result.exit_code == 0, result.output
        lines = result.stdout.splitlines()
        tables = [ln for ln in lines if "│" in ln or "┃" in ln]
        assert max(len(ln) for ln in tables) <= 80, max(tables, key=len)
        mine = t[(t["firm_id"] == firm) & (t["measure"] == "book")].sort_values("fiscal_year")
        for r in mine.itertuples():  # each year of the history chart, its gap and its count
            row = next((ln for ln in lines if ln.startswith(f"{int(r.fiscal_year)} │")), None)
            assert row is not None, (firm, r.fiscal_year)
            assert g.pp(r.gap) in row and row.rstrip().endswith(str(int(r.years_outside)))
        peers = levgap.open_results(analyst_run.out).peers(firm, measure="book")
        for p in peers.table.itertuples():  # every peer's id whole, its drivers in full
            row = next(ln for ln in lines if f"│ {p.firm_id} │" in ln)
            for d in peers.peer_values:
                assert g.number(getattr(p, d), 3) in row, (p.firm_id, d, row)


def test_suggestions_put_the_same_id_with_other_zeros_first_and_find_words() -> None:
    from levgap.matching import suggest

    ids = ["Qx0207", "Qx0107", "Qx0097", "Qx0007"]
    assert suggest("Qx007", ids)[0] == "Qx0007"
    assert suggest("QX9999", ids) == []
    assert suggest("motr", ["Motor homes", "Trailers"]) == ["Motor homes"]
    assert suggest("traler", ["Motor homes", "Trailers"]) == ["Trailers"]


def test_industry_labels_match_in_part_and_suggest(tmp_path: Path) -> None:
    from levgap.errors import ConfigError
    from levgap.report.quick import ScreenQuery, read_run_targets, screen_rows

    panel = tmp_path / "p.csv"
    levgap.demo_panel(seed=11).assign(
        industry=lambda d: d["industry"].map(lambda c: f"Group {c} works")).to_csv(panel,
                                                                                   index=False)
    out = tmp_path / "out"
    assert runner.invoke(app, ["analyze", str(panel), "--out", str(out), "--quiet",
                               "--measure", "book"]).exit_code == 0
    table, manifest = read_run_targets(out)
    rows = screen_rows(table, ScreenQuery(measure="book", industry="GROUP 2421"), {}).rows
    assert rows and {r["industry"] for r in rows} == {"Group 2421 works"}
    with pytest.raises(ConfigError, match="Did you mean 'Group 2421 works'"):
        screen_rows(table, ScreenQuery(measure="book", industry="grop 2421 works"), {})


def test_explain_peers_median_equals_peer_median(analyst_run) -> None:
    out = str(analyst_run.out)
    result = runner.invoke(app, ["explain", out, analyst_run.standing, "--peers"])
    assert result.exit_code == 0, result.output
    m = re.search(r"peer median of the run: ([\d.]+)%; median of the peers listed: ([\d.]+)%",
                  result.output)
    assert m is not None and m.group(1) == m.group(2)
    res = levgap.open_results(analyst_run.out)
    t = analyst_run.targets
    rng = np.random.default_rng(0)
    picks = t.iloc[rng.choice(len(t), 25, replace=False)]
    for r in picks.itertuples():
        peers = res.peers(r.firm_id, year=int(r.fiscal_year), measure=r.measure)
        assert len(peers.table) == r.peer_count
        assert peers.median == pytest.approx(r.peer_median, abs=1e-12)
        for driver, value in peers.peer_values.items():
            assert float(np.median(peers.table[driver])) == pytest.approx(value, abs=1e-12)
        assert r.firm_id not in set(peers.table["firm_id"])


def test_a_peer_list_fixes_the_peers(analyst_run) -> None:
    t = analyst_run.targets
    mine = t[(t["firm_id"] == analyst_run.listed)]
    assert len(mine) and mine["flags"].str.contains("peers_listed").all()
    assert mine["flags"].str.contains("few_peers").all()  # 3 peers, under the default 5
    for r in mine.itertuples():
        peers = t[t["firm_id"].isin(analyst_run.listed_peers) & (t["measure"] == r.measure)
                  & (t["fiscal_year"] == r.fiscal_year)]
        assert r.peer_count == len(peers)
        assert r.peer_median == pytest.approx(float(np.median(peers["actual"])), abs=1e-12)
    res = levgap.open_results(analyst_run.out)
    got = res.peers(analyst_run.listed)
    assert got.basis == "listed"
    assert set(got.table["firm_id"]) == set(analyst_run.listed_peers)
    manifest = json.loads((analyst_run.out / "run.json").read_text())
    assert [i.get("role") for i in manifest["inputs"]] == [None, "peer list"]
    text = " ".join(runner.invoke(app, ["explain", str(analyst_run.out), analyst_run.listed]
                                  ).output.split())
    assert "its own peer list" in text and "Few peers" in text


def test_named_parent_groups_and_names(tmp_path: Path) -> None:
    from levgap.demo import make_panel

    panel = make_panel(seed=53)
    labels = {"3711": "Carts and wagons", "3716": "Tide-tractors", "4412": "Coastal ships"}
    panel["industry"] = panel["industry"].map(labels).fillna(panel["industry"])
    path = tmp_path / "panel.csv"
    panel.to_csv(path, index=False)
    names = tmp_path / "names.csv"
    names.write_text("code,name\n4412,ignored: not a label of this panel\n"
                     "Coastal ships,Coastal shipping lines\n", encoding="utf-8")
    cfg = tmp_path / "run.toml"
    cfg.write_text('[input]\nindustry_names = "names.csv"\n[model]\nmeasures = ["book"]\n'
                   '[industries]\n"Tide-tractors" = { parent = "Wheeled vehicles", name = '
                   '"Tide-tractor builders" }\n"Carts and wagons" = { parent = '
                   '"Wheeled vehicles" }\n', encoding="utf-8")
    out = tmp_path / "out"
    result = runner.invoke(app, ["analyze", str(path), "--out", str(out), "--config", str(cfg),
                                 "--quiet"])
    assert result.exit_code == 0, result.output
    manifest = json.loads((out / "run.json").read_text())
    pooled = {b["industry"]: b for b in manifest["pooled_industries"]}
    assert pooled["Tide-tractors"]["parent"] == "industries of parent group Wheeled vehicles"
    assert pooled["Tide-tractors"]["members"] == ["Carts and wagons"]
    assert manifest["industry_names"]["Tide-tractors"] == "Tide-tractor builders"
    assert manifest["industry_names"]["Coastal ships"] == "Coastal shipping lines"
    assert manifest["industry_names"]["2421"] == "SAWMILLS & PLANTING MILLS, GENERAL"
    roles = [i.get("role") for i in manifest["inputs"]]
    assert roles == [None, "run configuration", "industry names"]
    # without the parent, a text label has no prefix to go by: the whole sample
    cfg.write_text('[model]\nmeasures = ["book"]\n', encoding="utf-8")
    out2 = tmp_path / "out2"
    assert runner.invoke(app, ["analyze", str(path), "--out", str(out2), "--config", str(cfg),
                               "--quiet"]).exit_code == 0
    pooled2 = {b["industry"]: b for b in json.loads((out2 / "run.json").read_text())
               ["pooled_industries"]}
    assert pooled2["Tide-tractors"]["parent"] == "whole sample"


def test_min_peers_is_a_setting(tmp_path: Path) -> None:
    from levgap.config import ModelSpec
    from levgap.demo import make_panel

    panel = make_panel(seed=53).query("fiscal_year >= 2021")
    spec = ModelSpec(measures=("book",), min_peers=31)
    t = levgap.analyze(panel, spec=spec).targets
    few = t["flags"].str.contains("few_peers")
    assert (few == (t["peer_count"] < 31)).all() and few.any() and not few.all()


def test_flags_in_words_and_raw_values_in_explain(analyst_run) -> None:
    d = pd.read_csv(analyst_run.out / "drivers.csv", dtype={"firm_id": str})
    clipped = d[d["raw_value"].notna()].iloc[0]
    assert clipped["raw_value"] != clipped["firm_value"]
    result = runner.invoke(app, ["explain", str(analyst_run.out), clipped["firm_id"], "--year",
                                 str(clipped["fiscal_year"]), "--measure", clipped["measure"]])
    assert result.exit_code == 0, result.output
    text = " ".join(result.output.split())
    assert f"(winsorised; raw value {g.number(clipped['raw_value'], 4)})" in text
    assert "winsorised: at least one driver was clipped" in text


def test_glossary_labels_in_the_analyst_views(analyst_run) -> None:
    result = runner.invoke(app, ["explain", str(analyst_run.out), analyst_run.shocked])
    for label in ("firm value", "peer value", "contribution (pp)", "debt to target"):
        assert label in result.output
