"""The invented demo panel: the listed companies of the Tarrow Reach, a fictional coastal region.

Nothing here describes real companies or real data. Firms, names, industries and numbers are
made up by a seeded random generator so that the truth behind them is known:

Book leverage follows a linear target model on the drivers levgap computes,

    book = 0.10 + 0.30 tangibility - 0.55 profitability - 0.80 earnings_volatility
           + 0.025 size - 0.02 market_to_book + industry effect + year effect
           + firm effect (sd 0.04) + noise (sd 0.035),

with ``earnings_volatility`` and ``market_to_book`` computed exactly as DESIGN.md defines
them (trailing window of up to five years, at least three observations, industry-year median
otherwise). Market leverage is implied by the same debt and an exogenous market-to-book, so it
has no linear truth of its own; its drivers should carry the signs the literature reports.

The scenario: 400 firms in 14 industries over fiscal years 2014-2023 (firms enter over time),
two industries with fewer than five firms (code ``3716`` borrows from the ``371*`` group,
``9990`` from the whole sample), firms that carry no debt by policy, privately held firms
without a market value, and eight firms whose final-year debt was moved by a planted shock
(see :func:`planted_shocks`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

TRUE_COEFFICIENTS: dict[str, float] = {
    "tangibility": 0.30,
    "profitability": -0.55,
    "earnings_volatility": -0.80,
    "size": 0.025,
    "market_to_book": -0.02,
}
INTERCEPT = 0.10
FIRM_EFFECT_SD = 0.04
NOISE_SD = 0.035
SHOCK_SIZE = 0.22
FIRST_YEAR, LAST_YEAR = 2014, 2023

# code, label, firms, tangibility mean, profitability mean, industry effect
INDUSTRIES: tuple[tuple[str, str, int, float, float, float], ...] = (
    ("1311", "Basin gas wells", 34, 0.62, 0.16, 0.03),
    ("2011", "Salt-meat packers", 30, 0.38, 0.11, 0.00),
    ("2421", "Timber mills", 32, 0.55, 0.12, 0.02),
    ("2834", "Kelp-extract remedies", 34, 0.18, 0.15, -0.04),
    ("3312", "Ironworks", 30, 0.50, 0.10, 0.04),
    ("3711", "Cart and wagon builders", 33, 0.35, 0.10, 0.01),
    ("3716", "Tide-tractor builders", 3, 0.33, 0.09, 0.01),
    ("4412", "Coastal shipping", 32, 0.70, 0.12, 0.06),
    ("4911", "Tidal power", 30, 0.78, 0.13, 0.08),
    ("5411", "Market halls", 34, 0.40, 0.09, -0.01),
    ("7372", "Ledger software", 36, 0.08, 0.17, -0.06),
    ("7011", "Harbour inns", 31, 0.65, 0.12, 0.03),
    ("8062", "Infirmaries", 37, 0.52, 0.11, 0.02),
    ("9990", "Lighthouse keepers' guilds", 4, 0.45, 0.10, 0.00),
)

_FIRST = ("Ard", "Bel", "Cor", "Dun", "Esk", "Fal", "Gor", "Hal", "Isk", "Jor", "Kel", "Lor",
          "Mor", "Nes", "Orr", "Pel", "Quen", "Ros", "Sel", "Tor", "Ulv", "Ves", "Wyn", "Yar")
_SECOND = ("brook", "cairn", "dale", "fen", "gate", "holm", "keld", "ley", "mere", "ness",
           "rigg", "shaw", "thwaite", "wick")


_SUFFIX = {
    "1311": "Gasfields", "2011": "Provisions", "2421": "Sawmills", "2834": "Remedies",
    "3312": "Ironworks", "3711": "Wagonwrights", "3716": "Tractor Co", "4412": "Shipping",
    "4911": "Tidal Power", "5411": "Market Halls", "7372": "Ledgerworks", "7011": "Inns",
    "8062": "Infirmary", "9990": "Lamp Guild",
}


def planted_shocks(seed: int = 7) -> pd.DataFrame:
    """The firm-years whose debt was moved away from target, and in which direction.

    Returns
    -------
    pandas.DataFrame
        ``firm_id, fiscal_year, direction`` (``over`` or ``under``), eight rows.
    """
    firms = _firm_table(seed)
    rng = np.random.default_rng(seed + 1)
    big = firms[firms["industry"].map(lambda c: _industry(c)[2] >= 5)]
    pick = rng.choice(big.index.to_numpy(), size=8, replace=False)
    rows = []
    for i, idx in enumerate(sorted(pick)):
        rows.append({"firm_id": firms.loc[idx, "firm_id"], "fiscal_year": LAST_YEAR,
                     "direction": "over" if i % 2 == 0 else "under"})
    return pd.DataFrame(rows)


def demo_panel(seed: int = 7) -> pd.DataFrame:
    """The demo panel (:func:`make_panel`), as the public API names it (``levgap.demo_panel``)."""
    return make_panel(seed)


def industry_names() -> pd.DataFrame:
    """The demo's own names of its industries (``code, name``), for ``[input]
    industry_names``: the Tarrow Reach's trades, not the SIC titles of the codes."""
    return pd.DataFrame({"code": [c for c, *_ in INDUSTRIES],
                         "name": [label for _, label, *_ in INDUSTRIES]})


def make_panel(seed: int = 7) -> pd.DataFrame:
    """Invent the Tarrow Reach panel in schema v1 (money in millions).

    Parameters
    ----------
    seed : int, default=7
        Seed of every random draw; the same seed gives the same panel.

    Returns
    -------
    pandas.DataFrame
        One row per firm and fiscal year, schema-v1 columns.
    """
    rng = np.random.default_rng(seed)
    firms = _firm_table(seed)
    year_effect = {y: 0.01 * np.sin(0.7 * (y - FIRST_YEAR)) for y in range(FIRST_YEAR,
                                                                             LAST_YEAR + 1)}
    rows = []
    for f in firms.itertuples():
        _, _, _, tang_mu, prof_mu, _ = _industry(f.industry)
        tang = np.clip(tang_mu + 0.10 * rng.standard_normal(), 0.02, 0.95)
        prof_level = prof_mu + 0.03 * rng.standard_normal()
        prof_sd = rng.uniform(0.01, 0.07)
        size0 = rng.normal(6.0, 1.1)
        mtb_level = 0.9 + rng.lognormal(-0.3, 0.5)
        other = rng.uniform(0.12, 0.28)
        for t, year in enumerate(range(f.entry, LAST_YEAR + 1)):
            rows.append(
                {
                    "firm_id": f.firm_id,
                    "firm_name": f.firm_name,
                    "fiscal_year": year,
                    "industry": f.industry,
                    "tangibility": np.clip(tang + 0.02 * rng.standard_normal(), 0.01, 0.97),
                    "profitability": prof_level + prof_sd * rng.standard_normal(),
                    "size": size0 + 0.04 * t + 0.05 * rng.standard_normal(),
                    "market_to_book": mtb_level * np.exp(0.1 * rng.standard_normal()),
                    "other_liab": other,
                    "firm_effect": f.firm_effect,
                    "private": f.private,
                    "no_debt": f.no_debt,
                }
            )
    p = pd.DataFrame(rows)
    p = p.sort_values(["firm_id", "fiscal_year"], ignore_index=True)
    p["earnings_volatility"] = _volatility(p)
    book = (
        INTERCEPT
        + sum(coef * p[name] for name, coef in TRUE_COEFFICIENTS.items())
        + p["industry"].map(lambda c: _industry(c)[5])
        + p["fiscal_year"].map(year_effect)
        + p["firm_effect"]
        + NOISE_SD * rng.standard_normal(len(p))
    )
    shocks = planted_shocks(seed)
    for s in shocks.itertuples():
        at = (p["firm_id"] == s.firm_id) & (p["fiscal_year"] == s.fiscal_year)
        book[at] = book[at] + (SHOCK_SIZE if s.direction == "over" else -SHOCK_SIZE)
    book = book.clip(0.0, 0.9)
    book[p["no_debt"]] = 0.0
    assets = np.exp(p["size"])
    debt = book * assets
    equity = assets * (1.0 - book - p["other_liab"])
    market_equity = (assets * (p["market_to_book"] - 1.0) + equity).clip(lower=0.5)
    ebitda = p["profitability"] * assets
    revenue = assets * rng.uniform(0.5, 1.6, len(p))
    out = pd.DataFrame(
        {
            "firm_id": p["firm_id"],
            "firm_name": p["firm_name"],
            "fiscal_year": p["fiscal_year"].astype("int64"),
            "industry": p["industry"],
            "total_assets": assets.round(3),
            "total_debt": debt.round(3),
            "ppe_net": (p["tangibility"] * assets).round(3),
            "ebitda": ebitda.round(3),
            "book_equity": equity.round(3),
            "market_equity": market_equity.where(~p["private"]).round(3),
            "revenue": revenue.round(3),
            "cash": (assets * rng.uniform(0.02, 0.15, len(p))).round(3),
            "interest_expense": (debt * rng.uniform(0.03, 0.07, len(p))).round(3),
            "currency": "EUR",
        }
    )
    return _statement_items(out, p["other_liab"].to_numpy(), seed)


def _statement_items(out: pd.DataFrame, other_liab: np.ndarray, seed: int) -> pd.DataFrame:
    """Optional statement items for the credit and distress checks (Altman Z and Z'').

    Drawn from a random stream of their own, so the columns above keep their values whatever
    is added here. Total liabilities close the balance sheet (assets minus equity); current
    assets are cash plus receivables and stock, never more than the assets that are not PP&E;
    current liabilities are part of the other liabilities plus the current portion of debt;
    retained earnings are part of book equity; EBIT is EBITDA less depreciation of PP&E.
    """
    rng = np.random.default_rng(seed + 5000)
    n = len(out)
    assets, equity = out["total_assets"].to_numpy(), out["book_equity"].to_numpy()
    ppe, cash = out["ppe_net"].to_numpy(), out["cash"].to_numpy()
    current = np.minimum(cash + assets * rng.uniform(0.10, 0.30, n), assets - ppe)
    out["current_assets"] = np.maximum(current, cash).round(3)
    out["current_liabilities"] = (assets * other_liab * rng.uniform(0.4, 0.8, n)
                                  + out["total_debt"].to_numpy() * rng.uniform(0.05, 0.25, n)
                                  ).round(3)
    out["total_liabilities"] = (assets - equity).round(3)
    out["retained_earnings"] = (equity * rng.uniform(0.3, 0.9, n)).round(3)
    out["ebit"] = (out["ebitda"].to_numpy() - ppe * rng.uniform(0.05, 0.10, n)).round(3)
    return out


def _industry(code: str) -> tuple[str, str, int, float, float, float]:
    return next(i for i in INDUSTRIES if i[0] == code)


def _firm_table(seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed + 1000)
    rows = []
    used: set[str] = set()
    n = 0
    for code, _label, count, *_ in INDUSTRIES:
        for _ in range(count):
            n += 1
            while True:
                name = f"{rng.choice(_FIRST)}{rng.choice(_SECOND)} {_SUFFIX[code]}"
                if name not in used:
                    used.add(name)
                    break
            rows.append(
                {
                    "firm_id": f"TR{n:04d}",
                    "firm_name": name,
                    "industry": code,
                    "entry": int(FIRST_YEAR + (rng.integers(0, 4) if rng.random() < 0.3 else 0)),
                    "firm_effect": FIRM_EFFECT_SD * rng.standard_normal(),
                    "private": bool(rng.random() < 0.07),
                    "no_debt": bool(rng.random() < 0.03),
                }
            )
    return pd.DataFrame(rows)


def _volatility(p: pd.DataFrame) -> pd.Series:
    """Trailing five-year sd of profitability (min 3), else the industry-year median.

    Written independently of ``levgap.features`` (a rolling window over consecutive years) so
    that the demo's truth does not lean on the code it is used to test.
    """
    sd = (
        p.groupby("firm_id")["profitability"]
        .rolling(5, min_periods=3)
        .std(ddof=1)
        .reset_index(level=0, drop=True)
        .sort_index()
    )
    med = sd.groupby([p["industry"], p["fiscal_year"]]).transform("median")
    med = med.fillna(sd.groupby(p["fiscal_year"]).transform("median"))
    return sd.fillna(med).fillna(sd.median())
