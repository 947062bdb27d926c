"""Scenario files: every key checked where it enters, one-line errors naming file, scenario
and key; the annotated template parses and lists every key."""

from __future__ import annotations

from pathlib import Path

import pytest

from levgap.deal.scenario import ASSUMPTIONS, KEYS, Scenario, parse_scenarios
from levgap.errors import ConfigError
from levgap.ingest.deal_template import deal_template
from levgap.ingest.scenarios import read_scenarios

TEMPLATES = Path(__file__).resolve().parents[1] / "data_templates"


def _write(tmp_path: Path, text: str, name: str = "deal.toml") -> Path:
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_template_parses_and_lists_every_key(tmp_path):
    scenarios = read_scenarios(TEMPLATES / "deal.toml")
    assert [s.name for s in scenarios] == ["bolt-on mill", "merge TR0145", "recap 200",
                                           "deleverage"]
    text = deal_template()
    for key in KEYS:
        assert f"#   {key.name} " in text, key.name
    # [assumptions] are inherited, and a scenario's own value wins
    assert all(s.tax_rate == 0.25 for s in scenarios)
    assert scenarios[1].interest_rate == 0.07 and scenarios[0].interest_rate == 0.065
    assert not any(s.is_empty for s in scenarios) and Scenario(name="x").is_empty
    # the defaults: the cost share of Andrade and Kaplan (1998), 10-20%, middle 15%
    assert scenarios[0].distress_cost_share == 0.15
    assert scenarios[0].to_dict()["acquire_price"] == 150.0


def test_a_file_with_a_bom_reads(tmp_path):
    p = tmp_path / "bom.toml"
    p.write_bytes(b"\xef\xbb\xbf[[scenario]]\nname = 'x'\n")
    assert read_scenarios(p)[0].name == "x"


@pytest.mark.parametrize(
    ("text", "pattern"),
    [
        ("[[scenario]]\nname = 'a'\ndebt_rased = 5\n",
         r"deal\.toml: scenario 'a': unknown key 'debt_rased'; allowed keys are name, "),
        ("[[scenario]]\nname = 'a'\ndebt_raised = 'lots'\n",
         r"scenario 'a': key debt_raised must be a number; got 'lots'"),
        ("[[scenario]]\nname = 'a'\ndebt_raised = true\n",
         r"scenario 'a': key debt_raised must be a number; got True"),
        ("[[scenario]]\nname = 'a'\ndebt_raised = -5\n",
         r"scenario 'a': key debt_raised must be a number >= 0; got -5\. Use debt_repaid"),
        ("[[scenario]]\nname = 'a'\ndebt_raised = nan\n",
         r"key debt_raised must be a finite number; got nan"),
        ("[[scenario]]\nname = 'a'\ndebt_raised = inf\n",
         r"key debt_raised must be a finite number; got inf"),
        ("[[scenario]]\nname = 'a'\ntax_rate = 25\n",
         r"key tax_rate must lie in \[0, 1\) \(a fraction: 0\.25 for 25%\); got 25"),
        ("[[scenario]]\nname = 'a'\ndistress_cost_share = 0\n",
         r"key distress_cost_share must lie in \(0, 1\]"),
        ("[[scenario]]\nname = 'a'\nasset_volatility = -0.2\n",
         r"key asset_volatility must lie in \(0, 5\]"),
        ("[[scenario]]\ndebt_raised = 5\n", r"scenario #1: key name is required"),
        ("[[scenario]]\nname = '  '\n", r"key name must not be blank"),
        ("[[scenario]]\nname = 5\n", r"scenario #1: key name must be text in quotes; got 5"),
        ("[[scenario]]\nname = 'Before'\n", r"key name must not be 'before'"),
        ('[[scenario]]\nname = "a\\u001b[31m"\n', r"must not hold control characters"),
        ("[[scenario]]\nname = '" + "x" * 61 + "'\n", r"key name must be at most 60"),
        ("[[scenario]]\nname = 'a'\n[[scenario]]\nname = 'A'\n",
         r"scenario 'A': key name must be unique; got 'A' again \(first in scenario #1\)"),
        ("[assumptions]\ntax_rate = 0.2\n", r"must hold at least one \[\[scenario\]\] table"),
        ("[scenario]\nname = 'a'\n", r"scenarios must be \[\[scenario\]\] tables"),
        ("[deal]\nx = 1\n[[scenario]]\nname = 'a'\n", r"unknown table \[deal\]"),
        ("[assumptions]\ndebt_raised = 5\n[[scenario]]\nname = 'a'\n",
         r"unknown key 'debt_raised' in \[assumptions\]; allowed keys are interest_rate"),
        ("assumptions = 3\n[[scenario]]\nname = 'a'\n", r"\[assumptions\] must be a table"),
        ("[[scenario]]\nname = 'a'\nacquire_ebitda = 10\n",
         r"scenario 'a': key acquire_price is needed with acquire_ebitda"),
        ("[[scenario]]\nname = 'a'\nacquire_price = 10\nacquire_assets = 5\nacquire_ppe = 6\n",
         r"key acquire_assets must be at least acquire_ppe plus the acquired current assets"),
        ("[[scenario]]\nname = 'a'\nacquire_price = 10\nacquire_assets = 9\nacquire_cash = 3\n"
         "acquire_current_assets = 2\n", r"key acquire_cash must not exceed acquire_current"),
        ("[[scenario]]\nname = 'a'\nacquire_price = 10\nacquire_assets = 9\n"
         "acquire_current_liabilities = 2\n",
         r"key acquire_current_liabilities must not exceed acquire_debt plus"),
        ("[[scenario]]\nname = 'a'\nmerge_price = 10\n", r"key merge_price needs merge_with"),
        ("[[scenario]]\nname = 'a'\nmerge_with = 'X'\nacquire_price = 10\n",
         r"key merge_with cannot be combined with acquire_price"),
        ("[[scenario]]\nname = 'a'\nmerge_with = ' '\n", r"key merge_with must be a firm_id"),
        ("[[scenario]]\nname = 'a'\npersonal_tax_equity = 0.2\n",
         r"key personal_tax_debt is needed too: Miller \(1977\)"),
        ("[[scenario]]\nname = 'a'\nasset_volatility = 0.2\nequity_volatility = 0.4\n",
         r"key equity_volatility cannot be combined with asset_volatility"),
        ("[[scenario]]\nname = 'a'\ndebt_raised = \n", r"deal\.toml: not a valid TOML file"),
    ],
)
def test_hostile_scenario_files_fail_on_one_line(tmp_path, text, pattern):
    with pytest.raises(ConfigError, match=pattern) as info:
        read_scenarios(_write(tmp_path, text))
    message = str(info.value)
    assert "\n" not in message and str(tmp_path / "deal.toml") in message


def test_unreadable_files(tmp_path):
    with pytest.raises(ConfigError, match=r"the scenario file must exist; got no file there"):
        read_scenarios(tmp_path / "none.toml")
    with pytest.raises(ConfigError, match=r"must be a TOML file; got a folder"):
        read_scenarios(tmp_path)
    p = tmp_path / "latin.toml"
    p.write_bytes(b"[[scenario]]\nname = 'caf\xe9'\n")
    with pytest.raises(ConfigError, match=r"latin\.toml: the scenario file must be UTF-8 text"):
        read_scenarios(p)
    big = tmp_path / "big.toml"
    big.write_bytes(b"#" * (1 << 20) + b"\n")
    with pytest.raises(ConfigError, match=r"at most 1 MB"):
        read_scenarios(big)


def test_scenarios_built_in_python_are_checked_too():
    with pytest.raises(ConfigError, match=r"<memory>: scenario 'x': key equity_issued must be "
                       r"a number >= 0; got -1\. Use equity_bought_back"):
        Scenario(name="x", equity_issued=-1.0)
    with pytest.raises(ConfigError, match=r"a scenario file must be a TOML document"):
        parse_scenarios([])  # type: ignore[arg-type]
    s = Scenario(name="x", debt_raised=5.0)
    assert s.to_dict() == {"name": "x", "debt_raised": 5.0}
    assert set(ASSUMPTIONS) == {"interest_rate", "tax_rate", "personal_tax_equity",
                                "personal_tax_debt", "distress_cost_share",
                                "asset_volatility", "equity_volatility", "risk_free_rate"}
