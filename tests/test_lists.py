"""Reference files beside a panel (industry names, peer lists, coverage lists): every row used or
refused with one line naming the file, the row and the column; the CLI exits 2."""

from __future__ import annotations

from pathlib import Path

import pytest
from typer.testing import CliRunner

from levgap.cli import app
from levgap.config import Industry, RunConfig
from levgap.errors import ConfigError
from levgap.ingest.lists import (
    load_references,
    read_firm_list,
    read_industry_names,
    read_peer_lists,
)

runner = CliRunner()


def _write(tmp_path: Path, name: str, text: str) -> Path:
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_readers_take_every_row(tmp_path: Path) -> None:
    names = _write(tmp_path, "n.csv", "\ufeffCode;Name\n3711;Wagons\n\n2421;Mills, sawn\n")
    assert read_industry_names(names) == {"3711": "Wagons", "2421": "Mills, sawn"}
    peers = _write(tmp_path, "p.csv", "firm_id,peer_id\nA,B\nA,C\nA,B\nD,A\n")
    assert read_peer_lists(peers) == {"A": ("B", "C"), "D": ("A",)}
    firms = _write(tmp_path, "f.txt", "firm_id\n# coverage\n TR1 \n\nTR2\nTR1\n")
    assert read_firm_list(firms) == ["TR1", "TR2"]


@pytest.mark.parametrize(("reader", "text", "pattern"), [
    (read_industry_names, "code,label\n1,x\n", "must have a column name in its header"),
    (read_industry_names, "code,name\n1,x\n1,y\n", r"row 2, column name must agree"),
    (read_industry_names, "code,name\n,x\n", r"row 1, column code must not be blank"),
    (read_peer_lists, "firm_id,peer_id\nA,A\n", r"row 1, column peer_id must name another firm"),
    (read_peer_lists, "firm_id,peer_id\nA,\n", r"row 1, column peer_id must not be blank"),
    (read_peer_lists, "", "must have a header line"),
    (read_firm_list, "# nothing\n\n", "must name at least one firm id"),
])
def test_bad_rows_name_file_row_and_column(tmp_path: Path, reader, text: str,
                                            pattern: str) -> None:
    path = _write(tmp_path, "bad.csv", text)
    with pytest.raises(ConfigError, match=pattern) as info:
        reader(path)
    assert str(path) in str(info.value)


def test_not_text_and_missing_files(tmp_path: Path) -> None:
    binary = tmp_path / "b.csv"
    binary.write_bytes(b"code,name\n1,\xff\xfe\n")
    with pytest.raises(ConfigError, match="must be UTF-8 text"):
        read_industry_names(binary)
    with pytest.raises(ConfigError, match="must be an existing file; got no file"):
        read_peer_lists(tmp_path / "absent.csv")
    with pytest.raises(ConfigError, match="got a folder"):
        read_firm_list(tmp_path)


def test_configured_names_win_and_paths_follow_the_configuration(tmp_path: Path) -> None:
    folder = tmp_path / "cfg"
    folder.mkdir()
    _write(folder, "names.csv", "code,name\nMH,From the file\nCV,Caravans\n")
    _write(folder, "peers.csv", "firm_id,peer_id\nA,B\n")
    toml = _write(folder, "run.toml", '[input]\nindustry_names = "names.csv"\npeers = '
                  '"peers.csv"\n[industries]\nMH = { parent = "Vehicles", name = "Motor homes" }'
                  '\n')
    cfg = RunConfig.from_toml(toml)
    assert cfg.input.industry_names == str(folder / "names.csv")
    loaded = load_references(cfg)
    assert loaded.industries["MH"] == Industry(parent="Vehicles", name="Motor homes")
    assert loaded.industries["CV"] == Industry(name="Caravans")
    assert loaded.peers == {"A": ("B",)}
    # the resolved configuration round-trips through run.json's options
    again = RunConfig.from_dict({k: v for k, v in loaded.to_dict().items() if k != "source"})
    assert again.industries == loaded.industries


@pytest.mark.parametrize(("toml", "pattern"), [
    ('[industries]\nMH = "Vehicles"\n', r"\[industries\] 'MH' must be a table"),
    ('[industries]\nMH = { parent = "" }\n', r"\[industries\] parent must be a non-empty text"),
    ('[industries]\nMH = { parnt = "V" }\n', r"unknown key 'parnt' in \[industries\]"),
    ('[model]\nmin_peers = 0\n', r"min_peers must be at least 1"),
    ('[units]\nunit = " "\n', r"\[units\] unit must be a non-empty text"),
])
def test_bad_configuration_is_one_line(tmp_path: Path, toml: str, pattern: str) -> None:
    path = _write(tmp_path, "run.toml", toml)
    with pytest.raises(ConfigError, match=pattern):
        RunConfig.from_toml(path)


def test_cli_refuses_a_bad_peer_list_in_one_line(tmp_path: Path) -> None:
    from levgap.demo import make_panel

    panel = tmp_path / "panel.csv"
    make_panel(3).head(300).to_csv(panel, index=False)
    peers = _write(tmp_path, "peers.csv", "firm_id,peer_id\nTR0001,TR0002\nTR0003,TR0003\n")
    result = runner.invoke(app, ["analyze", str(panel), "--out", str(tmp_path / "o"),
                                 "--peers", str(peers)])
    assert result.exit_code == 2, result.output
    lines = [ln for ln in result.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and "peers.csv: row 2, column peer_id" in lines[0]
    assert not (tmp_path / "o").exists()
    firms = _write(tmp_path, "empty.txt", "\n")
    result = runner.invoke(app, ["screen", str(tmp_path), "--firms", str(firms)])
    assert result.exit_code == 2 and "must name at least one firm id" in result.output
