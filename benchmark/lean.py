"""The yardstick: a lean end-to-end implementation of levgap's job, in numpy, scipy and pyarrow.

It does what ``levgap analyze`` does, without levgap's code, the way a careful engineer would
write it for one purpose: read with pyarrow; drop invalid rows into a ledger; build the
measures and drivers (trailing-window earnings volatility with industry-year median
imputation, winsorising within fiscal year); fit each measure on the full sample (with
firm-clustered errors) and on five grouped folds by firm (cross-fitted targets); band,
status and robust gap scale from the cross-fitted residuals; peer medians (drivers and the
measure, among the rows that have the measure) that exclude the firm, from order statistics;
exact linear contributions of each driver; Parquet writes.

Run::

    python benchmark/lean.py PANEL --out DIR [--measure book|market|both] [--format csv]

With ``--format csv`` the tables are written as CSV by pyarrow's CSV writer (text columns
decoded to plain strings first, which that writer formats faster), the yardstick of levgap's
default path (CSV in, CSV out).

What it leaves out on purpose (levgap does them, they cost little at this scale): column
maps and unit scaling, the parent-group borrowing of industries with fewer than five firms
(absent from the benchmark panels at 100k and above), per-row ledger details beyond a
reason code, and the terminal summary.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import sys
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
from scipy import special

sys.path.insert(0, str(Path(__file__).resolve().parent))
import limit  # noqa: E402

DRIVERS = ("tangibility", "profitability", "earnings_volatility", "size", "market_to_book")
NUMERIC = ("total_assets", "total_debt", "ppe_net", "ebitda", "book_equity", "market_equity")
REQUIRED = ("total_assets", "total_debt", "ppe_net", "ebitda", "book_equity")
TEXT = ("firm_id", "industry", "firm_name")
FLAGS = np.array(["", "volatility_imputed", "mtb_imputed", "volatility_imputed;mtb_imputed"],
                 dtype=object)


# ---------------------------------------------------------------------------------------------
# Grouped order statistics (sort once, index)


def _group_layout(group: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, ...]:
    """Sort by (group, value) with NaN last inside each group; return layout arrays."""
    # Two passes (values, then a stable sort by group) beat np.lexsort by about 2x.
    order = np.argsort(values)
    order = order[np.argsort(group[order], kind="stable")]
    gs = group[order]
    vs = values[order]
    n = len(order)
    starts = np.flatnonzero(np.r_[True, gs[1:] != gs[:-1]]) if n else np.zeros(0, np.intp)
    sizes = np.diff(np.r_[starts, n])
    valid = np.add.reduceat(np.isfinite(vs), starts) if n else np.zeros(0, np.intp)
    return order, vs, starts, sizes, valid


def grouped_quantiles(values: np.ndarray, group: np.ndarray, qs: tuple[float, ...]) -> list:
    """Per-row quantiles (linear interpolation, NaN ignored) of ``values`` within ``group``."""
    order, vs, starts, sizes, valid = _group_layout(group, values)
    out = []
    for q in qs:
        h = (valid - 1) * q
        lo = np.floor(h).astype(np.intp)
        hi = np.minimum(lo + 1, np.maximum(valid - 1, 0))
        base = starts
        vlo = vs[np.minimum(base + lo, len(vs) - 1)]
        vhi = vs[np.minimum(base + hi, len(vs) - 1)]
        qv = np.where(valid > 0, vlo + (h - lo) * (vhi - vlo), np.nan)
        res = np.empty(len(values))
        res[order] = np.repeat(qv, sizes)
        out.append(res)
    return out


def grouped_median(values: np.ndarray, group: np.ndarray) -> np.ndarray:
    """Per-row median of ``values`` (NaN ignored) within ``group``."""
    return grouped_quantiles(values, group, (0.5,))[0]


def peer_median(values: np.ndarray, group: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Median of the other rows' finite values in each row's group, and how many there are.

    From order statistics: with the group sorted, removing the row at rank r shifts the
    ranks above it down by one, so the leave-one-out median is one or two sorted values.
    """
    order, vs, starts, sizes, valid = _group_layout(group, values)
    n = len(vs)
    start = np.repeat(starts, sizes)
    rank = np.arange(n) - start
    own_valid = np.isfinite(vs)
    m = np.repeat(valid, sizes) - own_valid  # other rows with a value
    skip = np.where(own_valid, rank, n)  # a NaN row removes nothing
    lo = (m - 1) // 2
    hi = m // 2
    plo = start + lo + (lo >= skip)
    phi = start + hi + (hi >= skip)
    ok = m > 0
    plo = np.where(ok, plo, 0)
    phi = np.where(ok, phi, 0)
    med = np.where(ok, 0.5 * (vs[plo] + vs[phi]), np.nan)
    out = np.empty(n)
    cnt = np.empty(n, dtype=np.int64)
    out[order] = med
    cnt[order] = m
    return out, cnt


# ---------------------------------------------------------------------------------------------
# Read


def _codes(col: pa.ChunkedArray) -> tuple[np.ndarray, np.ndarray]:
    enc = pc.dictionary_encode(col.combine_chunks())
    return enc.indices.to_numpy(zero_copy_only=False).astype(np.int64), np.asarray(
        enc.dictionary.to_pylist(), dtype=object
    )


def read(path: Path) -> dict:
    """Read the panel's columns into numpy arrays (strings as codes + labels)."""
    if path.suffix.lower() == ".parquet":
        names = pq.read_schema(path).names
        table = pq.read_table(path, columns=[c for c in (*TEXT, "fiscal_year", *NUMERIC)
                                             if c in names])
    else:
        types = {c: pa.string() for c in TEXT}
        types.update({c: pa.float64() for c in NUMERIC})
        table = pacsv.read_csv(path, convert_options=pacsv.ConvertOptions(column_types=types))
    cols: dict = {"n_input": table.num_rows}
    for c in TEXT:
        if c in table.column_names:
            cols[c] = _codes(table[c])
    cols["fiscal_year"] = pc.fill_null(table["fiscal_year"].cast(pa.float64()),
                                       np.nan).to_numpy()
    for c in NUMERIC:
        if c in table.column_names:
            arr = table[c].cast(pa.float64())
            cols[c] = pc.fill_null(arr, np.nan).to_numpy()
        else:
            cols[c] = np.full(table.num_rows, np.nan)
    return cols


# ---------------------------------------------------------------------------------------------
# Validate and build drivers


def validate(cols: dict) -> tuple[np.ndarray, list[tuple[np.ndarray, str]]]:
    """Row mask of usable rows, and the ledger as (row indices, reason) pairs."""
    n = cols["n_input"]
    reasons: list[tuple[np.ndarray, str]] = []
    bad = np.zeros(n, bool)
    missing = ~np.isfinite(cols["fiscal_year"])
    for c in REQUIRED:
        missing |= ~np.isfinite(cols[c])
    for mask, why in (
        (missing, "missing_value"),
        (~missing & (cols["total_assets"] <= 0), "nonpositive_assets"),
        (~missing & ((cols["total_debt"] < 0) | (cols["ppe_net"] < 0)), "negative_value"),
    ):
        mask = mask & ~bad
        if mask.any():
            reasons.append((np.flatnonzero(mask), why))
        bad |= mask
    firm = cols["firm_id"][0]
    year = np.where(np.isfinite(cols["fiscal_year"]), cols["fiscal_year"], 0).astype(np.int64)
    key = firm * 10_000 + (year - year.min())
    order = np.argsort(key, kind="stable")
    dup_sorted = np.r_[False, key[order][1:] == key[order][:-1]]
    dup = np.zeros(n, bool)
    dup[order] = dup_sorted
    dup &= ~bad
    if dup.any():
        reasons.append((np.flatnonzero(dup), "duplicate_firm_year"))
    return ~(bad | dup), reasons


def build(cols: dict, keep: np.ndarray, winsor: tuple[float, float] = (0.01, 0.99)) -> dict:
    """Measures and drivers of the kept rows, sorted by firm and year."""
    idx = np.flatnonzero(keep)
    firm = cols["firm_id"][0][idx]
    year = cols["fiscal_year"][idx].astype(np.int64)
    order = np.lexsort((year, firm))
    idx, firm, year = idx[order], firm[order], year[order]
    ind = cols["industry"][0][idx]
    ta = cols["total_assets"][idx]
    debt = cols["total_debt"][idx]
    be = cols["book_equity"][idx]
    me = cols["market_equity"][idx]
    prof = cols["ebitda"][idx] / ta
    # Trailing window of fiscal years t-4..t, at least 3 observations, ddof 1; centred on
    # the current row for numerical stability.
    n = len(idx)
    s = np.zeros(n)
    ss = np.zeros(n)
    cnt = np.ones(n)
    for lag in range(1, 5):
        same = np.zeros(n, bool)
        same[lag:] = (firm[lag:] == firm[:-lag]) & (year[lag:] - year[:-lag] <= 4)
        d = np.zeros(n)
        d[lag:] = prof[:-lag] - prof[lag:]
        d = np.where(same, d, 0.0)
        s += d
        ss += d * d
        cnt += same
    with np.errstate(invalid="ignore", divide="ignore"):
        vol = np.sqrt(np.maximum(ss - s * s / cnt, 0.0) / (cnt - 1))
    short = cnt < 3
    vol[short] = np.nan
    n_yr = int(year.max() - year.min() + 1)
    iy = ind * n_yr + (year - year.min())

    def impute(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        # industry-year median, else year median, else overall median
        miss = ~np.isfinite(v)
        if not miss.any():
            return v, miss
        fill = grouped_median(v, iy)
        fill = np.where(np.isfinite(fill), fill, grouped_median(v, year))
        fill = np.where(np.isfinite(fill), fill, np.nanmedian(v))
        return np.where(miss, fill, v), miss

    vol, vol_imp = impute(vol)
    mtb, mtb_imp = impute((ta - be + me) / ta)
    drivers = {
        "tangibility": cols["ppe_net"][idx] / ta,
        "profitability": prof,
        "earnings_volatility": vol,
        "size": np.log(ta),
        "market_to_book": mtb,
    }
    lo_q, hi_q = winsor
    for name, v in drivers.items():
        lo, hi = grouped_quantiles(v, year, (lo_q, hi_q))
        drivers[name] = np.clip(v, lo, hi)
    with np.errstate(invalid="ignore", divide="ignore"):
        market = np.where(debt + me > 0, debt / (debt + me), np.nan)
    X = np.column_stack([drivers[d] for d in DRIVERS])
    return {
        "row": idx, "firm": firm, "year": year, "ind": ind, "iy": iy,
        "assets": ta, "debt": debt, "market_equity": me,
        "measures": {"book": debt / ta, "market": market},
        "X": X, "flags": vol_imp.astype(np.int64) + 2 * mtb_imp,
    }


def peer_profile(X: np.ndarray, iy: np.ndarray, year: np.ndarray) -> tuple[np.ndarray, ...]:
    """Leave-one-out medians of each column among industry-year peers, else the year's."""
    out = np.empty_like(X)
    count = None
    for j in range(X.shape[1]):
        med, cnt = peer_median(X[:, j], iy)
        if (cnt == 0).any():
            med = np.where(cnt > 0, med, peer_median(X[:, j], year)[0])
        out[:, j] = med
        count = cnt if count is None else count
    return out, count


# ---------------------------------------------------------------------------------------------
# Fit, cross-fit, band, attribution


def folds_by_firm(firm: np.ndarray, k: int, seed: int) -> np.ndarray:
    n_firms = int(firm.max()) + 1
    perm = np.random.default_rng(seed).permutation(n_firms)
    fold_of_firm = np.empty(n_firms, np.int64)
    fold_of_firm[perm] = np.arange(n_firms) % k
    return fold_of_firm[firm]


def model_measure(b: dict, measure: str, drivers=DRIVERS, folds=5, seed=0, coverage=0.8):
    y_all = b["measures"][measure]
    sel = np.flatnonzero(np.isfinite(y_all))
    y, X = y_all[sel], b["X"][sel]
    firm = b["firm"][sel]
    ind, year = b["ind"][sel], b["year"][sel] - b["year"].min()
    levels = (int(b["ind"].max()) + 1, int(b["year"].max() - b["year"].min()) + 1)
    codes = (ind, year)
    full = limit.fit(y, X, codes, firm, n_levels=levels)
    fold = folds_by_firm(firm, folds, seed)
    target = np.empty(len(y))
    contrib = np.empty_like(X)
    # Peers of this measure: rows that have it (the firm left out).
    base, peer_cnt = peer_profile(np.column_stack([X, y]), b["iy"][sel], b["year"][sel])
    peer_X, peer_med = base[:, :-1], base[:, -1]
    for f in range(folds):
        test = fold == f
        tr = ~test
        fit = limit.fit(y[tr], X[tr], (ind[tr], year[tr]), None, n_levels=levels)
        target[test] = fit.predict(X[test], (ind[test], year[test]))
        contrib[test] = (X[test] - peer_X[test]) * fit.coef
    peer_target = target - contrib.sum(axis=1)
    resid = y - target
    q_lo, q_hi = np.quantile(resid, [(1 - coverage) / 2, (1 + coverage) / 2])
    scale = 1.4826 * np.median(np.abs(resid - np.median(resid)))
    gap = y - target
    band_low, band_high = target + q_lo, target + q_hi
    status = np.where(y > band_high, 2, np.where(y < band_low, 0, 1))
    assets, debt, me = b["assets"][sel], b["debt"][sel], b["market_equity"][sel]
    if measure == "book":
        to_target = (target - y) * assets
    else:
        with np.errstate(divide="ignore", invalid="ignore"):
            to_target = np.clip(target, 0, 0.999) * me / (1 - np.clip(target, 0, 0.999)) - debt
    tss = ((y - y.mean()) ** 2).sum()
    se = full.std_error
    coef = np.r_[full.const, full.coef]
    g = len(np.unique(firm))
    tq = special.stdtrit(g - 1, 0.975)
    se_all = np.r_[np.nan, se]
    return {
        "sel": sel, "target": target, "gap": gap, "gap_z": gap / scale,
        "band_low": band_low, "band_high": band_high, "status": status,
        "peer_median": peer_med, "peer_count": peer_cnt, "peer_target": peer_target,
        "debt_to_target": to_target, "actual": y, "X": X, "peer_X": peer_X, "contrib": contrib,
        "coef": {
            "term": ["const", *drivers], "estimate": coef, "std_error": se_all,
            "t_stat": coef / se_all,
            "p_value": 2 * special.stdtr(g - 1, -np.abs(coef / se_all)),
            "ci_low": coef - tq * se_all, "ci_high": coef + tq * se_all,
        },
        "fit": {
            "n_obs": len(y), "n_firms": g, "n_industries": len(np.unique(ind)),
            "r2": 1 - float(((y - full.predict(X, codes)) ** 2).sum() / tss),
            "r2_oos": 1 - float((resid**2).sum() / tss),
            "rmse_oos": float(np.sqrt((resid**2).mean())),
        },
    }


# ---------------------------------------------------------------------------------------------
# Write


def _dict_col(codes: np.ndarray, labels: np.ndarray) -> pa.DictionaryArray:
    safe = np.array([("'" + s) if s and s[0] in "=+-@" else s for s in labels], dtype=object)
    return pa.DictionaryArray.from_arrays(pa.array(codes, pa.int32()), pa.array(safe, pa.string()))


def _save(table: pa.Table, path: Path, fmt: str) -> None:
    if fmt == "parquet":
        pq.write_table(table, path.with_suffix(".parquet"))
        return
    for i, field in enumerate(table.schema):
        if pa.types.is_dictionary(field.type):
            table = table.set_column(i, field.name, table.column(i).cast(pa.string()))
    pacsv.write_csv(table, path.with_suffix(".csv"), pacsv.WriteOptions(eol="\r\n"))


def write(out: Path, cols: dict, b: dict, results: dict, ledger, source: Path,
          fmt: str = "parquet") -> None:
    out.mkdir(parents=True, exist_ok=True)
    firm_lab = cols["firm_id"][1]
    name_codes, name_lab = cols.get("firm_name", (None, None))
    ind_lab = cols["industry"][1]
    t_parts, d_parts, c_parts, f_rows = [], [], [], []
    for measure, r in results.items():
        sel = r["sel"]
        rows = b["row"][sel]
        firm = b["firm"][sel]
        n = len(sel)
        cols_t = {
            "firm_id": _dict_col(firm, firm_lab),
            "firm_name": (_dict_col(name_codes[rows], name_lab) if name_codes is not None
                          else pa.nulls(n, pa.string())),
            "fiscal_year": pa.array(b["year"][sel]),
            "industry": _dict_col(b["ind"][sel], ind_lab),
            "measure": _dict_col(np.zeros(n, np.int64), np.array([measure], dtype=object)),
        }
        for k in ("actual", "target", "gap", "gap_z", "band_low", "band_high"):
            cols_t[k] = pa.array(r[k])
        cols_t["status"] = _dict_col(r["status"], np.array(["under", "within", "over"],
                                                            dtype=object))
        for k in ("peer_median", "peer_count", "peer_target", "debt_to_target"):
            cols_t[k] = pa.array(r[k])
        cols_t["flags"] = _dict_col(b["flags"][sel], FLAGS)
        t_parts.append(pa.table(cols_t))
        k = len(DRIVERS)
        d_parts.append(pa.table({
            "firm_id": _dict_col(np.repeat(firm, k), firm_lab),
            "fiscal_year": pa.array(np.repeat(b["year"][sel], k)),
            "measure": _dict_col(np.zeros(n * k, np.int64), np.array([measure], dtype=object)),
            "driver": _dict_col(np.tile(np.arange(k), n), np.array(DRIVERS, dtype=object)),
            "firm_value": pa.array(r["X"].ravel()),
            "peer_value": pa.array(r["peer_X"].ravel()),
            "contribution": pa.array(r["contrib"].ravel()),
        }))
        c = r["coef"]
        c_parts.append(pa.table({"measure": [measure] * len(c["term"]),
                                 "model": ["linear"] * len(c["term"]),
                                 **{key: list(v) for key, v in c.items()}}))
        f_rows.append({"measure": measure, "model": "linear", **r["fit"]})
    _save(pa.concat_tables(t_parts, promote_options="permissive"), out / "targets", fmt)
    _save(pa.concat_tables(d_parts, promote_options="permissive"), out / "drivers", fmt)
    _save(pa.concat_tables(c_parts), out / "coefficients", fmt)
    _save(pa.Table.from_pylist(f_rows), out / "model_fit", fmt)
    ex_rows = np.concatenate([r for r, _ in ledger]) if ledger else np.zeros(0, np.int64)
    ex_reason = [why for r, why in ledger for _ in range(len(r))]
    _save(pa.table({
        "source_row": pa.array(ex_rows + 1, pa.int64()),
        "firm_id": pa.array(cols["firm_id"][1][cols["firm_id"][0][ex_rows]], pa.string()),
        "reason": pa.array(ex_reason, pa.string()),
    }), out / "exclusions", fmt)
    digest = hashlib.sha256()
    with open(source, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            digest.update(chunk)
    (out / "run.json").write_text(json.dumps({
        "input": str(source), "sha256": digest.hexdigest(), "n_input_rows": cols["n_input"],
        "excluded": int(len(ex_rows)), "measures": list(results),
    }, indent=2))


def run(path: Path, out: Path, measures: tuple[str, ...] = ("book", "market"),
        fmt: str = "parquet") -> None:
    cols = read(path)
    keep, ledger = validate(cols)
    b = build(cols, keep)
    results = {m: model_measure(b, m) for m in measures}
    write(out, cols, b, results, ledger, path, fmt)


def main() -> None:
    ap = argparse.ArgumentParser(description="Lean end-to-end leverage benchmark (yardstick).")
    ap.add_argument("panel", type=Path)
    ap.add_argument("--out", type=Path, required=True)
    ap.add_argument("--measure", choices=("book", "market", "both"), default="both")
    ap.add_argument("--format", choices=("parquet", "csv"), default="parquet")
    a = ap.parse_args()
    measures = ("book", "market") if a.measure == "both" else (a.measure,)
    run(a.panel, a.out, measures, a.format)


if __name__ == "__main__":
    main()
