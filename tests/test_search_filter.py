"""Matched filter: noise statistics, signal recovery, chunking, refusal of singular templates."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from test_search_support import (
    WhiteConditioned,
    damped_sinusoids,
    search_triggers,
    use_reference_qnm,
    white_data,
)

from ringsearch.errors import InputError
from ringsearch.search.bank import Bank, white_cross_gram
from ringsearch.search.correlate import filter_peaks, projection_snr, snr_series
from ringsearch.search.templates import prepare_templates

FS = 2048.0


@pytest.fixture(autouse=True)
def _qnm(monkeypatch):
    use_reference_qnm(monkeypatch)


@pytest.mark.parametrize("f_hz, tau_s", [([250.0], [0.004]), ([250.0, 242.0], [0.004, 0.0013])])
def test_noise_only_rho2_is_chi2_with_2k_dof(f_hz, tau_s):
    # Detection theory (DESIGN.md; e.g. Wainstein & Zubakov 1962 # from memory): in Gaussian
    # noise the projection statistic over 2K orthonormal directions is chi-squared with
    # 2K dof.
    # Samples 0.25 s apart (template 32 ms + whitening filter) are independent enough.
    rng = np.random.default_rng(20261201)
    cond = white_data(80.0, FS, rng, f_high=900.0)
    s = snr_series(cond, f_hz, tau_s)
    step = int(0.25 * FS)
    keep = (s.gps - cond.t0 >= 2.0) & (s.gps - cond.t0 < 78.0)
    rho2 = (s.snr[keep][::step]) ** 2
    dof = 2 * len(f_hz)
    # KS test at the 0.1 % level: false-failure probability 1e-3 for a fixed seed
    assert stats.kstest(rho2, stats.chi2(dof).cdf).pvalue > 1e-3
    # mean of chi2_k is k; 304 samples: standard error sqrt(2k/304) -> 5 sigma bound
    # (false-failure probability ~6e-7, normal approximation)
    assert abs(rho2.mean() - dof) < 5 * np.sqrt(2 * dof / rho2.size)


def test_exact_recovery_of_amplitudes_and_optimal_snr_without_noise():
    # Noise-free data: the projection at the true template and start time returns the
    # injected amplitudes exactly, and rho equals the optimal SNR sqrt(<h,h>), which we
    # compute independently by Parseval in the time domain (white PSD S = 2 dt).
    n = int(8 * FS)
    start = 4.00017  # off the sample grid
    f, tau = np.array([250.0, 241.0]), np.array([0.004, 0.0013])
    amps = np.array([3.0 + 1.0j, 2.0 - 2.0j])
    h = damped_sinusoids(n, FS, start, f, tau, amps)
    band = (np.fft.rfftfreq(n, 1 / FS) >= 20) & (np.fft.rfftfreq(n, 1 / FS) <= 900)
    hw = np.fft.irfft(np.fft.rfft(h) * band, n)
    cond = WhiteConditioned(hw, FS, 1e9, 20.0, 900.0)
    r = projection_snr(cond, f, tau, 1e9 + start)
    rho_opt = np.sqrt(np.sum(hw * hw))  # <h, h> for unit white noise (Parseval)
    # 1e-4: the whitening filter's tail beyond its truncation (energy fraction 1e-6)
    assert r["snr"] == pytest.approx(rho_opt, rel=1e-4)
    np.testing.assert_allclose(r["amplitudes"], amps, atol=2e-3 * np.abs(amps).max())


def test_gram_matches_closed_form_inner_products():
    # The FFT Gram matrix of two damped sinusoids equals the closed-form integrals
    # int e^{-at} cos(bt) dt = a/(a^2+b^2) (Gradshteyn & Ryzhik 3.893) for white noise and
    # a band wide enough to hold the lines: check the normalised (correlation) matrix.
    fs = 16384.0
    f, tau = np.array([[300.0, 290.0]]), np.array([[0.01, 0.004]])
    n = 16384
    h = np.ones(n // 2 + 1)
    p = prepare_templates(f, tau, h, n, fs)
    g_fft = p.chol[0] @ p.chol[0].T
    g_cf = white_cross_gram(f[0], tau[0], f[0], tau[0])
    norm = lambda g: g / np.sqrt(np.outer(np.diag(g), np.diag(g)))  # noqa: E731
    # sampling the sharp start adds a first-sample term of relative size a*dt/2 ~ 1e-2
    # (a = 1/tau_1 + 1/tau_2, dt = 1/16384 s), so agree to 6e-3 in the correlations
    np.testing.assert_allclose(norm(g_fft), norm(g_cf), atol=6e-3)


def test_injections_recovered_with_noncentral_chi2_snr_and_right_parameters(monkeypatch):
    # 24 injections of optimal SNR 20 in unit white noise, 2 s apart.  At the true template
    # and start time rho^2 ~ noncentral chi2(2, rho_opt^2) (DESIGN.md detection theory);
    # the search (bank, clustering) finds each within one sample plus the bank's timing
    # resolution, with f and tau of (2,2,0) inside the bank's resolution.
    rng = np.random.default_rng(7)
    bank = Bank.from_box((40.0, 120.0), (0.3, 0.9), 0, 0.97, f_high=900.0, seed=1)
    m_inj = rng.uniform(45, 115, 24)
    s_inj = rng.uniform(0.35, 0.85, 24)
    from ringsearch.search.bank import qnm_f_tau

    f_inj, tau_inj = qnm_f_tau(m_inj, s_inj, 0)
    n = int(52 * FS)
    starts = 3.0 + 2.0 * np.arange(24) + rng.uniform(0, 1 / FS, 24)
    sig = np.zeros(n)
    band = (np.fft.rfftfreq(n, 1 / FS) >= 20) & (np.fft.rfftfreq(n, 1 / FS) <= 900)
    for i in range(24):
        one = damped_sinusoids(n, FS, starts[i], f_inj[i], tau_inj[i],
                               np.exp(1j * rng.uniform(0, 2 * np.pi)))
        hw = np.fft.irfft(np.fft.rfft(one) * band, n)
        sig += one * 20.0 / np.sqrt(np.sum(hw * hw))
    cond = white_data(52.0, FS, rng, f_high=900.0, signal=sig)
    rho2 = np.array([projection_snr(cond, [f_inj[i]], [tau_inj[i]], cond.t0 + starts[i])["snr"]
                     ** 2 for i in range(24)])
    # KS at 0.1 %: false-failure probability 1e-3
    assert stats.kstest(rho2, stats.ncx2(2, 400.0).cdf).pvalue > 1e-3
    trig = search_triggers(cond, bank, 8.0)
    assert len(trig) == 24  # one signal, one trigger; noise never reaches 8 here
    trig = trig.sort_values("gps").reset_index(drop=True)
    dt = trig.gps.to_numpy() - (cond.t0 + starts)
    # timing: one sample plus the bank's timing resolution, which we take as a tenth of
    # the damping time (a template of slightly different tau shifts its best start by
    # about d(tau)/2 for the 1.5 % match loss allowed by the bank).  # common practice
    assert np.all(np.abs(dt) <= 1 / FS + 0.1 * tau_inj)
    # frequency/damping: within the bank's spacing at min match 0.97 -- equal-tau modes
    # lose 3 % match at df/f = 0.25/Q, equal-f modes at dtau/tau = 0.5 (sech law);
    # allow twice the half-spacing for noise at SNR 20.
    q = np.pi * f_inj * tau_inj
    assert np.all(np.abs(trig.f220_hz / f_inj - 1) <= 0.5 / q)
    assert np.all(np.abs(np.log(trig.tau220_s / tau_inj)) <= 0.5)


def test_chunked_filter_equals_single_fft_and_the_plain_filter():
    # Long data processed in overlapping chunks must give exactly the linear correlation;
    # in single precision (the default) to 1e-5, in double to 1e-10.  Both agree with the
    # plain double-precision full-band filter (snr_series: whitened templates, one FFT)
    # to 1e-3, the whitening filter's truncation in that filter (energy 1e-6 left out),
    # and the probe's on-grid values are the filter's own to rounding.
    from ringsearch.search.probe import Probe

    rng = np.random.default_rng(3)
    cond = white_data(40.0, FS, rng, f_high=900.0, taper_hz=20.0)
    f, tau = np.array([[250.0]]), np.array([[0.01]])
    probe = Probe(cond, f, tau, veto_bins=None)
    kw = {"weighted": probe.weighted, "grams": probe.grams}
    a, _ = filter_peaks(cond, f, tau, 0.01, 0.05, **kw)  # every bin's maximum
    d, _ = filter_peaks(cond, f, tau, 0.01, 0.05, precision="double", **kw)
    import ringsearch.search.correlate as flt

    orig = flt.plan_chunks
    try:
        flt.plan_chunks = lambda *args, **k: orig(*args, **{**k, "max_single_s": 1.0})
        c, _ = filter_peaks(cond, f, tau, 0.01, 0.05, chunk_s=2.0, **kw)
        assert flt.plan_chunks(cond.whitened_values.size, FS, 0.08, 0, 2.0).n_chunks > 5
    finally:
        flt.plan_chunks = orig
    # a time bin straddling a chunk boundary gives one maximum per chunk: keep the larger
    wbin = round(0.05 * FS)

    def per_bin(x):
        return x.assign(b=x["sample"] // wbin).groupby("b").snr_grid.max()

    pa, pc, pd_ = per_bin(a), per_bin(c), per_bin(d)
    assert len(pa) > 10
    assert list(pa.index) == list(pc.index) == list(pd_.index)
    np.testing.assert_allclose(pa.to_numpy(), pc.to_numpy(), rtol=1e-5)
    np.testing.assert_allclose(pa.to_numpy(), pd_.to_numpy(), rtol=1e-5)
    on_grid = np.array([probe.at_sample(0, k).snr for k in d["sample"]])
    np.testing.assert_allclose(on_grid, d["snr_grid"].to_numpy(), rtol=1e-10)
    plain = snr_series(cond, f[0], tau[0])
    lookup = dict(zip(np.round((plain.gps - cond.t0) * FS).astype(int), plain.snr,
                      strict=True))
    ref = np.array([lookup[k] for k in d["sample"]])
    np.testing.assert_allclose(d["snr_grid"].to_numpy(), ref, rtol=1e-3)


def test_snr_series_agrees_with_projection_and_skips_unanalysable_time():
    rng = np.random.default_rng(11)
    cond = white_data(16.0, FS, rng, f_high=900.0)
    cond.analysable_segments = [(cond.t0 + 2.0, cond.t0 + 6.0), (cond.t0 + 9.0, cond.t0 + 14.0)]
    s = snr_series(cond, [200.0], [0.01])
    rel = s.gps - cond.t0
    assert rel.min() >= 2.0 and rel.max() < 14.0
    assert not np.any((rel > 6.0) & (rel < 9.0))
    i = 1234
    # 1e-3: both cut the brick-wall filter where its outside energy is 1e-6
    assert projection_snr(cond, [200.0], [0.01], s.gps[i])["snr"] == pytest.approx(s.snr[i],
                                                                                  rel=1e-3)


def test_singular_template_is_refused_with_reason():
    h = np.ones(2049)
    p = prepare_templates(np.array([[250.0, 250.0]]), np.array([[0.004, 0.0040001]]), h, 4096,
                          4096.0)
    assert not p.ok[0] and "singular" in p.reason[0]
    cond = white_data(8.0, FS, np.random.default_rng(0), f_high=900.0)
    with pytest.raises(InputError, match="refused"):
        projection_snr(cond, [250.0, 250.0], [0.004, 0.0040001], cond.t0 + 4.0)


def test_bad_input_is_one_sentence():
    cond = white_data(0.2, FS, np.random.default_rng(0), f_high=900.0)
    bank = Bank.from_points([200.0], [0.99])
    with pytest.raises(InputError, match="shorter than the longest template"):
        search_triggers(cond, bank)
    cond = white_data(8.0, FS, np.random.default_rng(0), f_high=900.0)
    with pytest.raises(InputError, match="threshold"):
        search_triggers(cond, bank, snr_threshold=-1)
    bad = white_data(8.0, FS, np.random.default_rng(0), f_high=900.0)
    bad.whitened_values[10] = np.nan
    with pytest.raises(InputError, match="NaN"):
        search_triggers(bad, bank)


def test_template_grams_are_the_whitened_inner_products_of_the_basis():
    # Parseval: the Gram matrix of a whitened basis is sum_t (h * u_i)(t) (h * u_j)(t).
    # template_grams computes it as the Toeplitz quadratic form of the whitening's
    # autocorrelation; here it is checked against whitening each basis function by FFT
    # on a grid 64 times longer than the filter (prepare_templates), on design-noise data
    # with its estimated PSD, for one- to three-mode templates of 2 to 300 ms.
    from ringsearch.data.condition import condition
    from ringsearch.data.noise import gaussian_noise
    from ringsearch.search.correlate import local_pad, response_on
    from ringsearch.search.templates import template_grams

    cond = condition(gaussian_noise("design", 64.0, FS, 3), f_low=20.0)
    pad = local_pad(cond)
    for f, tau in ((np.array([[250.0], [60.0]]), np.array([[0.004], [0.03]])),
                   (np.array([[250.0, 242.0, 231.0], [90.0, 88.0, 84.0]]),
                    np.array([[0.004, 0.0013, 0.0008], [0.012, 0.004, 0.0024]]))):
        g = template_grams(f, tau, lambda n: response_on(cond, n, FS), FS, pad)
        n = 1 << int(np.ceil(np.log2(64 * pad)))
        ref = prepare_templates(f, tau, response_on(cond, n, FS), n, FS)
        assert g.ok.all() and ref.ok.all()
        for i in range(f.shape[0]):
            c_new, c_ref = np.linalg.inv(g.cinv[i]), ref.chol[i]
            gram_new, gram_ref = c_new @ c_new.T, c_ref @ c_ref.T
            assert np.abs(gram_new - gram_ref).max() < 1e-5 * np.abs(gram_ref).max()
