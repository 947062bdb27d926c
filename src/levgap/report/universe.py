"""The report's table of every firm of the reported year, as compact embedded data.

The page must stay usable and under 10 MB at 50,000 firms, so the firm table is not written
as HTML: each firm's row, bridge (peer median, peers' offset, driver contributions, target,
gap), drivers (firm and peer values, a winsorised value's raw value) and history (actual,
target and band over its years) go into one JSON document of column arrays, with numbers as
integers at the precision the page shows (leverage to 0.1 percentage point, history to 1
point for the chart, drivers to three significant digits of their typical size), compressed
with gzip and embedded as base64. The page's script unpacks it with the browser's
``DecompressionStream`` and draws only the rows on screen (a page of them) and the one firm
opened (``templates/universe.js``).
"""

from __future__ import annotations

import base64
import gzip
import json
import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from levgap.band import STATUS

FORMAT_VERSION = 1
LEVEL = 1000  # leverage, bands, gaps and contributions: units of 0.1 percentage point
HISTORY = 100  # history for the chart: units of 1 percentage point


_DIGITS = "ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789-_"


def pack(values: Any) -> str:
    """Whole numbers (None or NaN: missing) as text: each value zigzag-coded (0, -1, 1, -2,
    ... -> 0, 1, 2, 3, ...), plus one (0 is missing), written in groups of five bits, low group
    first, one character of ``_DIGITS`` per group, the 32-bit set on all groups but the last.
    Small numbers take one character; gzip then squeezes what repeats. ``universe.js``
    unpacks it.

    Examples
    --------
    >>> pack([0, -1, 1, None, 40])
    'BCDAxC'
    """
    v = np.array([np.nan if x is None else x for x in values], dtype=float) \
        if isinstance(values, list) else np.asarray(values, dtype=float)
    if v.size == 0:
        return ""
    missing = ~np.isfinite(v)
    w = np.where(missing, 0, v).astype(np.int64)
    u = np.where(missing, 0, np.where(w >= 0, 2 * w, -2 * w - 1) + 1).astype(np.uint64)
    groups = max(1, -(-int(u.max()).bit_length() // 5))
    shifts = (5 * np.arange(groups)).astype(np.uint64)
    parts = u[:, None] >> shifts[None, :]
    exists = parts > 0
    exists[:, 0] = True
    last = exists.sum(axis=1) - 1
    digit = (parts & np.uint64(31)).astype(np.int64)
    digit += 32 * (np.arange(groups)[None, :] < last[:, None])
    table = np.frombuffer(_DIGITS.encode("ascii"), dtype=np.uint8)
    return table[digit[exists]].tobytes().decode("ascii")


def unpack(text: str) -> list[int | None]:
    """The numbers :func:`pack` wrote."""
    out: list[int | None] = []
    u, shift = 0, 0
    for ch in text:
        d = _DIGITS.index(ch)
        u |= (d & 31) << shift
        if d & 32:
            shift += 5
            continue
        out.append(None if u == 0 else ((u - 1) // 2 if (u - 1) % 2 == 0 else -(u // 2)))
        u, shift = 0, 0
    return out


def _ints(values: Any, scale: float) -> str:
    return pack(np.round(np.asarray(values, dtype=float) * scale))


def _decimals(values: np.ndarray) -> int:
    """Decimals that keep three significant digits of a driver's typical size."""
    finite = np.abs(values[np.isfinite(values)])
    if finite.size == 0:
        return 3
    top = float(np.quantile(finite, 0.99))
    if top <= 0:
        return 3
    return int(min(max(2 - math.floor(math.log10(top)), 0), 6))


def _text(values: Any) -> list[str]:
    from levgap.matching import unneutralise

    return [unneutralise("" if v is None or (isinstance(v, float) and v != v) else str(v))
            for v in values]


def firm_payload(targets: pd.DataFrame, drivers: pd.DataFrame, manifest: Mapping[str, Any],
                 year: int) -> dict[str, Any]:
    """The data behind the firm table of ``year`` (see the module docstring).

    Parameters
    ----------
    targets, drivers : pandas.DataFrame
        The run's tables (every fiscal year written: the history comes from them).
    manifest : mapping
        ``run.json`` (industry names).
    year : int
        The reported fiscal year.

    Returns
    -------
    dict
        JSON-able; :func:`encode` packs it for the page.
    """
    from levgap.codes import flag_words

    names_of = dict(manifest.get("industry_names") or {})
    now = targets[targets["fiscal_year"] == year]
    firms = now.drop_duplicates("firm_id")
    ids = firms["firm_id"].astype(str).to_numpy()
    firm_pos = {f: i for i, f in enumerate(ids)}
    industries = sorted(set(_text(firms["industry"])))
    ind_pos = {c: i for i, c in enumerate(industries)}
    years = sorted(int(y) for y in targets["fiscal_year"].unique())
    year_pos = {y: i for i, y in enumerate(years)}
    names = [str(d) for d in pd.unique(drivers["driver"])]
    k = len(names)
    dnow = drivers[drivers["fiscal_year"] == year]
    # one firm value per firm and driver; a driver whose value depends on the measure
    # (industry_median_leverage) is overridden in that measure's part ("fo")
    fv = np.full((len(ids), k), np.nan)
    raw = np.full((len(ids), k), np.nan)
    d_firm = dnow["firm_id"].astype(str).map(firm_pos).to_numpy()
    d_drv = dnow["driver"].astype(str).map({n: j for j, n in enumerate(names)}).to_numpy()
    ok = ~pd.isna(d_firm) & ~pd.isna(d_drv)
    fi, dj = d_firm[ok].astype(np.int64), d_drv[ok].astype(np.int64)
    fv[fi, dj] = dnow["firm_value"].to_numpy(dtype=float)[ok]
    if "raw_value" in dnow:
        raw[fi, dj] = dnow["raw_value"].to_numpy(dtype=float)[ok]
    decimals = [_decimals(fv[:, j]) for j in range(k)]
    flat_fv = _ints((fv * np.array([10.0 ** x for x in decimals])).ravel(), 1)
    raw_at = np.argwhere(np.isfinite(raw))
    raw_list: list[float] = []
    for i, j in raw_at.tolist():
        raw_list += [i * k + j, float(f"{raw[i, j]:.4g}")]
    flag_texts = sorted(str(f) for f in pd.unique(targets["flags"].fillna("")))
    flag_pos = {f: i for i, f in enumerate(flag_texts)}
    words = {code: text for f in flag_texts for code, text in flag_words(f)}
    measures: dict[str, Any] = {}
    for measure in dict.fromkeys(now["measure"].astype(str)):
        measures[measure] = _measure_part(targets, drivers, measure, year, firm_pos, names,
                                          decimals, flag_pos, year_pos)
        measures[measure]["fo"] = _own_values(dnow[dnow["measure"] == measure], firm_pos,
                                              names, decimals, fv)
    return {
        "v": FORMAT_VERSION, "year": int(year), "years": years, "drivers": names,
        "dec": decimals, "status": list(STATUS),
        "ind": industries, "indName": [names_of.get(c, "") for c in industries],
        "flags": flag_texts, "words": words,
        "ids": _text(ids), "names": _text(firms["firm_name"]),
        "firmInd": pack([ind_pos[c] for c in _text(firms["industry"])]),
        "fv": flat_fv, "raw": raw_list, "m": measures,
    }


def _own_values(d: pd.DataFrame, firm_pos: Mapping[str, int], names: list[str],
                decimals: list[int], fv: np.ndarray) -> list[int]:
    """A measure's firm values where they differ, at the precision shown, from the values
    of every measure (``fv``): flat index and value, pairs in one list."""
    own = np.full_like(fv, np.nan)
    f = d["firm_id"].astype(str).map(firm_pos).to_numpy()
    j = d["driver"].astype(str).map({n: q for q, n in enumerate(names)}).to_numpy()
    ok = ~pd.isna(f) & ~pd.isna(j)
    own[f[ok].astype(np.int64), j[ok].astype(np.int64)] = d["firm_value"].to_numpy(
        dtype=float)[ok]
    scale = np.array([10.0 ** x for x in decimals])
    q_own, q_all = np.round(own * scale).ravel(), np.round(fv * scale).ravel()
    at = np.flatnonzero(np.isfinite(q_own) & ~(q_own == q_all))
    return [int(x) for i in at for x in (i, q_own[i])]


def _measure_part(targets: pd.DataFrame, drivers: pd.DataFrame, measure: str, year: int,
                  firm_pos: Mapping[str, int], names: list[str], decimals: list[int],
                  flag_pos: Mapping[str, int], year_pos: Mapping[int, int]) -> dict[str, Any]:
    t = targets[targets["measure"] == measure]
    now = t[t["fiscal_year"] == year]
    ids = now["firm_id"].astype(str).to_numpy()
    n, k = len(now), len(names)
    d = drivers[(drivers["measure"] == measure) & (drivers["fiscal_year"] == year)]
    row_of = {f: i for i, f in enumerate(ids)}
    contrib = np.full((n, k), np.nan)
    peer = np.full((n, k), np.nan)
    r = d["firm_id"].astype(str).map(row_of).to_numpy()
    j = d["driver"].astype(str).map({nm: q for q, nm in enumerate(names)}).to_numpy()
    ok = ~pd.isna(r) & ~pd.isna(j)
    ri, dj = r[ok].astype(np.int64), j[ok].astype(np.int64)
    contrib[ri, dj] = d["contribution"].to_numpy(dtype=float)[ok]
    peer[ri, dj] = d["peer_value"].to_numpy(dtype=float)[ok]
    scale = np.array([10.0 ** x for x in decimals])
    # history: the firm's rows of this measure, by year (delta-coded: they change slowly)
    hist = t[t["firm_id"].astype(str).isin(set(ids))].sort_values(["firm_id", "fiscal_year"])
    h_firm = hist["firm_id"].astype(str).to_numpy()
    starts = np.flatnonzero(np.r_[True, h_firm[1:] != h_firm[:-1]])
    lengths = np.diff(np.r_[starts, len(hist)])
    first_of = dict(zip(h_firm[starts], zip(starts, lengths, strict=True), strict=True))
    order = [first_of[f] for f in ids]
    take = np.concatenate([np.arange(s, s + m) for s, m in order]) if n else np.zeros(0, int)
    h = hist.iloc[take]
    seg = np.repeat(np.arange(n), [m for _, m in order])
    first = np.r_[True, seg[1:] != seg[:-1]] if n else np.zeros(0, bool)

    def delta(values: np.ndarray) -> str:
        q = np.round(values * HISTORY)
        return _ints(np.where(first, q, q - np.r_[0.0, q[:-1]]), 1)

    hy = h["fiscal_year"].map(year_pos).to_numpy(dtype=float)
    act, tgt = h["actual"].to_numpy(dtype=float), h["target"].to_numpy(dtype=float)
    rows = np.array([firm_pos[f] for f in ids], dtype=float)
    target = np.round(now["target"].to_numpy(dtype=float) * LEVEL)
    return {
        "row": _ints(np.diff(np.r_[-1.0, rows]), 1),  # delta-coded: mostly ones
        "a": _ints(now["actual"], LEVEL), "t": _ints(target, 1),
        # band edges as distances from the target: the same for a whole industry
        "lo": _ints(target - np.round(now["band_low"].to_numpy(dtype=float) * LEVEL), 1),
        "hi": _ints(np.round(now["band_high"].to_numpy(dtype=float) * LEVEL) - target, 1),
        "z": _ints(now["gap_z"], 100), "debt": _ints(now["debt_to_target"], 10),
        # the gap and the peers' offset packed themselves, not as differences of rounded
        # levels, so the page shows the figures explain and screen show
        "g": _ints(now["gap"], LEVEL),
        "po": _ints(now["peer_target"] - now["peer_median"], LEVEL),
        "pm": _ints(now["peer_median"], LEVEL), "pt": _ints(now["peer_target"], LEVEL),
        "pc": _ints(now["peer_count"], 1), "yo": _ints(now["years_outside"], 1),
        "gp": _ints(now["gap_prev"], LEVEL),
        "st": pack([STATUS.index(s) if s in STATUS else None
                    for s in now["status"].astype(str)]),
        "fl": pack([flag_pos[f] for f in now["flags"].fillna("").astype(str)]),
        "c": _ints(contrib.ravel(), LEVEL),
        "pv": _ints((peer * scale).ravel(), 1),
        "hn": pack([int(m) for _, m in order]),
        "hy": _ints(np.where(first, hy, hy - np.r_[0.0, hy[:-1]]), 1),
        "ha": delta(act), "ht": delta(tgt),
        "hl": _ints(h["band_low"].to_numpy(dtype=float) - tgt, HISTORY),
        "hh": _ints(h["band_high"].to_numpy(dtype=float) - tgt, HISTORY),
        "hs": pack(h["status"].map({x: i for i, x in enumerate(STATUS)}).fillna(1)
                   .astype(int).tolist()),
    }


def encode(payload: Mapping[str, Any]) -> str:
    """The payload as base64 of gzip-compressed JSON (what the page embeds)."""
    text = json.dumps(payload, separators=(",", ":"), allow_nan=False, ensure_ascii=False)
    return base64.b64encode(gzip.compress(text.encode("utf-8"), 9, mtime=0)).decode("ascii")


def decode(blob: str) -> dict[str, Any]:
    """The payload back from :func:`encode`'s text (for tests and checks)."""
    return json.loads(gzip.decompress(base64.b64decode(blob)).decode("utf-8"))
