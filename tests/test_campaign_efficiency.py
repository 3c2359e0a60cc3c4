"""Binomial intervals, sigmoid fits and sensitive volume against outside references."""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from ringsearch.campaign.efficiency import (
    binomial_interval,
    comoving_volume_mpc3,
    efficiency_table,
    fit_sigmoid,
    sensitive_volume,
)


def test_wilson_interval_matches_formula():
    # Wilson (1927) score interval, closed form.
    k, n, conf = 7, 20, 0.9
    z = stats.norm.ppf(0.5 + conf / 2)
    p = k / n
    centre = (p + z**2 / (2 * n)) / (1 + z**2 / n)
    half = z / (1 + z**2 / n) * np.sqrt(p * (1 - p) / n + z**2 / (4 * n**2))
    lo, hi = binomial_interval(k, n, conf, "wilson")
    assert np.isclose(lo, centre - half) and np.isclose(hi, centre + half)


def test_clopper_pearson_matches_beta_quantiles():
    # Clopper & Pearson (1934): beta-distribution quantiles.
    k, n, conf = 3, 15, 0.9
    lo, hi = binomial_interval(k, n, conf, "clopper-pearson")
    a = (1 - conf) / 2
    assert np.isclose(lo, stats.beta.ppf(a, k, n - k + 1))
    assert np.isclose(hi, stats.beta.ppf(1 - a, k + 1, n - k))


def test_wilson_coverage_is_close_to_nominal():
    # Coverage of a 90 % Wilson interval for n = 50, p = 0.3 over 4000 seeded trials;
    # the binomial scatter of the coverage estimate is 0.005, so the 0.85..0.95
    # window fails with probability far below 1e-6.
    rng = np.random.default_rng(11)
    k = rng.binomial(50, 0.3, 4000)
    lo, hi = binomial_interval(k, np.full_like(k, 50), 0.9)
    coverage = np.mean((lo <= 0.3) & (hi >= 0.3))
    assert 0.85 < coverage < 0.95


def test_sigmoid_recovers_known_points():
    # Logistic truth with x50 = 6, width 1: x90 = 6 + ln 9. Seeded; the 5-sigma
    # bands fail with probability ~ 1e-6.
    rng = np.random.default_rng(5)
    x = rng.uniform(0, 12, 4000)
    y = rng.random(4000) < 1 / (1 + np.exp(-(x - 6.0)))
    fit = fit_sigmoid(x, y)
    assert fit["ok"]
    assert abs(fit["x50"] - 6.0) < 5 * fit["x50_err"]
    assert abs(fit["x90"] - (6.0 + np.log(9))) < 5 * fit["x90_err"]
    assert 0 < fit["x50_err"] < 0.2


def test_sigmoid_refuses_separated_data():
    x = np.arange(20.0)
    assert not fit_sigmoid(x, x > 10)["ok"]
    assert not fit_sigmoid(x, np.ones(20, bool))["ok"]


def test_efficiency_table_counts():
    df = pd.DataFrame({"injected_overtones": [0, 0, 0, 1, 1], "template_overtones": 0,
                       "found": [False, True, True, False, True],
                       "network_snr": [1.0, 2.0, 9.0, 3.0, 8.0]})
    t = efficiency_table(df, "network_snr", np.array([0.0, 5.0, 10.0]))
    assert t["n_injected"].tolist() == [2, 1, 1, 1]
    assert t["n_found"].tolist() == [1, 1, 0, 1]
    assert (t["ci_lo"] <= t["efficiency"]).all() and (t["efficiency"] <= t["ci_hi"]).all()


def test_volume_is_euclidean_nearby_and_smaller_far_away():
    # Euclidean 4/3 pi d^3 at 10 Mpc; at 1 Gpc the Planck18 comoving volume is smaller
    # than the Euclidean volume of the luminosity-distance sphere (d_C = d_L / (1+z)).
    assert np.isclose(comoving_volume_mpc3(10.0), 4 / 3 * np.pi * 1e3, rtol=1e-2)
    assert comoving_volume_mpc3(1000.0) < 4 / 3 * np.pi * 1e9
    # At 100 Mpc against the second-order Hubble law d_L = (c/H0)(z + (1 - q0) z^2 / 2)
    # (Weinberg 1972, Gravitation and Cosmology, ch. 14) with the Planck 2018
    # parameters H0 = 67.66 km/s/Mpc, Omega_m = 0.3111 (Planck Collaboration 2020, A&A
    # 641, A6, TT,TE,EE+lowE+lensing+BAO) # from memory; q0 = Omega_m/2 - Omega_L.
    # Third-order terms are ~1e-5; a volume of the d_L sphere (no 1/(1+z)) is 6.6 % off.
    h0, om, c_kms = 67.66, 0.3111, 299792.458
    x = h0 * 100.0 / c_kms
    z = x - (1 - (om / 2 - (1 - om))) / 2 * x**2
    assert np.isclose(comoving_volume_mpc3(100.0), 4 / 3 * np.pi * (100.0 / (1 + z))**3,
                      rtol=1e-3)
    t = pd.DataFrame({"bin_lo": [0.0, 50.0], "bin_hi": [50.0, 100.0],
                      "efficiency": [1.0, 0.5], "n_injected": [100, 100]})
    v = sensitive_volume(t)
    expected = comoving_volume_mpc3(50.0) + 0.5 * (comoving_volume_mpc3(100.0)
                                                   - comoving_volume_mpc3(50.0))
    assert np.isclose(v["volume_mpc3"], expected)
    assert "lower bound" in v["warning"]
