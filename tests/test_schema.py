"""Schema v1 as data, and the template files kept in step with it."""

from __future__ import annotations

import csv
from pathlib import Path

import pytest

from levgap.config import RunConfig
from levgap.errors import OutputError
from levgap.ingest import FLAGS, REASONS, read_panel
from levgap.ingest.template import TEMPLATE_FILES, template_files
from levgap.report.files import write_template
from levgap.schema import BY_NAME, COLUMNS, KEY, MONEY, NUMERIC, OPTIONAL, REQUIRED

TEMPLATES = Path(__file__).resolve().parents[1] / "data_templates"
REGENERATE = (
    "regenerate with: python -c \"from levgap.ingest.template import template_files; "
    "[open(f'data_templates/{n}', 'w').write(t) for n, t in template_files().items()]\""
)


def test_schema_is_consistent():
    names = [c.name for c in COLUMNS]
    assert len(names) == len(set(names)) == len(BY_NAME)
    assert set(REQUIRED) | set(OPTIONAL) == set(names)
    assert set(KEY) <= set(REQUIRED)
    assert set(MONEY) <= set(NUMERIC)
    assert all(c.kind in ("text", "integer", "number") for c in COLUMNS)
    # design table (DESIGN.md, input schema v1): eight required columns
    assert REQUIRED == ("firm_id", "fiscal_year", "industry", "total_assets", "total_debt",
                        "ppe_net", "ebitda", "book_equity")


@pytest.mark.parametrize("name", TEMPLATE_FILES)
def test_repository_templates_are_the_generated_ones(name):
    assert (TEMPLATES / name).read_text(encoding="utf-8") == template_files()[name], REGENERATE


def test_template_csv_header_is_the_schema_in_order():
    with open(TEMPLATES / "panel_template.csv", newline="", encoding="utf-8") as fh:
        header = next(csv.reader(fh))
    assert header == [c.name for c in COLUMNS]


def test_readme_documents_every_column_reason_and_flag():
    readme = (TEMPLATES / "README.md").read_text(encoding="utf-8")
    for c in COLUMNS:
        assert f"| `{c.name}` | {'yes' if c.required else 'no'} | {c.kind} |" in readme
    for code in [*REASONS, *FLAGS]:
        assert f"| `{code}` |" in readme


def test_template_panel_reads_cleanly_with_template_config():
    cfg = RunConfig.from_toml(TEMPLATES / "run.toml")
    panel = read_panel(TEMPLATES / "panel_template.csv", config=cfg)
    assert panel.exclusions.empty and len(panel.data) == 3
    assert panel.data["firm_id"].tolist() == ["NRD-001", "NRD-001", "0457"]
    assert panel.data["flags"].tolist() == [
        "", "market_equity_from_shares", "negative_book_equity;no_market_equity",
    ]


def test_write_template_generates_without_checkout(tmp_path):
    written, kept = write_template(tmp_path / "tpl")
    assert [p.name for p in written] == list(TEMPLATE_FILES) and kept == []
    for p in written:
        assert p.read_text(encoding="utf-8") == template_files()[p.name]
    # files levgap wrote are replaced
    assert len(write_template(tmp_path / "tpl")[0]) == len(TEMPLATE_FILES)
    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "README.md").write_text("my notes")
    with pytest.raises(OutputError, match="README.md: the file exists and levgap did not write"
                       ".* pass --force to write the other template files"):
        write_template(mine)
    assert (mine / "README.md").read_text() == "my notes"
    assert sorted(p.name for p in mine.iterdir()) == ["README.md"]  # nothing written
    # the --force the message promises: the others written, the user's file kept
    written, kept = write_template(mine, force=True)
    assert [p.name for p in kept] == ["README.md"]
    assert sorted(p.name for p in written) == sorted(set(TEMPLATE_FILES) - {"README.md"})
    assert (mine / "README.md").read_text() == "my notes"
