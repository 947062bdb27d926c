"""What the deal page shows, as plain data and inline SVG (the template only lays it out)."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import pandas as pd

from levgap import glossary as g
from levgap.report.svg import PALETTE, Canvas

if TYPE_CHECKING:
    from levgap.deal.result import DealCheck

LINE_LABELS = g.STATEMENT  # the statement lines, named in levgap.glossary


def _cap(text: str) -> str:
    return text[:1].upper() + text[1:]


def _f(v: Any) -> float | None:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return None if math.isnan(f) else f


def pct(v: Any, digits: int = 1) -> str:
    """A ratio as a percentage (an en dash when missing; ``levgap.glossary``)."""
    return g.pct(v, digits)


def pp(v: Any) -> str:
    """A change in percentage points (``levgap.glossary``)."""
    return g.pp(v)


def money(v: Any) -> str:
    """A signed amount of money ('unbounded' for infinity)."""
    f = _f(v)
    if f is not None and math.isinf(f):
        return "unbounded"
    return g.money(v)


def amount(v: Any) -> str:
    """An amount of money."""
    return g.number(v, 1)


def ratio(v: Any) -> str:
    """A multiple (2.50x)."""
    f = _f(v)
    return "–" if f is None else f"{f:.2f}x"


def num(v: Any, digits: int = 2) -> str:
    """A plain number."""
    f = _f(v)
    return "–" if f is None else f"{f:.{digits}f}"


def page_context(check: DealCheck) -> dict[str, Any]:
    """Everything the template renders."""
    import levgap

    t = check.table
    labels = list(dict.fromkeys(t["scenario"]))
    measures = list(dict.fromkeys(t["measure"]))
    first = t[t["measure"] == measures[0]].set_index("scenario")
    return {
        "h": {"firm_id": check.firm_id, "firm_name": check.firm_name,
              "industry": check.industry, "year": check.fiscal_year, "run_id": check.run_id,
              "version": levgap.__version__,
              "model": check.assumptions.get("model", {}).get("name", "")},
        "labels": labels,
        "scenarios": _scenario_cards(check),
        "measures": [_measure_block(check, m) for m in measures],
        "credit": _credit_rows(first, labels),
        "statement": _statement_rows(first, labels),
        "assumptions": _assumption_rows(check, labels),
        "conventions": check.assumptions.get("conventions", {}),
        "notes": _notes(t),
        "flags": list(check.notes),
    }


def _scenario_cards(check: DealCheck) -> list[dict[str, Any]]:
    from levgap.deal.scenario import ASSUMPTIONS

    cards = [{"label": "before", "description": "the firm as it is", "moves": []}]
    for s in check.scenarios:
        moves = [(k, v if isinstance(v, str) else f"{v:,.6g}") for k, v in s.to_dict().items()
                 if k not in ("name", "description") and k not in ASSUMPTIONS]
        cards.append({"label": s.name, "description": s.description, "moves": moves})
    return cards


def _cells(rows: pd.DataFrame, labels: list[str], col: str, fmt: Any) -> list[str]:
    return [fmt(rows.at[label, col]) if label in rows.index else "–" for label in labels]


def _measure_block(check: DealCheck, measure: str) -> dict[str, Any]:
    rows = check.table[check.table["measure"] == measure].set_index("scenario")
    labels = list(rows.index)
    side = [
        (_cap(g.label("actual")), _cells(rows, labels, "actual", pct)),
        (_cap(g.label("target_full")) + " (saved model)", _cells(rows, labels, "target", pct)),
        (_cap(g.label("band")), [f"{pct(rows.at[x, 'band_low'])} to {pct(rows.at[x, 'band_high'])}"
                  for x in labels]),
        (_cap(g.label("status")), _cells(rows, labels, "status", str)),
        (_cap(g.header("gap")), _cells(rows, labels, "gap", pp)),
        (_cap(g.header("gap_z")), _cells(rows, labels, "gap_z", lambda v: num(v))),
    ]
    for conv in ("recap", "funded"):
        for goal in ("target", "band_top"):
            key = f"capacity_to_{goal}_{conv}"
            side.append((_cap(g.label(key)), _cells(rows, labels, key, money)))
    side += [
        (_cap(g.label("debt_now")), _cells(rows, labels, "total_debt", amount)),
        (_cap(g.label("debt_at_target")),
         [amount(rows.at[x, "total_debt"] + rows.at[x, "capacity_to_target_recap"])
          for x in labels]),
        (_cap(g.label("debt_at_band_top")),
         [amount(rows.at[x, "total_debt"] + rows.at[x, "capacity_to_band_top_recap"])
          for x in labels]),
        (_cap(g.label("tax_shield_pv")), _cells(rows, labels, "tax_shield_pv", amount)),
        (_cap(g.label("expected_distress_cost")),
         _cells(rows, labels, "expected_distress_cost", amount)),
        (_cap(g.label("tradeoff_best_debt")) + " (grid to 2x band top)",
         _cells(rows, labels, "tradeoff_best_debt", amount)),
    ]
    return {
        "measure": measure,
        "side": side,
        "history": _history_svg(check, measure, rows),
        "bridge": _bridge(check, measure, rows),
        "tradeoff": _tradeoff_svgs(check, measure, rows),
        "peers": _peer_rows(check, measure),
    }


def _credit_rows(first: pd.DataFrame, labels: list[str]) -> list[tuple[str, list[str]]]:
    return [
        (_cap(g.label("net_debt_to_ebitda")), _cells(first, labels, "net_debt_to_ebitda", ratio)),
        (_cap(g.label("debt_to_ebitda")), _cells(first, labels, "debt_to_ebitda", ratio)),
        (_cap(g.label("ebitda_to_interest")), _cells(first, labels, "ebitda_to_interest", ratio)),
        (_cap(g.label("altman_score")), [
            "–" if _f(first.at[x, "altman_score"]) is None else
            f"{first.at[x, 'altman_model']} {first.at[x, 'altman_score']:.2f} "
            f"({first.at[x, 'altman_zone']})" for x in labels]),
        (_cap(g.label("asset_value")), _cells(first, labels, "asset_value", amount)),
        (_cap(g.label("asset_volatility")), [
            "–" if _f(first.at[x, "asset_volatility"]) is None else
            f"{first.at[x, 'asset_volatility']:.1%} ({first.at[x, 'asset_volatility_source']})"
            for x in labels]),
        (_cap(g.label("distance_to_default")),
         _cells(first, labels, "distance_to_default", num)),
        (_cap(g.label("default_probability")), _cells(first, labels, "default_probability",
                                                      lambda v: pct(v, 2))),
    ]


def _statement_rows(first: pd.DataFrame, labels: list[str]) -> list[tuple[str, list[str]]]:
    return [(name, _cells(first, labels, line, amount)) for line, name in LINE_LABELS.items()]


def _assumption_rows(check: DealCheck, labels: list[str]) -> list[tuple[str, list[str]]]:
    per = check.assumptions.get("scenarios", {})
    keys = ("tax_rate", "personal_tax_equity", "personal_tax_debt", "interest_rate",
            "risk_free_rate", "distress_cost_share", "asset_volatility", "equity_volatility")
    return [(k.replace("_", " "), [pct(per.get(x, {}).get(k), 2) if per.get(x, {}).get(k)
                                   is not None else "–" for x in labels]) for k in keys]


def _notes(t: pd.DataFrame) -> list[dict[str, str]]:
    out = []
    for r in t.to_dict("records"):
        if r["notes"] or r["flags"]:
            out.append({"where": f"{r['scenario']}, {r['measure']}",
                        "notes": str(r["notes"] or ""),
                        "flags": str(r["flags"] or "").replace(";", ", ")})
    return out


def _history_svg(check: DealCheck, measure: str, rows: pd.DataFrame) -> str:
    h = check.history[check.history["measure"] == measure].sort_values("fiscal_year")
    years = [float(y) for y in h["fiscal_year"]]
    values = [*h["actual"], *h["band_high"], *h["band_low"], *rows["target"], *rows["actual"]]
    finite = [float(v) for v in values if _f(v) is not None]
    lo = min([0.0, *finite])
    hi = max([0.1, *finite])
    x0 = min(years + [float(check.fiscal_year)]) - 0.5
    x1 = max(years + [float(check.fiscal_year)]) + 0.5
    c = Canvas((x0, x1), (lo, hi), title=f"{check.firm_id}: {measure} leverage, target and "
               "band by fiscal year; scenarios in the last year")
    c.area(years, list(h["band_low"]), list(h["band_high"]), colour=PALETTE[0],
           label="band (targets.csv)")
    c.line(years, list(h["target"]), colour=PALETTE[0], label="target", dash="5 3")
    c.line(years, list(h["actual"]), colour=PALETTE[1], label="actual")
    for i, (label, r) in enumerate(rows.iterrows()):
        colour = PALETTE[(i + 2) % len(PALETTE)]
        c.point(float(check.fiscal_year), float(r["actual"]), colour=colour, r=4.5,
                label=str(label),
                tip=f"{label}: actual {pct(r['actual'])}, target {pct(r['target'])}")
    ticks = sorted(set(int(y) for y in years) | {check.fiscal_year})
    return c.svg(x_ticks=ticks, x_labels=[str(y) for y in ticks], x_title="fiscal year")


def _bridge(check: DealCheck, measure: str, rows: pd.DataFrame) -> dict[str, Any]:
    from levgap.report.terminal import driver_steps

    c = check.contributions[check.contributions["measure"] == measure]
    steps = {}
    for label, r in rows.iterrows():
        d = c[c["scenario"] == label].assign(firm_id="x", fiscal_year=check.fiscal_year)
        row = {"firm_id": "x", "fiscal_year": check.fiscal_year, "measure": measure,
               "actual": r["actual"], "target": r["target"], "peer_median": r["peer_median"],
               "peer_target": r["peer_target"]}
        if _f(r["peer_median"]) is None:
            row["peer_median"] = r["peer_target"]
        steps[label] = driver_steps(row, d)
    names = list(next(iter(steps.values()))["label"]) if steps else []
    table = []
    for i, name in enumerate(names):
        cells = []
        for frame in steps.values():
            s = frame.iloc[i]
            cells.append(pct(s["end"]) if s["kind"] == "level" else pp(s["delta"]))
        table.append((name, cells))
    svgs = [{"label": label, "svg": _waterfall(label, frame, measure)}
            for label, frame in steps.items()]
    return {"rows": table, "charts": svgs}


def _waterfall(label: str, steps: pd.DataFrame, measure: str) -> str:
    lo = min(0.0, float(steps[["start", "end"]].min().min()))
    hi = max(0.05, float(steps[["start", "end"]].max().max()))
    n = len(steps)
    c = Canvas((-0.5, n - 0.5), (lo, hi), width=420, height=250,
               title=f"{label}: {measure} leverage from peer median to target and actual",
               margin=(14, 10, 84, 52))
    for i, s in enumerate(steps.itertuples(index=False)):
        colour = PALETTE[0] if s.kind == "level" else ("#d95f02" if s.delta > 0 else "#1b9e77")
        c.bar(i - 0.35, i + 0.35, s.start, s.end, colour=colour,
              tip=f"{s.label}: {pct(s.end) if s.kind == 'level' else pp(s.delta)}")
    return c.svg(x_ticks=list(range(n)), x_labels=[str(x) for x in steps["label"]],
                 rotate=True)


def _tradeoff_svgs(check: DealCheck, measure: str, rows: pd.DataFrame) -> list[dict[str, Any]]:
    out = []
    trade = check.tradeoff[check.tradeoff["measure"] == measure]
    for label, r in rows.iterrows():
        grid = trade[trade["scenario"] == label]
        if grid.empty or not grid["net"].notna().any():
            out.append({"label": label, "svg": "", "why": _why_no_tradeoff(r)})
            continue
        base = r["total_assets"] if measure == "book" else r["total_debt"] + r["market_equity"]
        vals = [float(v) for v in pd.concat([grid["tax_shield"], grid["distress_cost"],
                                             grid["net"]]) if _f(v) is not None]
        c = Canvas((0.0, float(grid["debt"].max())), (min(0.0, *vals), max(1e-9, *vals)),
                   title=f"{label}: tax shield against expected distress cost, {measure} band "
                   "marked")
        c.vspan(r["band_low"] * base, r["band_high"] * base, colour=PALETTE[0],
                label=f"{measure} band")
        c.line(list(grid["debt"]), list(grid["tax_shield"]), colour=PALETTE[2],
               label=g.label("tax_shield_pv"))
        c.line(list(grid["debt"]), list(grid["distress_cost"]), colour=PALETTE[1],
               label=g.label("expected_distress_cost"))
        c.line(list(grid["debt"]), list(grid["net"]), colour=PALETTE[3], label="net",
               dash="6 3")
        c.vline(float(r["total_debt"]), colour="#1f2733", label="debt")
        c.vline(float(r["tradeoff_best_debt"]), colour=PALETTE[3], label="best", dash="2 2")
        out.append({"label": label, "why": "",
                    "svg": c.svg(y_format="{:,.0f}", x_title="debt (results' money unit)")})
    return out


def _why_no_tradeoff(r: pd.Series) -> str:
    notes = [n for n in str(r["notes"]).split("; ") if "tax shield" in n or "distance" in n]
    return "; ".join(notes) or "not computable"


def _peer_rows(check: DealCheck, measure: str) -> list[dict[str, Any]]:
    p = check.peers[check.peers["measure"] == measure] if "measure" in check.peers else \
        check.peers
    return [{"firm_id": r.get("firm_id", ""), "firm_name": r.get("firm_name", ""),
             "actual": pct(r.get("actual")), "target": pct(r.get("target")),
             "status": r.get("status", "")} for r in p.to_dict("records")]
