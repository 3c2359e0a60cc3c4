"""Multi-mode templates: overtones add SNR, and the fitted amplitudes are right."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from test_search_support import damped_sinusoids, search_triggers, use_reference_qnm, white_data

from ringsearch.search.bank import Bank
from ringsearch.search.correlate import projection_snr

FS = 2048.0


@pytest.fixture(autouse=True)
def _qnm(monkeypatch):
    use_reference_qnm(monkeypatch)


def test_two_overtone_injection_louder_in_n2_bank_and_amplitudes_recovered():
    rng = np.random.default_rng(2026)
    m, chi = 70.0, 0.7
    import ringsearch.search.bank as bank_mod

    f, tau = (np.array(x) for x in zip(*[bank_mod.qnm_f_tau(np.array([m]), np.array([chi]), n)
                                         for n in range(3)], strict=True))
    f, tau = f[:, 0], tau[:, 0]
    # amplitudes of the order found for the (2,2,n) modes of numerical-relativity remnants
    # at the peak (overtones comparable to or larger than the fundamental) # from memory
    amps = np.array([1.0, 1.5 * np.exp(1.0j), 1.0 * np.exp(2.0j)])
    n = int(12 * FS)
    start = 6.0
    h = damped_sinusoids(n, FS, start, f, tau, amps)
    freqs = np.fft.rfftfreq(n, 1 / FS)
    band = (freqs >= 20) & (freqs <= 900)
    hw = np.fft.irfft(np.fft.rfft(h) * band, n)
    scale = 40.0 / np.sqrt(np.sum(hw * hw))  # optimal SNR 40
    cond = white_data(12.0, FS, rng, f_high=900.0, signal=h * scale)
    box = dict(mass=(55.0, 85.0), spin=(0.55, 0.85), f_high=900.0, seed=3)
    bank0 = Bank.from_box(n_overtones=0, **box)
    bank2 = Bank.from_box(n_overtones=2, **box)
    t0 = search_triggers(cond, bank0, 8.0)
    t2 = search_triggers(cond, bank2, 8.0)
    l0, l2 = t0.loc[t0.snr.idxmax()], t2.loc[t2.snr.idxmax()]
    assert abs(l2.gps - (cond.t0 + start)) < 0.01
    # N = 2 captures the overtones' power; one damped sinusoid absorbs most but not all of
    # it (here ~4 % of the SNR).  Both searches see the same noise, so the difference
    # fluctuates far less than one unit of SNR: require 0.5.
    assert l2.snr > l0.snr + 0.5
    assert l2.snr == pytest.approx(40.0, abs=4.0)
    # amplitudes at the true template and start time: ML estimate with covariance G^{-1},
    # so (a_hat - a)^T G (a_hat - a) ~ chi2(6) (Fisher; linear model, Gaussian noise).
    r = projection_snr(cond, f, tau, cond.t0 + start)
    est = np.column_stack([r["amplitudes"].real, r["amplitudes"].imag]).ravel()
    true = np.column_stack([(amps * scale).real, (amps * scale).imag]).ravel()
    d = est - true
    # false-failure probability 1e-3 for this fixed seed
    assert d @ r["gram"] @ d < stats.chi2(6).isf(1e-3)
    # and the fit is informative: the fundamental is measured to better than 25 %
    sd = np.sqrt(np.diag(np.linalg.inv(r["gram"])))
    assert sd[0] < 0.25 * abs(amps[0] * scale)
    # the trigger's fitted amplitudes are on the same scale as the injected ones
    assert l2.amp220_abs == pytest.approx(abs(amps[0] * scale), rel=0.5)
