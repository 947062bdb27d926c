"""The deal check end to end, on a results folder the project has not seen (``deal_run``):
identities against targets.csv, capacities fed back as scenarios, hand computations from the
published formulas, hostile scenarios on the command line, and the files written."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner

import levgap
from levgap.cli import app
from levgap.deal.result import PROFORMA_COLUMNS

runner = CliRunner()


def _row(check, scenario: str, measure: str) -> pd.Series:
    t = check.table
    return t[(t["scenario"] == scenario) & (t["measure"] == measure)].iloc[0]


def _target_row(run, firm: str, measure: str) -> pd.Series:
    t = run.targets[(run.targets["firm_id"] == firm) & (run.targets["measure"] == measure)]
    return t[t["fiscal_year"] == t["fiscal_year"].max()].iloc[0]


def _one_line_error(result, pattern: str) -> None:
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    lines = [ln for ln in result.output.strip().splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("levgap: error:"), result.output
    assert pattern in lines[0], result.output


def test_an_empty_scenario_reproduces_the_full_sample_target(deal_run):
    check = levgap.proforma(deal_run.out, deal_run.firm, [{"name": "nothing"}])
    assert list(check.table["scenario"].unique()) == ["before", "nothing"]
    d = pd.read_csv(deal_run.out / "drivers.csv", dtype={"firm_id": str})
    for measure in ("book", "market"):
        expect = _target_row(deal_run, deal_run.firm, measure)
        for label in ("before", "nothing"):
            r = _row(check, label, measure)
            assert abs(r["target"] - expect["target_full"]) <= 1e-12
            assert abs(r["actual"] - expect["actual"]) <= 1e-12
            assert r["peer_median"] == expect["peer_median"]
        # contributions against the firm's own peer profile of drivers.csv, summing exactly
        c = check.contributions
        c = c[(c["scenario"] == "before") & (c["measure"] == measure)].set_index("driver")
        mine = d[(d["firm_id"] == deal_run.firm) & (d["fiscal_year"] == expect["fiscal_year"])
                 & (d["measure"] == measure)].set_index("driver")
        assert c["peer_value"].to_dict() == pytest.approx(mine["peer_value"].to_dict(),
                                                          abs=1e-12)
        r = _row(check, "before", measure)
        assert c["contribution"].sum() == pytest.approx(r["target"] - r["peer_target"],
                                                        abs=1e-12)


def test_capacity_fed_back_as_a_scenario_lands_on_its_level(deal_run):
    first = levgap.proforma(deal_run.out, deal_run.firm, [{"name": "nothing"}])
    scenarios, expect = [], {}
    for measure in ("book", "market"):
        r = _row(first, "before", measure)
        for conv, spend in (("funded", "expand_assets"), ("recap", "equity_bought_back")):
            for goal, column in (("target", "target"), ("band_top", "band_high")):
                x = float(r[f"capacity_to_{goal}_{conv}"])
                name = f"{measure} {conv} {goal}"
                if x > 0:
                    scenarios.append({"name": name, "debt_raised": x, spend: x})
                    expect[name] = (measure, column)
    # the firm sits below its band top in both measures: every capacity to the top is a
    # real amount of new debt
    assert sum(1 for m, c in expect.values() if c == "band_high") == 4
    check = levgap.proforma(deal_run.out, deal_run.firm, scenarios)
    for name, (measure, column) in expect.items():
        r = _row(check, name, measure)
        assert abs(r["actual"] - r[column]) <= 1e-9, (name, r["actual"], r[column])
        # and the capacity from the landed position is zero (the same level, reached)
        goal = "target" if column == "target" else "band_top"
        conv = name.split()[1]
        assert abs(r[f"capacity_to_{goal}_{conv}"]) <= 1e-6 * r["total_assets"]


def test_debt_funded_arithmetic_is_exact(deal_run):
    check = levgap.proforma(deal_run.out, deal_run.firm, [
        {"name": "grow", "debt_raised": 100.0, "expand_assets": 100.0}])
    before, after = _row(check, "before", "book"), _row(check, "grow", "book")
    d, a = before["total_debt"], before["total_assets"]
    assert after["actual"] == pytest.approx((d + 100.0) / (a + 100.0), abs=1e-15)
    market = _row(check, "grow", "market")
    assert market["actual"] == pytest.approx(
        (d + 100.0) / (d + 100.0 + before["market_equity"]), abs=1e-15)


def test_credit_and_trade_off_figures_equal_hand_computations(deal_run):
    check = levgap.proforma(deal_run.out, deal_run.firm, [
        {"name": "recap", "debt_raised": 50.0, "equity_bought_back": 50.0, "tax_rate": 0.3,
         "risk_free_rate": 0.02, "asset_volatility": 0.35, "interest_rate": 0.06},
        {"name": "miller", "tax_rate": 0.3, "personal_tax_equity": 0.1,
         "personal_tax_debt": 0.35}])
    r = _row(check, "recap", "book")
    d = r["total_debt"]
    # Modigliani and Miller (1963): PV of the tax shield of permanent debt = t_c D
    assert r["tax_shield_pv"] == pytest.approx(0.3 * d, abs=1e-12)
    # Miller (1977): [1 - (1 - t_c)(1 - t_s) / (1 - t_d)] D
    m = _row(check, "miller", "book")
    assert m["tax_shield_pv"] == pytest.approx(
        (1 - 0.7 * 0.9 / 0.65) * m["total_debt"], abs=1e-12)
    # Altman (1968) Z for a manufacturer (SIC 3312), from the row's own lines
    a = r["total_assets"]
    z = (1.2 * (r["current_assets"] - r["current_liabilities"]) / a
         + 1.4 * r["retained_earnings"] / a + 3.3 * r["ebit"] / a
         + 0.6 * r["market_equity"] / r["total_liabilities"] + 1.0 * r["revenue"] / a)
    assert r["altman_model"] == "Z" and r["altman_score"] == pytest.approx(z, abs=1e-12)
    # Merton (1974), V = D + E, one year: d2 and N(-d2); distress cost = PD x 15% x V
    v = d + r["market_equity"]
    d2 = (math.log(v / d) + 0.02 - 0.5 * 0.35**2) / 0.35
    assert r["distance_to_default"] == pytest.approx(d2, abs=1e-12)
    prob = 0.5 * math.erfc(d2 / math.sqrt(2))
    assert r["default_probability"] == pytest.approx(prob, rel=1e-12)
    assert r["expected_distress_cost"] == pytest.approx(prob * 0.15 * v, rel=1e-12)
    # interest after: the firm's own plus 6% on the new debt
    b = _row(check, "before", "book")
    assert r["interest_expense"] == pytest.approx(b["interest_expense"] + 3.0, abs=1e-12)
    assert r["ebitda_to_interest"] == pytest.approx(r["ebitda"] / r["interest_expense"],
                                                    abs=1e-12)
    # the trade-off grid runs from zero to twice the debt at the band's top
    g = check.tradeoff[(check.tradeoff["scenario"] == "recap")
                       & (check.tradeoff["measure"] == "book")]
    top = d + r["capacity_to_band_top_recap"]
    assert g["debt"].iloc[0] == 0.0 and g["debt"].iloc[-1] == pytest.approx(2 * top)


def test_merger_with_another_panel_firm(deal_run):
    p = deal_run.panel
    other = p[p["firm_id"] == deal_run.partner].sort_values("fiscal_year").iloc[-1]
    price = float(other["book_equity"]) + 50.0
    check = levgap.proforma(deal_run.out, deal_run.firm, [
        {"name": "merge", "merge_with": deal_run.partner, "merge_price": price,
         "debt_raised": price}])
    before, after = _row(check, "before", "book"), _row(check, "merge", "book")
    assert after["goodwill"] == pytest.approx(50.0, abs=1e-9)
    assert after["total_debt"] == pytest.approx(before["total_debt"] + other["total_debt"]
                                                + price, abs=1e-9)
    assert after["market_equity"] == before["market_equity"]
    assert after["ebitda"] == pytest.approx(before["ebitda"] + other["ebitda"], abs=1e-9)
    assert after["actual"] == pytest.approx(after["total_debt"] / after["total_assets"],
                                            abs=1e-15)


def test_a_firm_without_market_value_gets_book_leverage_only(deal_run):
    last = deal_run.panel[deal_run.panel["fiscal_year"] == deal_run.panel["fiscal_year"].max()]
    private = sorted(last.loc[last["market_equity"].isna(), "firm_id"])[0]
    check = levgap.proforma(deal_run.out, private, [
        {"name": "recap", "debt_raised": 5.0, "equity_bought_back": 5.0}])
    assert set(check.table["measure"]) == {"book"}
    assert "market leverage not scored in 'recap': no market_equity" in check.notes
    r = _row(check, "recap", "book")
    assert "distance to default: not computable: needs market_equity" in r["notes"]
    expect = _target_row(deal_run, private, "book")
    assert abs(_row(check, "before", "book")["target"] - expect["target_full"]) <= 1e-12


def _cli(*args: str):
    return runner.invoke(app, [str(a) for a in args])


def _scenario_file(tmp_path: Path, text: str) -> Path:
    p = tmp_path / f"deal-{len(list(tmp_path.glob('deal-*.toml')))}.toml"
    p.write_text(text, encoding="utf-8")
    return p


def test_hostile_scenarios_exit_2_with_one_line(deal_run, tmp_path):
    out, firm = deal_run.out, deal_run.firm
    ok = _scenario_file(tmp_path, "[[scenario]]\nname = 'x'\n")
    _one_line_error(_cli("proforma", out, "NOPE", "--scenario", ok),
                    "FIRM_ID must be a firm of the results; got 'NOPE'")
    _one_line_error(_cli("proforma", out, firm, "--scenario", ok, "--year", "1990"),
                    "--year must be a fiscal year of firm")
    same = _scenario_file(tmp_path, f"[[scenario]]\nname = 'self'\nmerge_with = '{firm}'\n")
    _one_line_error(_cli("proforma", out, firm, "--scenario", same),
                    "scenario 'self': key merge_with must name another firm")
    ghost = _scenario_file(tmp_path, "[[scenario]]\nname = 'g'\nmerge_with = 'ZZZ9'\n")
    _one_line_error(_cli("proforma", out, firm, "--scenario", ghost),
                    "key merge_with must name a firm of the panel")
    a = float(_target_row(deal_run, firm, "book")["actual"])  # noqa: F841 - a real firm
    repay = _scenario_file(tmp_path, "[[scenario]]\nname = 'repay'\ndebt_repaid = 1e9\n")
    _one_line_error(_cli("proforma", out, firm, "--scenario", repay),
                    "scenario 'repay': total_assets after the scenario must be > 0")
    buy = _scenario_file(tmp_path, "[[scenario]]\nname = 'buy'\nacquire_price = 5\n"
                         "acquire_assets = 5\n")
    _one_line_error(_cli("proforma", out, deal_run.no_cash, "--scenario", buy),
                    "key acquire_price is paid out of cash, but the firm's")
    typo = _scenario_file(tmp_path, "[[scenario]]\nname = 'typo'\ndebt_rasied = 5\n")
    _one_line_error(_cli("proforma", out, firm, "--scenario", typo),
                    "scenario 'typo': unknown key 'debt_rasied'")
    _one_line_error(_cli("proforma", out, firm, "--scenario", tmp_path / "none.toml"),
                    "the scenario file must exist")
    _one_line_error(_cli("proforma", tmp_path, firm, "--scenario", ok), "run.json")
    huge = _scenario_file(tmp_path, "[[scenario]]\nname = 'huge'\ndebt_raised = 1e200\n")
    _one_line_error(_cli("proforma", out, firm, "--scenario", huge),
                    "must stay within 1,000,000 times the firm's total assets")
    _one_line_error(_cli("explain", out, firm, "--add-debt", "1e300", "--fund-assets"),
                    "must stay within 1,000,000 times the firm's total assets")


def test_the_panel_must_be_the_runs_own(deal_run, tmp_path):
    import shutil

    out = tmp_path / "out"
    shutil.copytree(deal_run.out, out)
    ok = _scenario_file(tmp_path, "[[scenario]]\nname = 'x'\n")
    moved = tmp_path / "moved.csv"
    shutil.copy(deal_run.panel_path, moved)
    run = json.loads((out / "run.json").read_text())
    run["inputs"][0]["path"] = str(tmp_path / "gone.csv")
    (out / "run.json").write_text(json.dumps(run))
    _one_line_error(_cli("proforma", out, deal_run.firm, "--scenario", ok),
                    "Pass --panel PATH")
    assert _cli("proforma", out, deal_run.firm, "--scenario", ok, "--panel",
                moved).exit_code == 0
    edited = tmp_path / "edited.csv"
    edited.write_text(moved.read_text().replace(",EUR", ",EUR ", 1))
    _one_line_error(_cli("proforma", out, deal_run.firm, "--scenario", ok, "--panel", edited),
                    "the panel must be the file the run read")


def test_files_written_and_never_over_a_foreign_file(deal_run, tmp_path):
    here = Path(__file__).resolve().parents[1] / "data_templates" / "deal.toml"
    dest = tmp_path / "memo"
    result = _cli("proforma", deal_run.out, deal_run.firm, "--scenario", here, "--out", dest)
    assert result.exit_code == 0, result.output
    assert "not investment, credit or legal advice" in result.output
    table = pd.read_csv(dest / "proforma.csv")
    assert tuple(table.columns) == PROFORMA_COLUMNS
    assert list(table["scenario"].unique()) == ["before", "bolt-on mill", "merge TR0145",
                                                "recap 200", "deleverage"]
    body = json.loads((dest / "proforma.json").read_text())
    assert body["firm_id"] == deal_run.firm and len(body["rows"]) == len(table)
    assert "not investment" in body["caution"]
    page = (dest / "proforma.html").read_text()
    assert all(f'data-scenario="{s}"' in page for s in table["scenario"].unique())
    # a re-run replaces levgap's own files
    again = _cli("proforma", deal_run.out, deal_run.firm, "--scenario", here, "--out", dest)
    assert again.exit_code == 0, again.output
    # a file levgap did not write is never replaced
    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "proforma.html").write_text("my notes")
    _one_line_error(_cli("proforma", deal_run.out, deal_run.firm, "--scenario", here, "--out",
                         mine), "the file exists and levgap did not write it")
    assert (mine / "proforma.html").read_text() == "my notes"
    assert not (mine / "proforma.csv").exists()


def test_a_hostile_name_is_text_in_every_output(deal_run, tmp_path):
    ok = _scenario_file(tmp_path, "[[scenario]]\nname = '<b>x</b> =1+1'\ndebt_raised = 5\n")
    dest = tmp_path / "memo"
    result = _cli("proforma", deal_run.out, deal_run.hostile, "--scenario", ok, "--out", dest)
    assert result.exit_code == 0, result.output
    page = (dest / "proforma.html").read_text()
    assert "<script>document.title" not in page and "<b>x</b>" not in page
    assert "&lt;script&gt;document.title=&#39;pwned&#39;&lt;/script&gt;" in page
    assert "'=1+1" not in (dest / "proforma.csv").read_text()  # not at the start of a cell
    assert "&lt;b&gt;x&lt;/b&gt; =1+1" in page


def test_explain_add_debt_shows_before_and_after(deal_run):
    result = _cli("explain", deal_run.out, deal_run.firm, "--add-debt", "50")
    assert result.exit_code == 0, result.output
    assert "debt +50 (recap)" in result.output and "before" in result.output
    funded = _cli("explain", deal_run.out, deal_run.firm, "--add-debt", "50", "--fund-assets",
                  "--measure", "market")
    assert funded.exit_code == 0, funded.output
    assert "debt +50 into assets" in funded.output
    _one_line_error(_cli("explain", deal_run.out, deal_run.firm, "--add-debt", "-5",
                         "--fund-assets"), "--add-debt must be >= 0 with --fund-assets")
    bare = _cli("explain", deal_run.out, deal_run.firm, "--fund-assets")
    assert bare.exit_code == 2 and "--add-debt" in bare.output
