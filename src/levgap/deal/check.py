"""``check_deal``: every scenario of a deal scored against the saved model, with capacity, credit
and the trade-off in money. In memory, no file I/O (``levgap.deal.api`` reads the folder).

For each scenario and measure, beside the firm as it is (``before``): the pro forma statement
lines, actual leverage, the saved model's full-sample target, band, status, gap and gap_z,
driver contributions against the firm's own peer profile (``drivers.csv``), debt capacity to
the target and to the band's top under both conventions, credit ratios, the Altman score, the
Merton distance to default, the tax shield and expected distress cost at the scenario's debt,
and the trade-off grid with its best debt level. Nothing is refitted and no other firm's row
changes.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from levgap.deal.capacity import CONVENTIONS, Capacity, CapacitySearch, Problem, moved
from levgap.deal.credit import altman, credit_ratios
from levgap.deal.distress import asset_value, distress_at, grid
from levgap.deal.result import CAPACITY_COLUMNS, PROFORMA_COLUMNS, DealCheck
from levgap.deal.scenario import ASSUMPTIONS, BEFORE, Scenario, check_name_free
from levgap.deal.scoring import HELD_DRIVERS, batch_levels, capacity_rows, read_levels
from levgap.deal.statement import ProForma, Statement, apply_scenario
from levgap.errors import ConfigError


def check_deal(
    model: Any,
    panel: pd.DataFrame,
    targets: pd.DataFrame,
    drivers: pd.DataFrame,
    firm_id: str,
    scenarios: Sequence[Scenario],
    *,
    year: int | None = None,
    source: str = "the results",
) -> DealCheck:
    """Score each scenario against the saved model (see the module docstring).

    Parameters
    ----------
    model : levgap.models.saved.SavedModel
    panel : pandas.DataFrame
        The run's validated panel (``Panel.data``): statement lines of every firm-year.
    targets, drivers : pandas.DataFrame
        The run's ``targets`` and ``drivers`` tables.
    firm_id : str
    scenarios : sequence of Scenario
    year : int, optional
        Fiscal year of the firm to start from; default its latest year in ``targets``.
    source : str
        The results folder, for messages.

    Returns
    -------
    DealCheck

    Raises
    ------
    ConfigError
        An unknown firm or year, a scenario named ``before`` or twice, a scenario the firm's
        statements cannot carry (one line naming file, scenario and key).
    """
    firm_targets = targets[targets["firm_id"].astype(str) == str(firm_id)]
    if firm_targets.empty:
        raise ConfigError(f"{source}: FIRM_ID must be a firm of the results; got {firm_id!r}, "
                          "which has no row in targets.csv.")
    years = sorted(int(y) for y in firm_targets["fiscal_year"].unique())
    year = years[-1] if year is None else int(year)
    firm_rows = panel[panel["firm_id"].astype(str) == str(firm_id)]
    row = firm_rows[firm_rows["fiscal_year"] == year]
    if year not in years or row.empty:
        raise ConfigError(f"{source}: --year must be a fiscal year of firm {firm_id}; got "
                          f"{year}. It has {', '.join(map(str, years))}.")
    base = Statement.from_row(row.iloc[0].to_dict())
    scenarios = tuple(scenarios)
    _check_names(scenarios)
    before = _common_assumptions(scenarios)
    proformas = [apply_scenario(base, before)] + [
        apply_scenario(base, s, _partner(panel, s, year)) for s in scenarios]
    labels = [BEFORE] + [s.name for s in scenarios]
    histories = [_history(panel, firm_id, year, p) for p in proformas]
    scored, caps = _score_all(model, proformas, histories, drivers, firm_id, year)
    peer_median = {m: float(r["peer_median"]) for m, r in
                   firm_targets[firm_targets["fiscal_year"] == year].set_index("measure")
                   .iterrows()}
    table, contributions, tradeoff = _assemble(model, labels, proformas, histories, scored,
                                               caps, peer_median)
    return DealCheck(
        firm_id=str(firm_id), firm_name=base.firm_name, industry=base.industry,
        fiscal_year=year, run_id=str(getattr(model, "run_id", None) or ""), scenarios=scenarios,
        table=table, contributions=contributions, tradeoff=tradeoff,
        history=firm_targets.sort_values(["measure", "fiscal_year"], ignore_index=True),
        peers=_peers(targets, firm_id, base.industry, year),
        assumptions=_assumptions(model, [before, *scenarios], labels),
        notes=tuple(dict.fromkeys([f for p in proformas for f in p.flags] + [
            f"{m} leverage not scored in '{label}': no market_equity" for label, p in
            zip(labels, proformas, strict=True) for m in model.measures
            if m == "market" and math.isnan(p.after.market_equity)])),
    )


def _score_all(model: Any, proformas: list[ProForma], histories: list[pd.DataFrame],
               drivers: pd.DataFrame, firm_id: str, year: int
               ) -> tuple[pd.DataFrame, dict[tuple[int, str], tuple[dict[str, float],
                                                                   list[str]]]]:
    """Score every scenario and solve every capacity question, in as few batches as they need.

    The first batch holds each scenario under its own id and beside it its statement with all
    the debt repaid under each convention (the lower end of every capacity search), scored
    with the first measure's peer profile; it gives every level the searches start from. Each
    further measure's batch (its own peer profile, for its contributions) also carries the
    first round of the searches; the remaining rounds are batches of their own.

    Returns
    -------
    (pandas.DataFrame, dict)
        The scored rows of ``year`` (each measure with its own peer profile), and the
        capacities by (scenario index, measure).
    """
    pairs = list(enumerate(zip(proformas, histories, strict=True)))
    rows = pd.concat([_score_input(p.after, h, _scenario_id(k)) for k, (p, h) in pairs],
                     ignore_index=True)
    floors = pd.concat([_score_input(moved(p.after, conv, -p.after.total_debt), h,
                                     _floor_id(k, conv))
                        for k, (p, h) in pairs for conv in CONVENTIONS], ignore_index=True)
    measures = list(model.measures)
    first_rows = pd.concat([rows, floors], ignore_index=True)
    first = model.score(first_rows, peer_profile=_peer_profile(drivers, firm_id, year, model,
                                                               measures[0], len(first_rows)))
    first = first[first["fiscal_year"] == year]
    kept = [first[(first["measure"] == measures[0])
                  & first["firm_id"].astype(str).str.startswith("scenario-")]]
    problems, held, start = _problems(model, proformas, first)
    search = CapacitySearch(problems, start=start)
    for measure in measures[1:]:
        items = [] if search.done else search.pending()
        batch = pd.concat([rows, capacity_rows(items, held)], ignore_index=True)
        scored = model.score(batch, peer_profile=_peer_profile(drivers, firm_id, year, model,
                                                               measure, len(batch)))
        if items:
            search.feed(read_levels(scored, items))
        kept.append(scored[(scored["measure"] == measure) & (scored["fiscal_year"] == year)
                           & scored["firm_id"].astype(str).str.startswith("scenario-")])
    levels = batch_levels(model, held)
    while not search.done:
        search.feed(levels(search.pending()))
    return pd.concat(kept, ignore_index=True), _collect(problems, search.results())


def _assemble(model: Any, labels: list[str], proformas: list[ProForma],
              histories: list[pd.DataFrame], scored: pd.DataFrame,
              caps: dict[tuple[int, str], tuple[dict[str, float], list[str]]],
              peer_median: dict[str, float]) -> tuple[pd.DataFrame, pd.DataFrame,
                                                      pd.DataFrame]:
    """The ``proforma.csv`` rows, the contributions and the trade-off grids."""
    table, contributions, tradeoff = [], [], []
    for k, (label, p, hist) in enumerate(zip(labels, proformas, histories, strict=True)):
        assets, note = asset_value(p.after, p.scenario, hist["fiscal_year"].tolist(),
                                   (hist["total_debt"] + hist["market_equity"]).tolist())
        for r in scored[scored["firm_id"] == _scenario_id(k)].to_dict("records"):
            measure = str(r["measure"])
            if not math.isfinite(float(r["actual"])):
                continue  # no market value: the measure is not defined (as in analyze)
            cap, cap_flags = caps.get((k, measure), (dict.fromkeys(CAPACITY_COLUMNS,
                                                                   math.nan), []))
            top_debt = p.after.total_debt + cap["capacity_to_band_top_recap"]
            trade = grid(p.scenario, assets, top_debt) if math.isfinite(top_debt) else None
            table.append(_row(label, measure, p, r, cap, cap_flags, assets, note, trade,
                              peer_median.get(measure, math.nan)))
            contributions.append(_contributions(label, measure, r, model.drivers))
            if trade is not None:
                tradeoff.append(pd.DataFrame({
                    "scenario": label, "measure": measure, "debt": trade.debt,
                    "tax_shield": trade.tax_shield,
                    "default_probability": trade.default_probability,
                    "distress_cost": trade.distress_cost, "net": trade.net}))
    grid_columns = ["scenario", "measure", "debt", "tax_shield", "default_probability",
                    "distress_cost", "net"]
    return (pd.DataFrame(table, columns=list(PROFORMA_COLUMNS)),
            pd.concat(contributions, ignore_index=True),
            pd.concat(tradeoff, ignore_index=True) if tradeoff else
            pd.DataFrame(columns=grid_columns))


def _check_names(scenarios: tuple[Scenario, ...]) -> None:
    seen: set[str] = set()
    for s in scenarios:
        check_name_free(s)
        key = s.name.strip().casefold()
        if key in seen:
            raise ConfigError(f"{s.where()}: key name must be unique; got {s.name!r} again.")
        seen.add(key)


def _common_assumptions(scenarios: tuple[Scenario, ...]) -> Scenario:
    """The firm as it is, with the assumptions every scenario shares."""
    shared = {}
    for key in ASSUMPTIONS:
        values = {getattr(s, key) for s in scenarios}
        if len(values) == 1:
            shared[key] = values.pop()
    return Scenario(name="as is", source=scenarios[0].source if scenarios else "<memory>",
                    **{k: v for k, v in shared.items() if v is not None})


def _partner(panel: pd.DataFrame, s: Scenario, year: int) -> Statement | None:
    if s.merge_with is None:
        return None
    rows = panel[(panel["firm_id"].astype(str) == s.merge_with) & (panel["fiscal_year"] <= year)]
    if rows.empty:
        return None
    return Statement.from_row(rows.sort_values("fiscal_year").iloc[-1].to_dict())


def _history(panel: pd.DataFrame, firm_id: str, year: int, p: ProForma) -> pd.DataFrame:
    """The firm's rows of earlier years and its year as it is (each combined with the other
    firm's row of the same year for a merger, as if they had always been one firm)."""
    rows = panel[(panel["firm_id"].astype(str) == str(firm_id))
                 & (panel["fiscal_year"] < year) & (panel["fiscal_year"] >= year - 9)]
    out = [Statement.from_row(r) for r in rows.sort_values("fiscal_year").to_dict("records")]
    out.append(p.before)
    merge = p.scenario.merge_with
    if merge is not None and p.partner is not None:
        other = {int(r["fiscal_year"]): Statement.from_row(r) for r in
                 panel[panel["firm_id"].astype(str) == merge].to_dict("records")}
        other[year] = p.partner
        combined = Scenario(name="history", merge_with=merge)
        out = [apply_scenario(s, combined, other[s.fiscal_year]).after for s in out
               if s.fiscal_year in other]
    return pd.DataFrame([s.row() for s in out])


def _scenario_id(k: int) -> str:
    return f"scenario-{k}"


def _floor_id(k: int, convention: str) -> str:
    return f"floor-{k}-{convention}"


def _score_input(s: Statement, history: pd.DataFrame, firm: str) -> pd.DataFrame:
    # the history (for earnings volatility) and the statement's row, under an id of its own
    rows = pd.concat([history.iloc[:-1], pd.DataFrame([s.row()])], ignore_index=True)
    rows["firm_id"] = firm
    return rows


def _peer_profile(drivers: pd.DataFrame, firm_id: str, year: int, model: Any,
                  measure: str, n: int) -> pd.DataFrame | None:
    """The firm's own peer profile of one measure (``drivers.csv``), for ``n`` input rows."""
    d = drivers[(drivers["firm_id"].astype(str) == str(firm_id))
                & (drivers["fiscal_year"] == year) & (drivers["measure"] == measure)]
    values = d.set_index("driver")["peer_value"]
    if values.empty:
        return None
    return pd.DataFrame({c: np.full(n, float(values.get(c, np.nan))) for c in model.drivers})


def _problems(model: Any, proformas: list[ProForma], first: pd.DataFrame
              ) -> tuple[list[Problem], dict[int, dict[str, float]], list[tuple[float, float]]]:
    """Capacity to the target and to the band's top, both conventions, every scenario and
    measure: the questions, the drivers each scenario holds, and the levels at 0 and -D."""
    problems, held, start = [], {}, []
    at = {(str(r["firm_id"]), str(r["measure"])): r for r in first.to_dict("records")}
    for k, p in enumerate(proformas):
        rows = first[first["firm_id"] == _scenario_id(k)]
        if rows.empty:
            continue
        one = rows.iloc[0]
        held[k] = {d: float(one[f"{d}_raw"]) for d in HELD_DRIVERS if d in model.drivers}
        for measure in rows["measure"].astype(str):
            if measure == "market" and math.isnan(p.after.market_equity):
                continue
            for column in ("target", "band_high"):
                for conv in CONVENTIONS:
                    problems.append(Problem(p.after, measure, conv, (k, column)))
                    start.append((float(at[(_scenario_id(k), measure)][column]),
                                  float(at[(_floor_id(k, conv), measure)][column])))
    return problems, held, start


def _collect(problems: list[Problem], answers: list[Capacity]
             ) -> dict[tuple[int, str], tuple[dict[str, float], list[str]]]:
    out: dict[tuple[int, str], tuple[dict[str, float], list[str]]] = {}
    for prob, cap in zip(problems, answers, strict=True):
        k, column = prob.key
        values, flags = out.setdefault((k, prob.measure), ({}, []))
        goal = "target" if column == "target" else "band_top"
        name = f"capacity_to_{goal}_{prob.convention}"
        values[name] = cap.amount
        if cap.flag:
            flags.append(f"{name}:{cap.flag}")
    return out


def _row(label: str, measure: str, p: ProForma, r: dict[str, Any], caps: dict[str, float],
         cap_flags: list[str], assets: Any, asset_note: str, trade: Any,
         peer_median: float) -> dict[str, Any]:
    after = p.after
    ratios = credit_ratios(after, p.missing)
    z = altman(after, p.missing)
    d = distress_at(after, p.scenario, assets, asset_note)
    notes = [f"{k.replace('_', ' ')}: {v.note}" for k, v in ratios.items() if v.note]
    notes += [f"altman {z.model}: {z.note}"] if z.note else []
    notes += list(d.notes)
    flags = [f for f in str(r.get("flags") or "").split(";") if f]
    flags += list(p.flags) + list(d.flags)
    if trade is not None and math.isfinite(trade.best_debt) and \
            trade.best_debt >= 0.999 * float(trade.debt[-1]):
        flags.append("tradeoff_best_at_grid_end")
    flags += cap_flags
    out: dict[str, Any] = {"scenario": label, "measure": measure, "firm_id": after.firm_id,
                           "fiscal_year": after.fiscal_year, **after.lines()}
    for c in ("actual", "target", "band_low", "band_high", "status", "gap", "gap_z",
              "peer_target"):
        out[c] = r[c]
    out["peer_median"] = peer_median
    out.update({c: caps[c] for c in CAPACITY_COLUMNS})
    out.update({k: v.value for k, v in ratios.items()})
    out.update(altman_model=z.model, altman_score=z.score, altman_zone=z.zone)
    out.update(
        asset_value=assets.value if assets else math.nan,
        asset_volatility=assets.volatility if assets else math.nan,
        asset_volatility_source=assets.source if assets else "",
        distance_to_default=d.distance_to_default, default_probability=d.default_probability,
        tax_shield_pv=d.tax_shield_pv, expected_distress_cost=d.expected_distress_cost,
        tradeoff_best_debt=trade.best_debt if trade is not None else math.nan,
        tradeoff_best_net=trade.best_net if trade is not None else math.nan,
        flags=";".join(dict.fromkeys(flags)), notes="; ".join(notes))
    return out


def _contributions(label: str, measure: str, r: dict[str, Any],
                   names: Sequence[str]) -> pd.DataFrame:
    return pd.DataFrame({
        "scenario": label, "measure": measure, "driver": list(names),
        "value": [r[d] for d in names], "raw_value": [r.get(f"{d}_raw", r[d]) for d in names],
        "peer_value": [r[f"{d}_peer"] for d in names],
        "contribution": [r[f"{d}_contribution"] for d in names],
    })


def _peers(targets: pd.DataFrame, firm_id: str, industry: str, year: int) -> pd.DataFrame:
    t = targets[(targets["industry"].astype(str) == industry) & (targets["fiscal_year"] == year)
                & (targets["firm_id"].astype(str) != str(firm_id))]
    cols = [c for c in ("measure", "firm_id", "firm_name", "actual", "target", "status")
            if c in t.columns]
    return t[cols].sort_values(["measure", "firm_id"], ignore_index=True)


def _assumptions(model: Any, scenarios: list[Scenario], labels: list[str]) -> dict[str, Any]:
    return {
        "model": {"name": str(getattr(model, "model", "")), "fit": "full sample",
                  "run_id": str(getattr(model, "run_id", None) or ""),
                  "drivers": list(model.drivers)},
        "conventions": dict(CONVENTIONS),
        "horizon_years": 1.0,
        "debt_due_at_horizon": "all interest-bearing debt",
        "scenarios": {label: {k: getattr(s, k) for k in ASSUMPTIONS}
                      for label, s in zip(labels, scenarios, strict=True)},
    }
