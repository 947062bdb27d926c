"""Location-scale bands: scale, quantiles, clipping, status, and coverage by industry."""

from __future__ import annotations

import numpy as np
import pytest
from _synthetic import panel
from scipy import stats

from levgap.band import calibrate, coverage_by_level, gap_z, robust_scale, status_codes
from levgap.config import ModelSpec
from levgap.pipeline import analyze


def test_robust_scale_is_the_interdecile_range_in_sd_units() -> None:
    rng = np.random.default_rng(0)
    r = rng.normal(0, 2.0, 200_000)
    q = np.quantile(r, [0.1, 0.9])
    # independent computation: the normal quantile from scipy.stats
    assert robust_scale(r) == pytest.approx((q[1] - q[0]) / (2 * stats.norm.ppf(0.9)))
    assert robust_scale(r) == pytest.approx(2.0, rel=0.01)
    r[:1000] = 1e6  # outliers below the 10% tail do not move it
    assert robust_scale(r) == pytest.approx(2.0, rel=0.02)


def test_band_quantiles_are_those_of_the_scaled_residuals() -> None:
    rng = np.random.default_rng(1)
    level = np.repeat(np.arange(4), 500)
    resid = rng.normal(0, 1, 2000) * np.array([0.5, 1.0, 2.0, 4.0])[level]
    band = calibrate(resid, level, 4, 0.8, prior_rows=0.0)
    own = np.array([robust_scale(resid[level == g]) for g in range(4)])
    np.testing.assert_allclose(band.scale, own)
    z = resid / own[level]
    assert band.q_low == pytest.approx(np.quantile(z, 0.1))
    assert band.q_high == pytest.approx(np.quantile(z, 0.9))
    low, high = band.limits(np.full(2000, 0.5), level)
    np.testing.assert_allclose(high - 0.5, np.clip(own[level] * band.q_high, None, 0.5))
    # gap_z divides by the same industry scale
    np.testing.assert_allclose(gap_z(resid, band.scale_of(level)) * own[level], resid)


def test_small_levels_are_shrunk_toward_the_pooled_scale() -> None:
    rng = np.random.default_rng(2)
    level = np.r_[np.zeros(1000, dtype=int), np.ones(10, dtype=int)]
    resid = np.r_[rng.normal(0, 1, 1000), rng.normal(0, 5, 10)]
    band = calibrate(resid, level, 3, 0.8, prior_rows=10.0)
    pooled = robust_scale(resid)
    w = 10 / 20
    expected = np.exp(w * np.log(band.own_scale[1]) + (1 - w) * np.log(pooled))
    assert band.scale[1] == pytest.approx(expected)
    assert band.scale[2] == band.pooled_scale == pytest.approx(pooled)  # no rows


def test_band_is_clipped_and_zero_debt_is_never_over() -> None:
    rng = np.random.default_rng(3)
    level = np.zeros(1000, dtype=int)
    band = calibrate(rng.normal(0, 0.1, 1000), level, 1, 0.8, prior_rows=10.0)
    target = np.array([0.01, 0.5, 0.99])
    low, high = band.limits(target, np.zeros(3, dtype=int))
    assert low[0] == 0.0 and high[2] == 1.0
    status = status_codes(np.array([0.0, 0.5, 1.0]), low, high)
    assert list(status) == [1, 1, 1]  # at the clipped edge: within


def test_coverage_by_level_counts_only_large_levels() -> None:
    actual = np.array([0.1, 0.2, 0.9, 0.5, 0.5])
    low, high = np.full(5, 0.15), np.full(5, 0.6)
    level = np.array([0, 0, 0, 1, 1])
    overall, lo, hi, n = coverage_by_level(actual, low, high, level, min_rows=3)
    assert overall == pytest.approx(3 / 5) and lo == hi == pytest.approx(1 / 3) and n == 1


@pytest.mark.parametrize("model", ["fractional", "linear"])
def test_coverage_holds_in_every_industry_when_spread_differs_fivefold(model: str) -> None:
    p = panel(21, industries=12, firms=(15, 30), spread=(1.0, 5.0))
    r = analyze(p.drop(columns=["true_target", "spread"]),
                spec=ModelSpec(measures=("book",), model=model))
    t = r.targets
    inside = (t["actual"] >= t["band_low"]) & (t["actual"] <= t["band_high"])
    by = inside.groupby(t["industry"]).agg(["mean", "size"])
    big = by[by["size"] >= 150]
    assert len(big) == 12
    assert big["mean"].between(0.70, 0.90).all(), big
    assert 0.77 <= inside.mean() <= 0.83
    fit = r.model_fit.iloc[0]
    assert fit["coverage"] == pytest.approx(inside.mean())
    assert fit["coverage_industry_min"] == pytest.approx(big["mean"].min())
    assert 0.65 <= fit["coverage_out_of_time"] <= 0.95 and fit["out_of_time_year"] == 2019
    # a single pooled band would not hold: its per-industry coverage spreads far wider
    z = (t["actual"] - t["target"])
    q = np.quantile(z, [0.1, 0.9])
    flat = ((z >= q[0]) & (z <= q[1])).groupby(t["industry"]).mean()
    assert flat.max() - flat.min() > 0.3


def test_a_level_without_rows_or_spread_takes_the_pooled_scale_itself() -> None:
    rng = np.random.default_rng(5)
    level = np.r_[np.zeros(60, dtype=int), np.ones(25, dtype=int), np.full(12, 3)]
    resid = rng.normal(0, 0.05, len(level))
    resid[level == 3] = 0.02  # a level whose residuals are all equal: own scale 0
    band = calibrate(resid, level, 4, 0.8, prior_rows=10.0)
    assert band.scale[2] == band.pooled_scale  # no rows: the pooled scale, not exp(log(.))
    assert band.own_scale[3] == 0.0 and band.scale[3] == pytest.approx(band.pooled_scale,
                                                                       rel=1e-12)
    assert np.isnan(band.own_scale[2]) and list(band.rows) == [60, 25, 0, 12]
    assert band.rows.dtype == np.int64


def test_scale_of_unknown_levels_is_the_pooled_scale() -> None:
    band = calibrate(np.random.default_rng(6).normal(size=50), np.zeros(50, dtype=int), 1,
                     0.8, prior_rows=10.0)
    got = band.scale_of(np.array([0, 1, -1, 7]))
    np.testing.assert_array_equal(got, [band.scale[0]] + [band.pooled_scale] * 3)
    # level codes read back as floats (a pandas column with a gap, say) index the same way
    np.testing.assert_array_equal(band.scale_of(np.array([0.0, 1.0, -1.0, 7.0])), got)


def test_limits_are_clipped_on_both_sides_for_targets_outside_zero_one() -> None:
    # the linear model can set targets outside [0, 1]; the band stays inside
    band = calibrate(np.random.default_rng(7).normal(0, 0.05, 400), np.zeros(400, dtype=int),
                     1, 0.8, prior_rows=10.0)
    low, high = band.limits(np.array([1.4, -0.6, 0.5]), np.zeros(3, dtype=int))
    np.testing.assert_array_equal(low[:2], [1.0, 0.0])
    np.testing.assert_array_equal(high[:2], [1.0, 0.0])
    assert 0.0 < low[2] < 0.5 < high[2] < 1.0


def test_band_survives_its_json_form() -> None:
    import json

    from levgap.band import Band

    rng = np.random.default_rng(8)
    level = np.r_[np.zeros(40, dtype=int), np.full(30, 2)]
    band = calibrate(rng.normal(0, 0.1, 70), level, 3, 0.9, prior_rows=4.0)
    text = json.dumps(band.to_dict(), allow_nan=False)  # NaN (level 1 has no rows) as null
    assert json.loads(text)["own_scale"][1] is None
    back = Band.from_dict(json.loads(text))
    for name in ("coverage", "q_low", "q_high", "pooled_scale", "prior_rows"):
        assert getattr(back, name) == getattr(band, name), name
    for name in ("scale", "own_scale", "rows"):
        np.testing.assert_array_equal(getattr(back, name), getattr(band, name), err_msg=name)
        assert getattr(back, name).dtype == getattr(band, name).dtype, name
    ints = Band.from_dict({**band.to_dict(), "scale": [1, 2, 3], "own_scale": [1, None, 3],
                           "rows": [40.0, 0.0, 30.0]})
    assert ints.scale.dtype == float and ints.own_scale.dtype == float
    assert ints.rows.dtype == np.int64


def test_robust_scale_of_no_or_one_residual() -> None:
    assert np.isnan(robust_scale(np.array([])))
    assert robust_scale(np.array([0.3])) == 0.0


@pytest.mark.parametrize("n", [0, 1])
def test_degenerate_band_without_spread_has_zero_width(n: int) -> None:
    # no residual, or one: no spread to calibrate on; zero scales and quantiles, no warning
    band = calibrate(np.full(n, 0.2), np.zeros(n, dtype=int), 3, 0.8, prior_rows=10.0)
    assert band.pooled_scale == 0.0 and (band.q_low, band.q_high) == (0.0, 0.0)
    np.testing.assert_array_equal(band.scale, np.zeros(3))
    assert np.isnan(gap_z(np.array([0.1]), band.scale_of(np.array([0])))).all()


def test_mostly_equal_residuals_fall_back_to_the_standard_deviation() -> None:
    # 90% of the residuals equal: the interdecile range is zero, the spread is not
    resid = np.r_[np.zeros(90), np.linspace(-1.0, 1.0, 10)]
    level = np.r_[np.zeros(50, dtype=int), np.ones(50, dtype=int)]
    band = calibrate(resid, level, 3, 0.8, prior_rows=10.0)
    assert band.pooled_scale == pytest.approx(np.std(resid), rel=1e-12)
    assert band.scale[2] == band.pooled_scale and band.scale[0] == band.pooled_scale


def test_gap_z_is_missing_where_the_scale_is_zero() -> None:
    got = gap_z(np.array([0.1, 0.1, -0.2]), np.array([0.0, 0.05, 0.1]))
    assert np.isnan(got[0]) and got[1] == pytest.approx(2.0) and got[2] == pytest.approx(-2.0)


def test_coverage_counts_the_band_edges_inside() -> None:
    actual = np.array([0.2, 0.5, 0.1, 0.7])
    low, high = np.full(4, 0.2), np.full(4, 0.5)
    overall, lo, hi, n = coverage_by_level(actual, low, high, np.zeros(4, dtype=int), 2)
    assert overall == 0.5 and lo == hi == 0.5 and n == 1
    overall, lo, hi, n = coverage_by_level(actual, low, high, np.zeros(4, dtype=int), 5)
    assert overall == 0.5 and np.isnan(lo) and np.isnan(hi) and n == 0
    empty = coverage_by_level(np.array([]), np.array([]), np.array([]),
                              np.array([], dtype=int), 1)
    assert np.isnan(empty[:3]).all() and empty[3] == 0
