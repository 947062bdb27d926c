"""Winsorising limits and imputation medians learned and re-applied."""

from __future__ import annotations

import json

import numpy as np
import pytest

from levgap.transforms import (
    DriverTransforms,
    apply,
    clip_to_limits,
    fill_missing,
    impute_medians,
    learn,
    year_limits,
)

NAN = np.nan


def test_impute_medians_by_group_year_year_and_overall() -> None:
    values = np.array([1.0, 3.0, NAN, 10.0, 20.0, 30.0, NAN])
    group = np.array(["a", "a", "a", "b", "b", "a", "b"])
    year = np.array([2020, 2020, 2021, 2020, 2021, 2021, 2022])
    m = impute_medians(values, group, year)
    assert m["group_year"] == {"a|2020": 2.0, "b|2020": 10.0, "b|2021": 20.0, "a|2021": 30.0}
    assert m["year"] == {"2020": 3.0, "2021": 25.0}
    assert m["all"] == 10.0
    assert np.isnan(impute_medians(np.full(3, NAN), group[:3], year[:3])["all"])


def test_fill_missing_falls_back_group_year_then_year_then_overall() -> None:
    medians = {"group_year": {"a|2020": 1.0}, "year": {"2019": 5.0, "2021": 7.0}, "all": 9.0}
    values = np.array([0.5, NAN, NAN, NAN, NAN, NAN])
    group = np.array(["a", "a", "b", "b", "b", "b"])
    year = np.array([2020, 2020, 2021, 2020, 2018, 2030])
    out, filled = fill_missing(values, group, year, medians)
    # own value; group-year; the year's; 2020 unseen: the nearest earlier year (2019);
    # 2018 before every seen year: the first seen (2019); 2030: the latest earlier (2021)
    np.testing.assert_array_equal(out, [0.5, 1.0, 7.0, 5.0, 5.0, 7.0])
    np.testing.assert_array_equal(filled, [False, True, True, True, True, True])
    assert values[1] != values[1]  # the input is not changed in place
    no_year = {"group_year": {}, "year": {}, "all": 9.0}
    out, _ = fill_missing(np.array([NAN, 2.0]), group[:2], year[:2], no_year)
    np.testing.assert_array_equal(out, [9.0, 2.0])
    same, none = fill_missing(np.array([1.0, 2.0]), group[:2], year[:2], medians)
    np.testing.assert_array_equal(same, [1.0, 2.0])
    assert not none.any()


def test_year_limits_ignore_missing_values_and_empty_years() -> None:
    values = np.array([1.0, 2.0, 3.0, NAN, 100.0, NAN, 5.0, 4.0])
    year = np.array([1, 1, 1, 1, 3, 2, 3, 3])
    lim = year_limits(values, year, np.array([1, 2, 3, 4]), 0.25, 0.75)
    np.testing.assert_allclose(lim[0], np.quantile([1.0, 2.0, 3.0], [0.25, 0.75]))
    assert np.isnan(lim[1]).all() and np.isnan(lim[3]).all()
    np.testing.assert_allclose(lim[2], np.quantile([100.0, 5.0, 4.0], [0.25, 0.75]))


def test_clip_to_limits_uses_the_nearest_year_with_limits() -> None:
    years = np.array([2019, 2020, 2021])
    limits = np.array([[0.0, 1.0], [NAN, NAN], [2.0, 3.0]])
    values = np.array([-1.0, 0.5, 5.0, 5.0, 1.5, 9.0])
    year = np.array([2019, 2019, 2020, 2021, 2018, 2025])
    out, hit = clip_to_limits(values, year, years, limits)
    # 2020 has no limits: 2019's; 2018 precedes every year: 2019's; 2025: 2021's
    np.testing.assert_array_equal(out, [0.0, 0.5, 1.0, 3.0, 1.0, 3.0])
    np.testing.assert_array_equal(hit, [True, False, True, True, True, True])
    out, hit = clip_to_limits(values, year, years, np.full((3, 2), NAN))
    np.testing.assert_array_equal(out, values)
    assert hit.dtype == bool and not hit.any() and len(hit) == len(values)


def _raw(n: int = 200, seed: int = 0) -> tuple[dict, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    year = np.repeat([2020, 2021], n // 2)
    group = np.tile(["a", "b"], n // 2)
    vol = rng.gamma(2.0, 0.02, n)
    vol[:30] = NAN  # short histories
    raw = {"tangibility": rng.uniform(0, 1, n), "earnings_volatility": vol,
           "rd_missing": (rng.random(n) < 0.5).astype(float),
           "rd_intensity": rng.exponential(0.05, n) * 10 ** (year - 2020)}
    return raw, group, year


def test_learn_winsorises_every_driver_but_the_indicator_after_imputing() -> None:
    raw, group, year = _raw()
    drivers = list(raw)
    t = learn(raw, drivers, group, year, (0.05, 0.95))
    assert t.quantiles == (0.05, 0.95) and list(t.years) == [2020, 2021]
    assert set(t.limits) == {"tangibility", "earnings_volatility", "rd_intensity"}
    assert set(t.medians) == {"earnings_volatility"}
    filled = fill_missing(raw["earnings_volatility"], group, year,
                          t.medians["earnings_volatility"])[0]
    for i, y in enumerate((2020, 2021)):
        sel = year == y
        np.testing.assert_allclose(t.limits["earnings_volatility"][i],
                                   np.quantile(filled[sel], [0.05, 0.95]))
        np.testing.assert_allclose(t.limits["rd_intensity"][i],
                                   np.quantile(raw["rd_intensity"][sel], [0.05, 0.95]))
    # only one side winsorised still learns limits; neither side learns none
    assert set(learn(raw, drivers, group, year, (0.0, 0.99)).limits) == set(t.limits)
    assert set(learn(raw, drivers, group, year, (0.01, 1.0)).limits) == set(t.limits)
    off = learn(raw, drivers, group, year, (0.0, 1.0))
    assert off.limits == {} and set(off.medians) == {"earnings_volatility"}
    assert learn(raw, ["tangibility"], group, year, (0.0, 1.0)).medians == {}


def test_apply_imputes_then_clips_and_flags_each_step() -> None:
    raw, group, year = _raw()
    drivers = list(raw)
    t = learn(raw, drivers, group, year, (0.05, 0.95))
    values, imputed, clipped = apply(raw, drivers, group, year, t)
    assert set(imputed) == {"earnings_volatility"}
    np.testing.assert_array_equal(imputed["earnings_volatility"],
                                  np.isnan(raw["earnings_volatility"]))
    expect_clip = np.zeros(len(year), dtype=bool)
    for name in ("tangibility", "earnings_volatility", "rd_intensity"):
        v = fill_missing(raw[name], group, year, t.medians[name])[0] if name in t.medians \
            else raw[name]
        out, hit = clip_to_limits(v, year, t.years, t.limits[name])
        np.testing.assert_array_equal(values[name], out)
        expect_clip |= hit
    np.testing.assert_array_equal(values["rd_missing"], raw["rd_missing"])
    np.testing.assert_array_equal(clipped, expect_clip)
    assert clipped.any() and not clipped.all()


def test_transforms_survive_their_json_form() -> None:
    raw, group, year = _raw()
    t = learn(raw, list(raw), group, year, (0.01, 0.99))
    back = DriverTransforms.from_dict(json.loads(json.dumps(t.to_dict())))
    assert back.quantiles == t.quantiles and isinstance(back.quantiles[0], float)
    np.testing.assert_array_equal(back.years, t.years)
    assert back.years.dtype == np.int64
    assert set(back.limits) == set(t.limits)
    for name, lim in t.limits.items():
        np.testing.assert_array_equal(back.limits[name], lim)
        assert back.limits[name].shape == (2, 2)
    assert back.medians == t.medians
    one = DriverTransforms.from_dict({**t.to_dict(), "limits": {"x": [1, 2]}})
    assert one.limits["x"].shape == (1, 2) and one.limits["x"].dtype == float
    values, _, clipped = apply(raw, list(raw), group, year, back)
    ref, _, ref_clip = apply(raw, list(raw), group, year, t)
    for name in raw:
        np.testing.assert_array_equal(values[name], ref[name])
    np.testing.assert_array_equal(clipped, ref_clip)


@pytest.mark.parametrize("quantiles", [(0.01, 0.99), (0.1, 0.9)])
def test_learned_limits_hold_each_years_quantiles(quantiles) -> None:
    raw, group, year = _raw(seed=3)
    t = learn(raw, ["tangibility"], group, year, quantiles)
    values, _, clipped = apply(raw, ["tangibility"], group, year, t)
    for y in (2020, 2021):
        sel = year == y
        lo, hi = np.quantile(raw["tangibility"][sel], quantiles)
        assert values["tangibility"][sel].min() == pytest.approx(lo)
        assert values["tangibility"][sel].max() == pytest.approx(hi)
        assert clipped[sel].sum() == ((raw["tangibility"][sel] < lo)
                                      | (raw["tangibility"][sel] > hi)).sum()


def test_a_value_equal_to_its_limit_is_not_clipped() -> None:
    # 101 values: the 1% and 99% quantiles are the second smallest and second largest values
    values = np.random.default_rng(4).permutation(np.arange(101.0))
    year = np.full(101, 2020)
    limits = year_limits(values, year, np.array([2020]), 0.01, 0.99)
    np.testing.assert_array_equal(limits, [[1.0, 99.0]])
    out, hit = clip_to_limits(values, year, np.array([2020]), limits)
    assert hit.sum() == 2 and set(values[hit]) == {0.0, 100.0}
    assert out.min() == 1.0 and out.max() == 99.0


def test_json_numbers_are_read_as_the_types_they_stand_for() -> None:
    t = DriverTransforms.from_dict({"quantiles": [0, 1], "years": [2020.0, 2021.0],
                                    "limits": {"x": [[0, 1], [2, 3]]}, "medians": {}})
    assert t.years.dtype == np.int64 and t.limits["x"].dtype == float
    assert t.quantiles == (0.0, 1.0) and isinstance(t.quantiles[1], float)
