"""EWMA smoother: the control-chart formulas, the handbook example, pandas, robustness."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from floorcast.core.forecasting.ewma import (
    control_limits,
    ewma,
    ewma_sigma,
    noise_sigma,
    robust_ewma,
)
from floorcast.errors import InputError

# NIST/SEMATECH e-Handbook of Statistical Methods, section 6.3.2.4 "EWMA Control
# Charts", worked example: EWMA0 = 50, s = 2.0539, λ = 0.3, k = 3. The data and the
# EWMA column below are typed FROM MEMORY of that page (not copied from it); they are
# self-consistent with the recursion to the two decimals the page prints.
NIST_DATA = [
    52.0,
    47.0,
    53.0,
    49.3,
    50.1,
    47.0,
    51.0,
    50.1,
    51.2,
    50.5,
    49.6,
    47.6,
    49.9,
    51.3,
    47.8,
    51.2,
    52.6,
    52.4,
    53.6,
    52.1,
]
NIST_EWMA = [
    50.60,
    49.52,
    50.56,
    50.18,
    50.16,
    49.21,
    49.75,
    49.85,
    50.26,
    50.33,
    50.11,
    49.36,
    49.52,
    50.05,
    49.38,
    49.92,
    50.73,
    51.23,
    51.94,
    51.99,
]
NIST_LIMITS = (47.4115, 52.5884)  # LCL, UCL (from memory of the same example)


def test_nist_example_ewma_values():
    # NIST e-Handbook 6.3.2.4 example (values from memory, see above).
    z = ewma(np.array(NIST_DATA), 0.3, z0=50.0)[0]
    assert np.allclose(np.round(z, 2), NIST_EWMA, atol=0.005)


def test_nist_example_control_limits_and_verdict():
    # NIST e-Handbook 6.3.2.4: UCL/LCL = EWMA0 ± k·s·sqrt(λ/(2−λ)) (from memory).
    lcl, ucl = control_limits(50.0, 2.0539, 0.3, 3.0)
    assert float(lcl) == pytest.approx(NIST_LIMITS[0], abs=5e-4)
    assert float(ucl) == pytest.approx(NIST_LIMITS[1], abs=5e-4)
    # The handbook's verdict for this data (from memory): every EWMA point inside the limits.
    z = ewma(np.array(NIST_DATA), 0.3, z0=50.0)[0]
    assert np.all((z > lcl) & (z < ucl))


def test_ewma_sigma_matches_variance_of_the_weighted_sum():
    # Independent derivation: with z0 fixed, z_t = Σ_{i<t} λ(1−λ)^i x_{t−i} + const, so
    # for iid x with variance σ², Var z_t = σ² λ² Σ_{i<t} (1−λ)^{2i}. Summed directly
    # here, not via the closed form the module implements (NIST 6.3.2.4).
    sigma, lam = 2.0539, 0.3
    t = np.arange(1, 30)
    direct = np.array(
        [sigma * math.sqrt(sum(lam**2 * (1 - lam) ** (2 * i) for i in range(n))) for n in t]
    )
    assert np.allclose(ewma_sigma(sigma, lam, t), direct, rtol=1e-12)
    # and the asymptote is the steady-state value
    assert float(ewma_sigma(sigma, lam)) == pytest.approx(sigma * math.sqrt(lam / (2 - lam)))
    lcl_t, ucl_t = control_limits(50.0, sigma, lam, 3.0, t)
    assert np.all(np.diff(ucl_t) > 0) and np.all(np.diff(lcl_t) < 0)  # limits widen to steady


def test_ewma_matches_pandas_adjust_false_across_a_batch():
    # Second reference: pandas Series.ewm(alpha=λ, adjust=False).mean() implements
    # y_0 = x_0, y_t = (1 − α) y_{t−1} + α x_t.
    rng = np.random.default_rng(3)
    x = rng.normal(10, 2, size=(5, 200))
    for lam in (0.05, 0.3, 1.0):
        ours = ewma(x, lam)
        ref = np.stack([pd.Series(row).ewm(alpha=lam, adjust=False).mean().to_numpy() for row in x])
        assert np.allclose(ours, ref, rtol=1e-12, atol=1e-12)


def test_robust_ewma_without_clipping_is_the_plain_ewma():
    rng = np.random.default_rng(4)
    x = rng.normal(5, 1, size=(3, 100))
    x[:, 50] += 30
    res = robust_ewma(x, lam=0.3, k=math.inf)
    assert np.allclose(res.level, ewma(x, 0.3))
    assert not res.rejected.any() and not res.shifted.any()


def test_isolated_spike_is_rejected():
    rng = np.random.default_rng(5)
    x = 10 + rng.normal(0, 0.1, size=200)
    x[100] = 50.0
    res = robust_ewma(x, lam=0.3, k=3.0, m=3, sigma=0.1)
    plain = ewma(x, 0.3)[0]
    assert res.rejected[0, 100] and not res.shifted.any()
    # The clipped update moves the level by at most λ·k·σ; the plain EWMA jumps by λ·40.
    assert abs(res.level[0, 100] - res.level[0, 99]) <= 0.3 * 3 * 0.1 + 1e-12
    assert plain[100] - plain[99] > 10
    assert abs(res.level[0, 101] - 10) < 0.3


def test_sustained_level_change_is_accepted_after_m_points():
    x = np.r_[np.full(50, 10.0), np.full(50, 20.0)]
    res = robust_ewma(x, lam=0.3, k=3.0, m=3, sigma=0.5)
    assert res.rejected[0, 50] and res.rejected[0, 51]
    assert res.shifted[0, 52] and res.shifted.sum() == 1
    assert res.level[0, 52] == pytest.approx(20.0)
    assert np.allclose(res.level[0, 52:], 20.0)
    # Three steps in, the plain EWMA has covered only 1 − 0.7³ ≈ 66 % of the change.
    assert ewma(x, 0.3)[0, 52] < 17


def test_alternating_outliers_are_not_a_level_change():
    x = np.full(60, 10.0)
    x[20:30] = np.where(np.arange(10) % 2 == 0, 20.0, 0.0)  # up, down, up, ...
    res = robust_ewma(x, lam=0.3, k=3.0, m=3, sigma=0.5)
    assert not res.shifted.any()
    assert np.all(np.abs(res.level[0] - 10.0) < 1.0)


def test_constant_series_follows_a_step_and_ignores_a_blip():
    x = np.full(40, 4.0)
    x[10] = 9.0  # blip
    x[25:] = 6.0  # step
    res = robust_ewma(x, m=3)
    assert res.sigma[0] == 0.0
    assert res.level[0, 10] == 4.0 and res.rejected[0, 10]
    assert res.level[0, 27] == 6.0 and res.shifted[0, 27]


def test_batch_equals_rows_and_band_is_k_sigma_around_the_previous_level():
    rng = np.random.default_rng(6)
    x = rng.normal(0, 1, size=(4, 120)).cumsum(axis=1) * 0.1 + 5
    x[1, 60] += 20
    x[2, 80:] += 5
    batch = robust_ewma(x, lam=0.2, k=2.5, m=4)
    for i in range(4):
        one = robust_ewma(x[i], lam=0.2, k=2.5, m=4)
        assert np.array_equal(one.level[0], batch.level[i])
        assert np.array_equal(one.rejected[0], batch.rejected[i])
    half = 2.5 * batch.sigma[:, None]
    assert np.allclose(batch.upper[:, 1:] - batch.level[:, :-1], half)
    assert np.allclose(batch.level[:, :-1] - batch.lower[:, 1:], half)


def test_noise_sigma_estimates_gaussian_sigma_despite_a_level_change():
    rng = np.random.default_rng(7)
    x = rng.normal(0, 2.0, size=(20, 2000))
    x[:, 1000:] += 50
    s = noise_sigma(x)
    assert np.all(np.abs(s - 2.0) < 0.2)


@pytest.mark.parametrize("kw", [{"lam": 0}, {"lam": 1.5}, {"k": 0}, {"m": 0}, {"sigma": -1}])
def test_bad_parameters_are_input_errors(kw):
    with pytest.raises(InputError):
        robust_ewma(np.ones(10), **kw)
