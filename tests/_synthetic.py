"""Simulated panels with a known truth, for the model, band and pooling tests.

Book leverage is linear in three drivers plus industry, year and firm effects and noise:

    book = 0.06 + 0.25 tangibility - 0.40 profitability + 0.02 size
           + industry effect + year effect + spread_g * (firm effect + noise),

with ``spread_g`` an industry's own residual scale, so that the residual spread can differ
across industries. ``true_target`` is the leverage without firm effect and noise: what a
perfect peer model would set as the firm's target.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

TRUTH = {"tangibility": 0.25, "profitability": -0.40, "size": 0.02}


def panel(
    seed: int,
    *,
    industries: int = 16,
    firms: tuple[int, int] = (12, 24),
    years: int = 10,
    spread: tuple[float, float] = (1.0, 1.0),
    small: tuple[tuple[str, int, float], ...] = (),
    firm_sd: float = 0.03,
    noise_sd: float = 0.025,
) -> pd.DataFrame:
    """A panel in schema v1 with ``true_target`` and ``spread`` columns.

    Parameters
    ----------
    spread : (low, high)
        Residual scales of the industries, spaced evenly on a log scale between the two.
    small : tuple of (code, firms, own offset)
        Small industries planted beside the regular ones; their code shares its first three
        digits with a regular industry (``"5001"`` sits under ``"500x"``).
    """
    rng = np.random.default_rng(seed)
    spreads = np.exp(np.linspace(np.log(spread[0]), np.log(spread[1]), industries))
    rng.shuffle(spreads)
    year_fx = rng.normal(0, 0.01, years)
    specs = [(f"{5000 + 10 * i}", int(rng.integers(firms[0], firms[1] + 1)),
              float(rng.normal(0, 0.04)), float(spreads[i])) for i in range(industries)]
    parent_fx = {code[:3]: fx for code, _, fx, _ in specs}
    for code, n, offset in small:
        specs.append((code, n, parent_fx.get(code[:3], 0.0) + offset, 1.0))
    rows = []
    for code, n_firms, fx, s in specs:
        for f in range(n_firms):
            tang_f, prof_f = rng.uniform(0.1, 0.7), rng.normal(0.12, 0.04)
            size_f = rng.normal(6, 1.2)
            fe = rng.normal(0, firm_sd)
            for t in range(years):
                tang = float(np.clip(tang_f + rng.normal(0, 0.03), 0.01, 0.95))
                prof = prof_f + rng.normal(0, 0.03)
                size = size_f + 0.02 * t
                target = (0.06 + TRUTH["tangibility"] * tang + TRUTH["profitability"] * prof
                          + TRUTH["size"] * size + fx + year_fx[t])
                lev = float(np.clip(target + s * (fe + rng.normal(0, noise_sd)), 0.0, 0.9))
                assets = float(np.exp(size))
                rows.append({
                    "firm_id": f"{code}-{f:03d}", "fiscal_year": 2010 + t, "industry": code,
                    "total_assets": assets, "total_debt": lev * assets,
                    "ppe_net": tang * assets, "ebitda": prof * assets,
                    "book_equity": 0.45 * assets,
                    "market_equity": assets * float(rng.uniform(0.4, 2.5)),
                    "true_target": target, "spread": s,
                })
    return pd.DataFrame(rows)


def adjusting_panel(
    seed: int,
    speed: float,
    *,
    industries: int = 16,
    firms_per_industry: int = 25,
    years: int = 12,
    offset_sd: float = 0.06,
    noise_sd: float = 0.03,
) -> pd.DataFrame:
    """A panel in schema v1 whose book leverage closes the share ``speed`` of its gap a year.

    Each firm's target is ``0.05 + 0.30 tangibility - 0.40 profitability`` plus its
    industry's and its year's effects; the firm aims at its target plus an offset of its own
    (a firm effect, drawn with sd ``offset_sd``), and each year moves ``speed`` of the way
    there plus noise (sd ``noise_sd``):

        L(t) = (1 - speed) L(t-1) + speed (target(t) + offset) + e(t),

    starting from the stationary distribution around target plus offset. ``true_target``
    holds the target without the offset (what a peer model can learn).
    """
    rng = np.random.default_rng(seed)
    year_fx = rng.normal(0, 0.01, years)
    rows = []
    for g in range(industries):
        code = f"{3000 + 10 * g}"
        fx = float(rng.normal(0, 0.04))
        for f in range(firms_per_industry):
            tang_f, prof_f = rng.uniform(0.1, 0.7), rng.normal(0.12, 0.04)
            size_f = rng.normal(6, 1.0)
            offset = rng.normal(0, offset_sd)
            lev = None
            for t in range(years):
                tang = float(np.clip(tang_f + rng.normal(0, 0.03), 0.01, 0.95))
                prof = float(prof_f + rng.normal(0, 0.02))
                target = 0.05 + 0.30 * tang - 0.40 * prof + fx + year_fx[t]
                if lev is None:
                    lev = (target + offset
                           + rng.normal(0, noise_sd / np.sqrt(1 - (1 - speed) ** 2)))
                else:
                    lev = ((1 - speed) * lev + speed * (target + offset)
                           + rng.normal(0, noise_sd))
                assets = float(np.exp(size_f + 0.03 * t))
                book = float(np.clip(lev, 0.0, 0.95))
                rows.append({
                    "firm_id": f"{code}-{f:03d}", "fiscal_year": 2008 + t, "industry": code,
                    "total_assets": assets, "total_debt": book * assets,
                    "ppe_net": tang * assets, "ebitda": prof * assets,
                    "book_equity": 0.4 * assets,
                    "market_equity": assets * float(rng.uniform(0.5, 2.0)),
                    "true_target": target,
                })
    return pd.DataFrame(rows)
