"""Deterministic synthetic schema-v1 panels for the benchmark.

Every panel is invented: firm identifiers, names and industry codes are made up, and the
numbers come from a stated data-generating process (below), so that a run can be repeated
bit for bit on any machine. Panels are written as CSV and Parquet under ``benchmark/data/``
(git-ignored) and reused when a file with the same parameters already exists.

Data-generating process, per firm ``f`` in industry ``i`` and fiscal year ``t``::

    size        = log total_assets = m_f + 0.03 t + N(0, 0.15)
    tangibility = clip(tau_i + u_f + N(0, 0.03), 0, 0.98)
    profit.     = pi_i + v_f + y_t + s_f N(0, 1)         (s_f: firm-specific volatility)
    book lev.   = clip(lam_i + eta_t + 0.25 tang - 0.60 profit + 0.02 (size - 6)
                       - 0.03 (m2b - 1.5) + w_f + N(0, 0.05), 0, 0.9)

with 5% of firms carrying no debt at all and, by default, 4% of firms without a market
value (private firms). Firms enter and leave: 60% span every year, the rest a random
stretch, so short histories (imputed earnings volatility) occur at every size.
"""

from __future__ import annotations

import argparse
import json
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

DATA_DIR = Path(__file__).resolve().parent / "data"
DGP_VERSION = 2  # part of the file names: bump when the generator changes


@dataclass(frozen=True, slots=True)
class SynthSpec:
    """Shape and seed of one synthetic panel.

    Parameters
    ----------
    rows : int
        Firm-years in the panel (exact).
    industries : int, default=70
        Number of industry codes (4-digit, SIC-like, invented).
    years : int, default=20
        Number of fiscal years, ending at ``last_year``.
    seed : int, default=20260
        Seed of the generator.
    last_year : int, default=2024
        Last fiscal year.
    no_market_share : float, default=0.04
        Share of firms without a market value.
    id_prefix : str, default="SYN"
        Prefix of the invented firm identifiers.
    order : {"firm", "year"}, default="firm"
        Row order of the file: by firm then year, or by year with firms shuffled.
    """

    rows: int
    industries: int = 70
    years: int = 20
    seed: int = 20260
    last_year: int = 2024
    no_market_share: float = 0.04
    id_prefix: str = "SYN"
    order: str = "firm"

    @property
    def stem(self) -> str:
        return (
            f"panel{DGP_VERSION}-{self.rows}-i{self.industries}-y{self.years}-s{self.seed}"
            f"-m{round(self.no_market_share * 1000)}-{self.id_prefix.lower()}-{self.order}"
        )


def parse_size(text: str) -> int:
    """``"10k"`` -> 10000, ``"1m"`` -> 1000000, ``"2500"`` -> 2500."""
    t = text.strip().lower()
    mult = {"k": 1_000, "m": 1_000_000}.get(t[-1:], 1)
    num = t[:-1] if t[-1:] in ("k", "m") else t
    return int(float(num) * mult)


def make_table(spec: SynthSpec) -> pa.Table:
    """Build the panel in memory as an Arrow table (deterministic in ``spec``)."""
    rng = np.random.default_rng(spec.seed)
    n_ind, n_yr = spec.industries, spec.years

    codes = np.sort(rng.choice(np.arange(1000, 9000), size=n_ind, replace=False))
    industry_labels = np.array([f"{c:04d}" for c in codes], dtype=object)
    weights = 0.5 / n_ind + 0.5 * rng.dirichlet(np.full(n_ind, 2.0))
    weights = weights / weights.sum()
    tau = rng.uniform(0.05, 0.6, n_ind)
    pi = rng.normal(0.10, 0.03, n_ind)
    lam = rng.normal(0.25, 0.06, n_ind)
    eta = rng.normal(0.0, 0.02, n_yr)
    ybar = rng.normal(0.0, 0.01, n_yr)

    # Firm spans: 60% cover every year, the rest a random stretch; add firms until the
    # panel has at least `rows` firm-years, then cut the last firm's span.
    lengths: list[np.ndarray] = []
    total = 0
    while total < spec.rows:
        batch = max(64, (spec.rows - total) // 12)
        full = rng.random(batch) < 0.6
        ln = np.where(full, n_yr, rng.integers(1, n_yr + 1, batch))
        lengths.append(ln)
        total += int(ln.sum())
    length = np.concatenate(lengths)
    cum = np.cumsum(length)
    n_firms = int(np.searchsorted(cum, spec.rows) + 1)
    length = length[:n_firms].copy()
    length[-1] -= int(cum[n_firms - 1] - spec.rows)
    start = (rng.random(n_firms) * (n_yr - length + 1)).astype(np.int64)

    firm = np.repeat(np.arange(n_firms), length)
    offset = np.arange(spec.rows) - np.repeat(np.cumsum(length) - length, length)
    t = np.repeat(start, length) + offset  # year index 0..n_yr-1
    n = spec.rows

    ind_f = rng.choice(n_ind, size=n_firms, p=weights)
    m_f = rng.normal(6.0, 1.5, n_firms)
    u_f = rng.normal(0.0, 0.10, n_firms)
    v_f = rng.normal(0.0, 0.05, n_firms)
    s_f = rng.uniform(0.01, 0.08, n_firms)
    w_f = rng.normal(0.0, 0.08, n_firms)
    mk_f = rng.normal(np.log(0.8), 0.5, n_firms)
    zero_debt = rng.random(n_firms) < 0.05
    private = rng.random(n_firms) < spec.no_market_share
    other_liab = rng.uniform(0.10, 0.35, n_firms)

    ind = ind_f[firm]
    size = m_f[firm] + 0.03 * t + rng.normal(0.0, 0.15, n)
    assets = np.exp(size)
    tang = np.clip(tau[ind] + u_f[firm] + rng.normal(0.0, 0.03, n), 0.0, 0.98)
    prof = pi[ind] + v_f[firm] + ybar[t] + s_f[firm] * rng.standard_normal(n)
    mcap_ratio = np.exp(mk_f[firm] + rng.normal(0.0, 0.2, n))
    lev = np.clip(
        lam[ind] + eta[t] + 0.25 * tang - 0.60 * prof + 0.02 * (size - 6.0)
        + w_f[firm] + rng.normal(0.0, 0.05, n),
        0.0, 0.9,
    )
    book_eq = assets * (1.0 - lev - other_liab[firm])
    mkt_eq = assets * mcap_ratio
    m2b = (assets - book_eq + mkt_eq) / assets
    lev = np.clip(lev - 0.03 * (m2b - 1.5), 0.0, 0.9)
    lev[zero_debt[firm]] = 0.0
    debt = assets * lev
    book_eq = assets * (1.0 - lev - other_liab[firm])

    r3 = lambda a: np.round(a, 3)  # noqa: E731 - money to three decimals, as filings print
    mkt = r3(mkt_eq)
    mkt_col = pa.array(mkt, mask=private[firm])
    width = max(6, len(str(n_firms)))
    ids = np.array([f"{spec.id_prefix}{k:0{width}d}" for k in range(n_firms)], dtype=object)
    names = np.array([f"Synthetic Firm {k:0{width}d}" for k in range(n_firms)], dtype=object)
    first_year = spec.last_year - n_yr + 1
    firm_id = pa.DictionaryArray.from_arrays(pa.array(firm, pa.int32()), pa.array(ids))
    firm_name = pa.DictionaryArray.from_arrays(pa.array(firm, pa.int32()), pa.array(names))
    industry = pa.DictionaryArray.from_arrays(pa.array(ind, pa.int32()), pa.array(industry_labels))
    table = pa.table(
        {
            "firm_id": firm_id.cast(pa.string()),
            "fiscal_year": pa.array((first_year + t).astype(np.int64)),
            "industry": industry.cast(pa.string()),
            "total_assets": pa.array(r3(assets)),
            "total_debt": pa.array(r3(debt)),
            "ppe_net": pa.array(r3(assets * tang)),
            "ebitda": pa.array(r3(assets * prof)),
            "book_equity": pa.array(r3(book_eq)),
            "firm_name": firm_name.cast(pa.string()),
            "market_equity": mkt_col,
        }
    )
    if spec.order == "year":
        shuffled = rng.permutation(n_firms)[firm]
        table = table.take(pa.array(np.lexsort((shuffled, t))))
    return table


def ensure_panel(spec: SynthSpec, data_dir: Path = DATA_DIR) -> dict[str, Path]:
    """Write ``<stem>.csv`` and ``<stem>.parquet`` unless they exist; return their paths."""
    data_dir.mkdir(parents=True, exist_ok=True)
    paths = {
        "csv": data_dir / f"{spec.stem}.csv",
        "parquet": data_dir / f"{spec.stem}.parquet",
    }
    meta = data_dir / f"{spec.stem}.json"
    if all(p.exists() for p in paths.values()) and meta.exists():
        if json.loads(meta.read_text()) == asdict(spec):
            return paths
    table = make_table(spec)
    tmp_csv = paths["csv"].with_suffix(".csv.tmp")
    tmp_pq = paths["parquet"].with_suffix(".parquet.tmp")
    pacsv.write_csv(table, tmp_csv)
    pq.write_table(table, tmp_pq)
    tmp_csv.replace(paths["csv"])
    tmp_pq.replace(paths["parquet"])
    meta.write_text(json.dumps(asdict(spec)))
    return paths


def main() -> None:
    ap = argparse.ArgumentParser(description="Write a synthetic schema-v1 panel.")
    ap.add_argument("rows", help="firm-years, e.g. 10k, 100k, 1m")
    ap.add_argument("--industries", type=int, default=70)
    ap.add_argument("--years", type=int, default=20)
    ap.add_argument("--seed", type=int, default=20260)
    ap.add_argument("--data-dir", type=Path, default=DATA_DIR)
    a = ap.parse_args()
    spec = SynthSpec(parse_size(a.rows), a.industries, a.years, a.seed)
    for kind, path in ensure_panel(spec, a.data_dir).items():
        print(f"{kind}: {path}")


if __name__ == "__main__":
    main()
