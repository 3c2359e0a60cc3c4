"""Checks of the variable-projection fits (Golub & Pereyra 1973)."""

from __future__ import annotations

import numpy as np
import pytest
from analysis_support import FS, bcw_modes, coloured_noise
from analysis_support import noise_model as _noise
from scipy import stats

from ringsearch.analysis.fits import damped_basis
from ringsearch.analysis.varpro import fit_free_modes, fit_kerr


def test_noise_free_free_modes_recovered_to_1e_8():
    # Issue 7: exact data, reasonable starts (5-10% off) -> f and tau to 1e-8 relative.
    n = 300
    tn = _noise(n)
    t = np.arange(n) / FS + 0.2e-3
    f = np.array([251.0, 240.0])
    tau = np.array([4.1e-3, 1.3e-3])
    y = damped_basis(t, f, tau) @ (np.array([1.0, 0.5, -2.0, 1.5]) * 1e-21)
    r = fit_free_modes(y, t, tn, [240.0, 255.0], [3.8e-3, 1.4e-3], n_starts=4, rng=1)
    assert np.allclose(r.f_hz, f, rtol=1e-8, atol=0)
    assert np.allclose(r.tau_s, tau, rtol=1e-8, atol=0)
    assert r.n_agree >= 2
    assert set(r.starts.columns) >= {"chi2", "group", "start_f0", "end_tau1"}


def test_noise_free_kerr_fit_recovers_mass_and_spin():
    n = 300
    tn = _noise(n)
    t = np.arange(n) / FS
    f, tau = zip(*(bcw_modes(67.0, 0.67, k) for k in range(2)), strict=True)
    y = damped_basis(t, np.ravel(f), np.ravel(tau)) @ (np.array([1.0, 0.3, 2.0, -1.0]) * 1e-21)
    r = fit_kerr(y, t, tn, 1, 60.0, 0.5, (40.0, 100.0), (0.0, 0.95), modes=bcw_modes,
                 n_starts=3, rng=2)
    assert r.params == pytest.approx([67.0, 0.67], rel=1e-7)


def test_frequency_and_damping_pulls_are_standard_normal():
    # Cramér-Rao: at high SNR the maximum-likelihood (f, tau) errors divided by the
    # Fisher (amplitude-marginalised) sigmas are N(0, 1).  80 noise realisations at
    # SNR ~ 40 (nonlinear bias ~ 1/SNR^2 negligible); KS test of 160 pulls at
    # alpha = 1e-3: false-failure probability 1e-3.
    rng = np.random.default_rng(314)
    n, nreal = 256, 80
    tn = _noise(n)
    t = np.arange(n) / FS
    f, tau = 250.0, 4e-3
    sig = damped_basis(t, [f], [tau]) @ np.array([6e-21, 3e-21])
    noise = coloured_noise(rng, n * nreal)
    pulls = []
    for i in range(nreal):
        y = sig + noise[i * n:(i + 1) * n]
        r = fit_free_modes(y, t, tn, [f * 1.01], [tau * 0.97], n_starts=1)
        pulls.append((r.params - [f, tau]) / r.param_sigma)
    pulls = np.asarray(pulls).ravel()
    assert stats.kstest(pulls, "norm").pvalue > 1e-3
