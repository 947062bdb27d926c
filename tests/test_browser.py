"""The HTML report in a real browser: headless Chromium renders it, runs its script cleanly and
shows names holding markup as text.

Chromium comes from Debian's ``chromium`` package (``.ci/run`` installs it when missing and
it runs as root). Without it these tests skip and say why; they skip for no other reason.
Each check has a negative control on a page made to fail it, so the checks can fail.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from _report_data import make_outputs

from levgap.report.html import write_report

CHROMIUM = shutil.which("chromium") or ("/usr/bin/chromium" if Path("/usr/bin/chromium").exists()
                                        else None)
pytestmark = pytest.mark.skipif(
    CHROMIUM is None,
    reason="Chromium is not installed (no `chromium` on PATH, no /usr/bin/chromium); "
    ".ci/run installs Debian's chromium package when it runs as root",
)
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--disable-dev-shm-usage", "--hide-scrollbars", "--enable-logging=stderr", "--v=0")
CONSOLE = re.compile(r":CONSOLE[:(]\d*\)?\]? ?(.*)")


def _chromium(page: Path, tmp: Path, *args: str,
              fragment: str = "") -> subprocess.CompletedProcess[str]:
    profile = tmp / f"profile-{len(list(tmp.glob('profile-*')))}"
    cmd = [CHROMIUM, *FLAGS, f"--user-data-dir={profile}", "--virtual-time-budget=3000",
           *args, page.resolve().as_uri() + (f"#{fragment}" if fragment else "")]
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=120, check=False)
    assert proc.returncode == 0, proc.stderr[-2000:]
    return proc


def console_messages(stderr: str) -> list[str]:
    """Console lines Chromium logged (uncaught errors, console.error, ...)."""
    return [m.group(1) for line in stderr.splitlines() if (m := CONSOLE.search(line))]


def load(page: Path, tmp: Path, fragment: str = "") -> tuple[str, list[str]]:
    """The DOM after load (of ``page#fragment``) and the console messages of that load."""
    proc = _chromium(page, tmp, "--dump-dom", fragment=fragment)
    return proc.stdout, console_messages(proc.stderr)


def screenshot(page: Path, tmp: Path, *, size: str = "1280,2200") -> np.ndarray:
    """A screenshot of the page as a greyscale array in [0, 255]."""
    from PIL import Image

    shot = tmp / f"{page.stem}.png"
    _chromium(page, tmp, f"--screenshot={shot}", f"--window-size={size}")
    with Image.open(shot) as img:
        return np.asarray(img.convert("L"), dtype=float)


def looks_rendered(pixels: np.ndarray) -> bool:
    """Not blank: pixel values vary and a visible share of the page is not background."""
    ink = np.mean(pixels < 200)
    return float(pixels.std()) > 10.0 and ink > 0.01


@pytest.fixture(scope="module")
def report(tmp_path_factory) -> Path:
    tables, manifest = make_outputs(80, 5, seed=3)
    return write_report(tables, manifest, tmp_path_factory.mktemp("browser"))


def test_report_renders_without_script_errors(report, tmp_path):
    dom, console = load(report, tmp_path)
    assert console == [], console
    # Our sorting script ran to its end and marked the page (the number of sortable tables).
    ready = re.search(r'data-levgap-ready="(\d+)"', dom)
    assert ready is not None and int(ready.group(1)) >= 4
    # Names holding markup are text: no injected script ran, no element was created.
    assert "<title>levgap report: leverage against industry peers</title>" in dom
    assert "pwned" in dom  # the name is on the page, as text
    assert "&lt;script&gt;document.title='pwned'&lt;/script&gt;" in dom
    assert "<img src=" not in dom and "<b>Retail</b>" not in dom
    assert "Alpha &lt;/svg&gt; Beta &amp; Co" in dom
    assert dom.count("<svg") >= 5


def test_report_screenshot_is_not_blank(report, tmp_path):
    pixels = screenshot(report, tmp_path)
    assert pixels.shape == (2200, 1280)
    assert looks_rendered(pixels), (pixels.std(), np.mean(pixels < 200))
    # The charts render too: the band below the header holds the scatter's dark points/axes.
    assert np.mean(pixels[600:1400] < 200) > 0.01


def test_negative_controls_fail_the_checks(tmp_path):
    broken = tmp_path / "broken.html"
    broken.write_text("<!DOCTYPE html><html><body><p>x</p>"
                      "<script>undefinedFunction();</script></body></html>", encoding="utf-8")
    _, console = load(broken, tmp_path)
    assert any("undefinedFunction" in m for m in console), console
    blank = tmp_path / "blank.html"
    blank.write_text("<!DOCTYPE html><html><body></body></html>", encoding="utf-8")
    assert not looks_rendered(screenshot(blank, tmp_path, size="400,300"))


@pytest.mark.slow
def test_analyze_on_a_fresh_panel_renders_with_markup_names(tmp_path):
    """End to end: a panel the project has not seen (another seed of the invented scenario,
    with hostile names), ``levgap analyze --xlsx``, then the browser and the workbook."""
    import openpyxl
    from typer.testing import CliRunner

    from levgap.cli import app
    from levgap.demo import make_panel

    panel = make_panel(seed=11)
    last = panel["fiscal_year"] == panel["fiscal_year"].max()
    big = panel["industry"].map(panel.loc[last, "industry"].value_counts()) >= 10
    firms = list(dict.fromkeys(panel.loc[last & big, "firm_id"]))
    hostile = {firms[0]: "<script>document.title='pwned'</script> Holdings",
               firms[1]: "Quay </svg><b>Bold</b> & Sons",
               firms[2]: "=SUM(A1:A9)"}
    panel["firm_name"] = panel["firm_id"].map(hostile).fillna(panel["firm_name"])
    # Push the first two firms' final-year debt up, so that they lead the over-levered tables.
    shocked = last & panel["firm_id"].isin(firms[:2])
    panel.loc[shocked, "total_debt"] = 0.95 * panel.loc[shocked, "total_assets"]
    source = tmp_path / "fresh_panel.csv"
    panel.to_csv(source, index=False)
    out = tmp_path / "out"
    result = CliRunner().invoke(app, ["analyze", str(source), "--out", str(out), "--xlsx",
                                      "--quiet"])
    assert result.exit_code == 0, result.output
    report = out / "report.html"
    page = report.read_text(encoding="utf-8")
    assert page.count("<svg") >= 5
    dom, console = load(report, tmp_path)
    assert console == [], console
    assert "<title>levgap report: leverage against industry peers</title>" in dom
    assert re.search(r'data-levgap-ready="\d+"', dom)
    assert looks_rendered(screenshot(report, tmp_path))
    # The hostile names are on the page, as text only.
    assert "&lt;script&gt;document.title='pwned'&lt;/script&gt; Holdings" in dom
    assert "Quay &lt;/svg&gt;&lt;b&gt;Bold&lt;/b&gt; &amp; Sons" in dom
    assert "<b>Bold</b>" not in dom and "<script>document.title" not in dom
    wb = openpyxl.load_workbook(out / "workbook.xlsx", read_only=True)
    assert wb.sheetnames == ["Summary", "Targets", "Drivers", "Coefficients", "Exclusions"]
    names = {row[1] for row in wb["Targets"].iter_rows(min_row=2, values_only=True)}
    assert "'=SUM(A1:A9)" in names and "=SUM(A1:A9)" not in names
    wb.close()


def test_proforma_page_renders_every_scenario(deal_run, tmp_path):
    """The deal page of a firm with a hostile name: no console errors, every scenario on the
    page (cards, tables, charts), names as text only, and a page that is not blank."""
    from pathlib import Path as _Path

    import levgap

    template = _Path(__file__).resolve().parents[1] / "data_templates" / "deal.toml"
    check = levgap.proforma(deal_run.out, deal_run.hostile, template)
    page = check.write(tmp_path / "memo")[2]
    dom, console = load(page, tmp_path)
    assert console == [], console
    labels = list(dict.fromkeys(check.table["scenario"]))
    assert labels == ["before", "bolt-on mill", "merge TR0145", "recap 200", "deleverage"]
    for label in labels:
        assert f'data-scenario="{label}"' in dom
        assert dom.count(f">{label}<") >= 4  # card, side-by-side tables, chart captions
    assert f'data-levgap-scenarios="{len(labels)}"' in dom
    # per measure: the history, a bridge per scenario and a trade-off chart per scenario
    assert dom.count("<svg") >= 2 * (1 + 2 * len(labels))
    assert "&lt;script&gt;document.title='pwned'&lt;/script&gt;" in dom
    assert "<script>document.title" not in dom
    assert looks_rendered(screenshot(page, tmp_path, size="1280,3000"))


# -- the table of every firm (issue 13) ---------------------------------------------------


def _rows(dom: str) -> list[str]:
    """Firm ids of the table rows drawn, in order."""
    return re.findall(r'<tr class="firm" data-firm="([^"]*)"', dom)


def _cells(dom: str, firm: str) -> list[str]:
    m = re.search(rf'<tr class="firm" data-firm="{re.escape(firm)}">(.*?)</tr>', dom, re.S)
    assert m is not None, firm
    return [re.sub(r"<[^>]+>", "", c) for c in re.findall(r"<td[^>]*>(.*?)</td>", m.group(1),
                                                          re.S)]


def test_report_search_finds_any_firm_of_the_year(analyst_run, tmp_path):
    from levgap import glossary as g

    page = analyst_run.out / "report.html"
    t = analyst_run.targets
    year = int(t["fiscal_year"].max())
    book = t[(t["measure"] == "book") & (t["fiscal_year"] == year)].reset_index(drop=True)
    rng = np.random.default_rng(1)
    picks = {book["firm_id"].iloc[0], analyst_run.long_id,
             book["firm_id"].iloc[int(rng.integers(1, len(book)))]}
    for firm in sorted(picks):
        dom, console = load(page, tmp_path, f"q={firm.lower()}")
        assert console == [], console
        assert firm in _rows(dom), firm
        row = book[book["firm_id"] == firm].iloc[0]
        cells = _cells(dom, firm)
        # the page's own unpacking of the embedded data shows the run's numbers
        assert cells[2] == g.pct(row["actual"]) and cells[3] == g.pct(row["target"])
        assert cells[4] == g.pp(row["gap"])  # the gap explain and screen show
        assert cells[6] == row["status"]
    assert int(re.search(r'data-levgap-firms="(\d+)"', dom).group(1)) == book["firm_id"].nunique()


def test_report_search_by_name_and_no_match(analyst_run, tmp_path):
    page = analyst_run.out / "report.html"
    t = analyst_run.targets
    year = int(t["fiscal_year"].max())
    now = t[(t["measure"] == "book") & (t["fiscal_year"] == year)]
    name = now.loc[now["firm_id"] == analyst_run.shocked, "firm_name"].iloc[0]
    word = name.split()[0].upper()
    dom, _ = load(page, tmp_path, f"q={word}")
    want = set(now.loc[now["firm_name"].str.upper().str.contains(word) |
                       now["firm_id"].str.upper().str.contains(word), "firm_id"])
    assert int(re.search(r'data-matched="(\d+)"', dom).group(1)) == len(want)
    assert set(_rows(dom)) == want
    dom, _ = load(page, tmp_path, "q=zz-no-such-firm")
    assert _rows(dom) == [] and 'data-matched="0"' in dom


def test_report_firm_view_tells_persistent_from_new(analyst_run, tmp_path):
    page = analyst_run.out / "report.html"
    views = {}
    for firm in (analyst_run.standing, analyst_run.shocked):
        dom, console = load(page, tmp_path, f"open={firm}")
        assert console == [], console
        m = re.search(rf'<tr class="detail" data-detail="{re.escape(firm)}">(.*?)'
                      r'(?:<tr class="firm"|<div class="pager">)', dom, re.S)
        assert m is not None, firm
        views[firm] = m.group(1)
        assert m.group(1).count("<svg") == 2  # the bridge and the history chart
        assert "polygon" in m.group(1) and "polyline" in m.group(1)  # band, target, actual
    standing, shocked = views[analyst_run.standing], views[analyst_run.shocked]
    from levgap import glossary as g

    t = analyst_run.targets
    now = t[(t["measure"] == "book") & (t["fiscal_year"] == t["fiscal_year"].max())]
    twice = now[[g.pp(r.gap) != g.pp(round(r.actual, 3) - round(r.target, 3))
                 for r in now.itertuples()]]
    assert len(twice) > 0  # a firm whose gap, rounded from rounded levels, would be off
    firm = twice["firm_id"].iloc[0]
    dom, _ = load(page, tmp_path, f"open={firm}")
    views[firm] = re.search(rf'<tr class="detail" data-detail="{re.escape(firm)}">(.*?)'
                            r'(?:<tr class="firm"|<div class="pager">)', dom, re.S).group(1)
    for firm, view in views.items():  # the bridge's figures are explain's, not rounded twice
        row = t[(t["firm_id"] == firm) & (t["measure"] == "book")
                & (t["fiscal_year"] == t["fiscal_year"].max())].iloc[0]
        labels = re.findall(r"<text[^>]*>([^<]*)</text>", view)
        after = {labels[i]: labels[i + 1] for i in range(len(labels) - 1)}
        assert after[g.label("unexplained")] == g.pp(row["gap"])
        assert after[g.label("peers_offset")] == g.pp(row["peer_target"] - row["peer_median"])
    assert "persistent: under" in standing and "outside the band on the same side" in standing
    assert "new outside the band: over" in shocked and "persistent:" not in shocked
    assert "newly_outside</code>: outside the band this year" in shocked


def test_firm_view_shows_each_measures_own_industry_median(tmp_path):
    """industry_median_leverage differs by measure: the page shows the market median under
    market and the book median under book (drivers.csv), never one for both."""
    import pandas as pd
    from _synthetic import panel as synthetic_panel
    from typer.testing import CliRunner

    from levgap.cli import app

    p = synthetic_panel(41, industries=6, firms=(8, 10), years=4)
    src = tmp_path / "panel.csv"
    p.drop(columns=["true_target", "spread"]).to_csv(src, index=False)
    out = tmp_path / "run"
    res = CliRunner().invoke(app, ["analyze", str(src), "--out", str(out), "--quiet",
                                   "--model", "linear", "--effects", "year", "--drivers",
                                   "tangibility,industry_median_leverage"])
    assert res.exit_code == 0, res.output
    d = pd.read_csv(out / "drivers.csv", dtype={"firm_id": str})
    d = d[(d["fiscal_year"] == d["fiscal_year"].max())
          & (d["driver"] == "industry_median_leverage")]
    wide = d.pivot(index="firm_id", columns="measure", values="firm_value")
    firm = (wide["market"] - wide["book"]).abs().idxmax()
    shown = {}
    for measure in ("book", "market"):
        dom, console = load(out / "report.html", tmp_path, f"open={firm}&measure={measure}")
        assert console == [], console
        m = re.search(r"<td>industry_median_leverage</td><td class=\"n\">([-0-9.]+)", dom)
        assert m is not None, measure
        shown[measure] = m.group(1)
        step = 10.0 ** -len(m.group(1).split(".")[1]) if "." in m.group(1) else 1.0
        assert abs(float(m.group(1)) - wide.loc[firm, measure]) <= step / 2 + 1e-12
    assert shown["book"] != shown["market"]
