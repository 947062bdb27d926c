"""Every configuration value is checked where it enters (issue 9, point 12).

Each value below crashed levgap 0.1 with exit 1 (or was silently misread); now each is one
line naming the file and the key, exit 2.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest
from typer.testing import CliRunner

from levgap.cli import app
from levgap.config import InputOptions, ModelSpec, RunConfig, Units
from levgap.demo import make_panel
from levgap.errors import ConfigError

runner = CliRunner()


@pytest.mark.parametrize(
    ("line", "pattern"),
    [
        ("winsorize = [0.1]", r"\[model\] winsorize must be a list of two numbers; got \[0.1\]"),
        ("winsorize = [0.1, 0.5, 0.9]", r"winsorize must be a list of two numbers"),
        ("winsorize = 0.9", r"winsorize must be a list of two numbers; got 0.9"),
        ('winsorize = ["a", "b"]', r"winsorize must be a list of two numbers; got \['a', 'b'\]"),
        ("winsorize = [0.9, 0.1]", r"winsorize must be two quantiles 0 <= low < high <= 1"),
        ('model = "probit"', r"\[model\] model must be one of \[.*'linear'.*\]; got 'probit'"),
        ("seed = -1", r"\[model\] seed must be 0 or more; got -1"),
        ('year = "2023"', r"\[model\] year must be a whole number or absent; got '2023'"),
        ("year = 1700", r"\[model\] year must be a fiscal year 1800..2200; got 1700"),
        ('measures = "book"', r"\[model\] measures must be a list of texts; got 'book'"),
        ('measures = ["book", 3]', r"measures must be a list of texts"),
        ('drivers = "size"', r"\[model\] drivers must be a list of texts; got 'size'"),
        # review L1: a repeated name doubled rows (measures) or was called collinear (drivers)
        ('measures = ["book", "book"]',
         r"\[model\] measures must name each entry once; got 'book' more than once"),
        ('drivers = ["size", "tangibility", "size"]',
         r"\[model\] drivers must name each entry once; got 'size' more than once"),
        ("folds = 2.5", r"\[model\] folds must be a whole number; got 2.5"),
        ("folds = true", r"\[model\] folds must be a whole number; got True"),
        ('coverage = "high"', r"\[model\] coverage must be a number; got 'high'"),
        ("coverage = nan", r"\[model\] coverage must be a number; got nan"),
        ("min_industry_firms = 0", r"min_industry_firms must be at least 1"),
        ("lag_drivers = 1", r"\[model\] lag_drivers must be true or false; got 1"),
    ],
)
def test_bad_model_values_name_file_and_key(tmp_path: Path, line: str, pattern: str) -> None:
    cfg = tmp_path / "run.toml"
    cfg.write_text(f"[model]\n{line}\n", encoding="utf-8")
    with pytest.raises(ConfigError, match=pattern) as err:
        RunConfig.from_toml(cfg)
    assert str(err.value).startswith(f"{cfg}: ") and "\n" not in str(err.value)


@pytest.mark.parametrize(
    ("text", "pattern"),
    [
        ('[units]\ncurrency = "EURO"\n', r"\[units\] currency must be an ISO 4217 code"),
        ("[units]\nscale = inf\n", r"\[units\] scale must be a number > 0; got inf"),
        ("[units]\nscale = true\n", r"\[units\] scale must be a number; got True"),
        ("[input]\nskip_rows = 1.5\n", r"\[input\] skip_rows must be a whole number"),
        ("[input]\ndecimal = 1\n", r"\[input\] decimal must be a text; got 1"),
        # review L7: a delimiter or quote as a number mark would split or join cells
        ('[input]\ndecimal = ";"\n', r"\[input\] decimal must be one of '.', ','; got ';'"),
        ("[input]\ndecimal = \"'\"\n", r"\[input\] decimal must be one of"),
        ('[input]\nthousands = "|"\n', r"\[input\] thousands must be one of .*; got '\|'"),
        ('[input]\nthousands = "\\t"\n', r"\[input\] thousands must be one of"),
        ('[columns]\ntotal_debt = "X"\nppe_net = "x"\n',
         r"\[columns\] total_debt and ppe_net must name different headers"),
        ('[columns]\ntotal_debt = " "\n', r"\[columns\] total_debt must be a header name"),
        ("columns = 3\n", r"\[columns\] must be a table of keys"),
    ],
)
def test_bad_other_values_name_file_and_key(tmp_path: Path, text: str, pattern: str) -> None:
    cfg = tmp_path / "run.toml"
    cfg.write_text(text, encoding="utf-8")
    with pytest.raises(ConfigError, match=pattern) as err:
        RunConfig.from_toml(cfg)
    assert str(err.value).startswith(f"{cfg}: ")


def test_values_are_checked_when_built_from_python_too() -> None:
    with pytest.raises(ConfigError, match=r"\[model\] winsorize must be a list of two"):
        ModelSpec(winsorize=0.9)  # type: ignore[arg-type]
    with pytest.raises(ConfigError, match=r"\[model\] model must be one of"):
        ModelSpec(model="probit")
    spec = ModelSpec(measures=["book"], winsorize=[0, 1], seed=2)  # type: ignore[arg-type]
    assert spec.measures == ("book",) and spec.winsorize == (0.0, 1.0)
    assert isinstance(spec.winsorize[1], float)
    with pytest.raises(ConfigError, match=r"\[input\] skip_rows must be a whole number"):
        InputOptions(skip_rows="2")  # type: ignore[arg-type]
    assert Units(currency="eur").currency == "EUR"
    with pytest.raises(ConfigError, match="must name different headers"):
        RunConfig(columns={"total_debt": "X", "ppe_net": "X"})


def test_toml_with_a_byte_order_mark_is_read(tmp_path: Path) -> None:
    cfg = tmp_path / "run.toml"
    cfg.write_bytes(b"\xef\xbb\xbf[model]\nseed = 3\n")
    assert RunConfig.from_toml(cfg).model.seed == 3


def test_a_device_or_huge_file_is_not_a_config(tmp_path: Path) -> None:
    with pytest.raises(ConfigError, match="must be a regular file"):
        RunConfig.from_toml("/dev/zero")
    big = tmp_path / "big.toml"
    big.write_bytes(b"# " + b"x" * (1 << 20) + b"\n")
    with pytest.raises(ConfigError, match="at most 1 MB"):
        RunConfig.from_toml(big)


def test_defaults_pass_their_own_checks() -> None:
    from levgap.models import MODELS

    spec = ModelSpec()
    assert spec.model in MODELS  # the one value ModelSpec does not look up in MODELS
    assert dataclasses.replace(spec) == spec
    assert RunConfig().to_dict()["model"]["winsorize"] == [0.01, 0.99]


@pytest.fixture(scope="module")
def panel_csv(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("in") / "panel.csv"
    make_panel(3).to_csv(path, index=False)
    return path


@pytest.mark.parametrize("line", ["winsorize = [0.1]", 'model = "probit"', "seed = -1",
                                  'year = "2023"', 'measures = "book"'])
def test_cli_exit_2_one_line(panel_csv: Path, tmp_path: Path, line: str) -> None:
    cfg = tmp_path / "run.toml"
    cfg.write_text(f"[model]\n{line}\n", encoding="utf-8")
    result = runner.invoke(app, ["analyze", str(panel_csv), "--out", str(tmp_path / "o"),
                                 "--config", str(cfg)])
    assert result.exit_code == 2, result.output
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and "run.toml: [model]" in lines[0], result.output
    assert not (tmp_path / "o").exists()


def test_config_year_outside_the_panel_says_it_came_from_the_config(panel_csv: Path,
                                                                     tmp_path: Path) -> None:
    cfg = tmp_path / "run.toml"
    cfg.write_text("[model]\nyear = 1999\n", encoding="utf-8")
    result = runner.invoke(app, ["analyze", str(panel_csv), "--out", str(tmp_path / "o"),
                                 "--config", str(cfg)])
    assert result.exit_code == 2
    assert f"{cfg}: [model] year must be a fiscal year of the panel; got 1999" in result.output
    assert "--year" not in result.output
    flag = runner.invoke(app, ["analyze", str(panel_csv), "--out", str(tmp_path / "o"),
                               "--year", "1999"])
    assert flag.exit_code == 2 and "--year must be a fiscal year" in flag.output


def test_reading_a_config_stays_light() -> None:
    import subprocess
    import sys

    template = Path(__file__).resolve().parents[1] / "data_templates" / "run.toml"
    code = ("import sys\nfrom levgap.config import RunConfig\n"
            f"RunConfig.from_toml({str(template)!r})\n"
            "print([m for m in ('scipy', 'statsmodels', 'matplotlib') if m in sys.modules])")
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    assert run.stdout.strip() == "[]", run.stdout + run.stderr
