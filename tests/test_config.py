"""Run configuration: TOML tables, defaults, unknown keys and bad values."""

from __future__ import annotations

import dataclasses

import pytest

from levgap.config import InputOptions, RunConfig, Units
from levgap.errors import ConfigError
from levgap.ingest.template import TEMPLATE_TOML


def test_template_toml_is_the_defaults(tmp_path):
    p = tmp_path / "run.toml"
    p.write_text(TEMPLATE_TOML, encoding="utf-8")
    cfg = RunConfig.from_toml(p)
    assert dataclasses.replace(cfg, source=None) == RunConfig()
    assert cfg.source == str(p)


def test_full_config(tmp_path):
    p = tmp_path / "run.toml"
    p.write_text(
        '[columns]\ntotal_debt = "Debt (m)"\n'
        '[input]\ndelimiter = ";"\ndecimal = ","\nthousands = "."\nencoding = "latin-1"\n'
        'sheet = "Panel"\nskip_rows = 2\n'
        '[units]\nscale = 0.001\ncurrency = "EUR"\n'
        '[model]\nmeasures = ["book"]\ncluster = "industry"\nwinsorize = [0, 1]\n',
        encoding="utf-8",
    )
    cfg = RunConfig.from_toml(p)
    assert cfg.columns == {"total_debt": "Debt (m)"}
    assert cfg.input == InputOptions(";", ",", ".", "latin-1", "Panel", 2)
    assert cfg.units == Units(0.001, "EUR")
    assert cfg.model.measures == ("book",) and cfg.model.winsorize == (0.0, 1.0)
    d = cfg.to_dict()
    assert d["input"]["delimiter"] == ";" and d["model"]["measures"] == ["book"]
    rebuilt = RunConfig.from_dict({k: v for k, v in d.items() if k != "source"}, source=str(p))
    assert rebuilt == cfg


@pytest.mark.parametrize(
    ("text", "pattern"),
    [
        ("[inputs]\n", r"unknown table \[inputs\]; allowed tables are"),
        ("[input]\ndelim = ';'\n", r"unknown key 'delim' in \[input\]; allowed keys are "
                                   r"\['decimal', 'delimiter'"),
        ("[columns]\ndebt = 'Debt'\n", r"unknown key 'debt' in \[columns\]"),
        ("[columns]\ntotal_debt = 3\n", r"\[columns\] total_debt must be a header name"),
        ("[input]\nskip_rows = 'two'\n", r"skip_rows must be a whole number"),
        ("[input]\nskip_rows = -1\n", r"skip_rows must be 0 or more"),
        ("[input]\ndelimiter = ';;'\n", r"delimiter must be one character"),
        ("[input]\ndecimal = ','\ndelimiter = ','\n", r"must differ"),
        ("[input]\ndecimal = '1'\n", r"decimal must be one of '.', ','"),
        ("[input]\nsheet = ''\n", r"sheet must be a non-empty text"),
        ("[units]\nscale = 0\n", r"scale must be a number > 0"),
        ("[units]\nscale = 'k'\n", r"scale must be a number"),
        ("[units]\ncurrency = ''\n", r"currency must be an ISO 4217 code"),
        ("[model]\ncluster = 'country'\n", r"cluster must be one of"),
        ("[model]\nleases_as_debt = 1\n", r"must be true or false"),
        ("input = 3\n", r"\[input\] must be a table"),
        ("[input\n", r"not a valid TOML file"),
    ],
)
def test_bad_configs_name_the_file_and_key(tmp_path, text, pattern):
    p = tmp_path / "run.toml"
    p.write_text(text, encoding="utf-8")
    with pytest.raises(ConfigError, match=pattern) as err:
        RunConfig.from_toml(p)
    assert str(p) in str(err.value) and "\n" not in str(err.value)


def test_missing_config_file(tmp_path):
    with pytest.raises(ConfigError, match="must be an existing TOML file"):
        RunConfig.from_toml(tmp_path / "none.toml")
