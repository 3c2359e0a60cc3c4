"""Checks of the Toeplitz noise model and the fixed-frequency linear fits."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from ringsearch.analysis.fits import DetectorSeries, fit_amplitudes, start_time_scan
from ringsearch.analysis.noise_model import autocovariance, toeplitz_noise
from ringsearch.errors import InputError

FS = 2048.0


def coloured_psd(f):
    """A smooth, made-up detector-like PSD (1/Hz)."""
    f = np.maximum(np.asarray(f, float), 10.0)
    return 1e-46 * (1.0 + (50.0 / f) ** 2 + (f / 500.0) ** 2)


def coloured_noise(rng, n_total, fs=FS):
    """Gaussian noise with one-sided PSD ``coloured_psd`` by colouring white noise in the
    frequency domain: E|X_j|^2 = N fs S_j / 2 for the rfft coefficients (Parseval)."""
    f = np.fft.rfftfreq(n_total, 1 / fs)
    scale = np.sqrt(n_total * fs * coloured_psd(f) / 4.0)
    x = scale * (rng.standard_normal(len(f)) + 1j * rng.standard_normal(len(f)))
    x[0] = 0.0
    x[-1] = 0.0
    return np.fft.irfft(x, n_total)


def test_white_noise_autocovariance_is_variance_at_zero_lag():
    # Wiener-Khinchin: white one-sided PSD S has variance S * fs / 2 and no correlation.
    f = np.linspace(0, FS / 2, 1025)
    acf = autocovariance(f, np.full_like(f, 3e-46), FS, 64, f_low=0.0, f_high=FS / 2)
    assert acf[0] == pytest.approx(3e-46 * FS / 2, rel=1e-12)
    assert np.max(np.abs(acf[1:])) < 1e-10 * acf[0]


def test_toeplitz_inner_product_matches_frequency_domain():
    # Definition of the inner product (DESIGN.md): <a,b> = 4 Re ∫ a b* / S df over the band.
    # For signals well inside a long segment, a^T C^{-1} b must reproduce it.
    n = 1024
    fr = np.fft.rfftfreq(1 << 16, 1 / FS)
    tn = toeplitz_noise(fr, coloured_psd(fr), FS, n, f_low=20.0, f_high=900.0)
    t = np.arange(n) / FS

    def burst(f0, ph):
        env = np.exp(-(((t - 0.25) / 0.01) ** 2))
        return 1e-21 * env * np.cos(2 * np.pi * f0 * (t - 0.25) + ph)

    def fd_inner(a, b):
        nfft = 1 << 16
        fa, fb = np.fft.rfft(a, nfft) / FS, np.fft.rfft(b, nfft) / FS
        f = np.fft.rfftfreq(nfft, 1 / FS)
        band = (f >= 20.0) & (f <= 900.0)
        return 4 * np.real(np.sum(fa[band] * np.conj(fb[band]) / coloured_psd(f[band]))) * f[1]

    a, b = burst(250.0, 0.0), burst(240.0, 1.0)
    for x, y in [(a, a), (a, b), (b, b)]:
        assert tn.inner(x, y) == pytest.approx(fd_inner(x, y), rel=1e-6)


def _series(values, t_start=0.0):
    return DetectorSeries("H1", np.asarray(values, float), t_start, FS)


def test_noise_free_linear_fit_recovers_amplitudes():
    # Exact data: weighted least squares must return the generating amplitudes
    # (issue 7: 1e-10 relative).
    n = 300
    fr = np.fft.rfftfreq(1 << 14, 1 / FS)
    tn = toeplitz_noise(fr, coloured_psd(fr), FS, n, f_low=0.0, f_high=FS / 2)
    f = np.array([250.0, 243.0, 231.0])
    tau = np.array([4.0e-3, 1.3e-3, 0.8e-3])
    amps = np.array([1.0, -0.4, 2.0, 1.5, -1.0, 3.0]) * 1e-21
    t = np.arange(n) / FS + 0.3e-3          # start between samples
    from ringsearch.analysis.fits import damped_basis
    y = damped_basis(t, f, tau) @ amps
    r = fit_amplitudes(y, t, tn, f, tau)
    assert np.max(np.abs(r.amplitudes - amps)) < 1e-10 * np.max(np.abs(amps))
    assert r.residual_chi2 < 1e-12 * r.snr**2
    assert r.cond > 1.0


def test_amplitude_pulls_are_standard_normal():
    # Gauss-Markov: the whitened errors R (a_hat - a), with cov = (R^T R)^{-1}, are iid N(0,1)
    # when the noise has the modelled covariance.  Noise made by FFT colouring (independent
    # of the Toeplitz construction).  KS test at alpha = 1e-3: false-failure probability 1e-3.
    rng = np.random.default_rng(20261201)
    n, nseg = 256, 200
    fr = np.fft.rfftfreq(1 << 14, 1 / FS)
    tn = toeplitz_noise(fr, coloured_psd(fr), FS, n, f_low=0.0, f_high=FS / 2)
    noise = coloured_noise(rng, 1 << 16)
    f, tau = np.array([250.0, 240.0]), np.array([4e-3, 1.5e-3])
    amps = np.array([3.0, 1.0, -2.0, 4.0]) * 1e-22
    t = np.arange(n) / FS
    from ringsearch.analysis.fits import damped_basis
    sig = damped_basis(t, f, tau) @ amps
    z = []
    for i in range(nseg):
        y = sig + noise[i * n:(i + 1) * n]
        r = fit_amplitudes(y, t, tn, f, tau)
        rchol = np.linalg.cholesky(np.linalg.inv(r.covariance)).T
        z.extend(rchol @ (r.amplitudes - amps))
    z = np.asarray(z)
    assert stats.kstest(z, "norm").pvalue > 1e-3
    # residual power is chi-squared with n - 2K degrees of freedom on average
    assert abs(np.mean(z**2) - 1) < 0.15


def test_ill_conditioned_fit_warns():
    # Two modes 0.5 Hz apart over a 50 ms segment are numerically collinear:
    # cond * sqrt(2K) exceeds any modest SNR, so the warning must be raised.
    n = 100
    fr = np.fft.rfftfreq(1 << 12, 1 / FS)
    tn = toeplitz_noise(fr, coloured_psd(fr), FS, n, f_low=0.0, f_high=FS / 2)
    t = np.arange(n) / FS
    rng = np.random.default_rng(1)
    y = coloured_noise(rng, 1 << 12)[:n]
    r = fit_amplitudes(y, t, tn, [250.0, 250.5], [4e-3, 3.9e-3])
    assert r.cond > 100
    assert any(w.startswith("ill-conditioned") for w in r.warnings)


def test_start_time_scan_amplitudes_constant_for_a_true_ringdown():
    # A single damped sinusoid referred to a common time has the same amplitude at every t0.
    n = 200
    fr = np.fft.rfftfreq(1 << 12, 1 / FS)
    tn = toeplitz_noise(fr, coloured_psd(fr), FS, n, f_low=0.0, f_high=FS / 2)
    t_all = np.arange(4096) / FS
    start = 1.0
    h = np.where(t_all >= start, 1e-21 * np.exp(-(t_all - start) / 4e-3)
                 * np.cos(2 * np.pi * 250 * (t_all - start)), 0.0)
    s = _series(h, t_start=1000.0)
    t0s = 1000.0 + start + np.array([0.0, 2.0, 5.0]) / 1e3
    df = start_time_scan(s, tn, t0s, [250.0, 245.0], [4e-3, 1.3e-3], max_overtones=1,
                         t_ref_gps=1000.0 + start)
    fund = df[(df.n_overtones == 0) & (df.mode_n == 0)]
    assert np.allclose(fund.amp_strain, 1e-21, rtol=1e-8)
    assert set(df.columns) >= {"t0_gps_s", "amp_sigma_strain", "residual_chi2", "cond"}


def test_bad_inputs_raise_input_error():
    fr = np.fft.rfftfreq(1 << 12, 1 / FS)
    tn = toeplitz_noise(fr, coloured_psd(fr), FS, 100, f_low=0.0, f_high=FS / 2)
    s = _series(np.zeros(1000), t_start=10.0)
    with pytest.raises(InputError, match="outside"):
        s.segment(9.0, 100)
    with pytest.raises(InputError, match="outside"):
        s.segment(10.45, 100)
    nan = np.zeros(1000)
    nan[50] = np.nan
    with pytest.raises(InputError, match="NaN"):
        _series(nan, 10.0).segment(10.0, 100)
    t = np.arange(100) / FS
    with pytest.raises(InputError, match="constrained"):
        fit_amplitudes(np.zeros(100), t, tn, np.full(50, 250.0), np.full(50, 4e-3))
    with pytest.raises(InputError, match="band"):
        toeplitz_noise(fr, coloured_psd(fr), FS, 100, f_low=30.0, f_high=5000.0)
