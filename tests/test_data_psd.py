"""Welch median PSD estimation: agreement with scipy, with the input PSD, bias, exclusion."""

from __future__ import annotations

import numpy as np
import pytest
from gwpy.timeseries import TimeSeries
from scipy.signal import welch

from ringsearch.data.noise import design_psd, gaussian_noise
from ringsearch.data.psd import estimate_psd, median_bias
from ringsearch.errors import InputError


def test_matches_scipy_welch_median_on_contiguous_data():
    # Reference library: scipy.signal.welch(average="median") on one contiguous stretch.
    x = gaussian_noise("design", 32.0, 1024, 5)
    ours = estimate_psd(x, seglen=2.0, overlap=1.0, window="hann")
    f, ref = welch(x.value, fs=1024, window="hann", nperseg=2048, noverlap=1024,
                   average="median")
    assert np.allclose(ours.frequencies.value, f)
    assert np.allclose(ours.value[1:], ref[1:], rtol=1e-10, atol=0)
    assert ours.n_segments == 31


def test_median_bias_against_monte_carlo():
    # The mean of the median of n exponential variables is median_bias(n) times their mean
    # (Allen et al. 2012, PRD 85, 122006, App. B).  2e5 draws: standard error < 0.0015,
    # tolerance 0.008 (> 5 sigma; false-failure probability < 1e-6 per n).
    rng = np.random.default_rng(99)
    for n in (1, 3, 5, 9):
        med = np.median(rng.exponential(size=(200_000, n)), axis=1).mean()
        assert med == pytest.approx(median_bias(n), abs=0.008)
    assert median_bias(3) == pytest.approx(1 - 1 / 2 + 1 / 3)
    assert median_bias(10**6) == pytest.approx(np.log(2), abs=1e-5)


def _z_scores(est, true, nseg, step=4):
    """Per-bin z-scores of a bias-corrected median PSD estimate.

    The sample median of n exponentials with mean mu has standard deviation
    ~ mu / sqrt(n) (asymptotic variance 1 / (4 n f(m)^2), f the density at the
    median m = mu ln 2); after dividing by the bias (~ln 2) the relative error is
    1 / (ln 2 sqrt(n)).  Every ``step``-th bin is taken so Hann-window leakage does
    not correlate neighbours.
    """
    rel = est[::step] / true[::step] - 1.0
    return rel / (1.0 / (median_bias(nseg) * np.sqrt(nseg)))


def test_estimate_agrees_with_input_psd_within_expected_error():
    fs = 4096
    noise = gaussian_noise("design", 256.0, fs, 17)
    est = estimate_psd(noise, seglen=4.0)
    f = est.frequencies.value
    band = (f >= 20) & (f <= 1900)
    z = _z_scores(est.value[band], design_psd(f[band]).value, est.n_segments)
    # M ~ 1900 nearly independent normal z (127 segments): the mean is N(0, 1/sqrt(M))
    # -> |mean| < 5/sqrt(M); the standard deviation is 1 +- 1/sqrt(2M) = 0.016 ->
    # within 0.9..1.1 (6 sigma).  Measured for seeds 1, 2, 3, 17: std 0.98..1.04,
    # max |z| 3.5..4.6.  Together the false-failure probability is below 1e-5.
    assert abs(z.mean()) < 5 / np.sqrt(z.size)
    assert 0.9 < z.std() < 1.1
    assert np.max(np.abs(z)) < 6.0  # P(any of ~1900 beyond 6 sigma) ~ 4e-6 if normal


def test_median_bias_correction_with_few_segments():
    # With 3 segments an uncorrected median underestimates by 5/6; the corrected one is
    # unbiased.  White noise, PSD 2/fs; averaged over 128 realisations x ~250 bins the
    # mean ratio has standard error ~ 0.75/sqrt(32000 / 2) < 0.006 (neighbouring bins
    # correlated by the window), tolerance 0.04 (> 6 sigma).
    fs = 512
    rng = np.random.default_rng(5)
    ratios = []
    for _ in range(128):
        x = TimeSeries(rng.standard_normal(3 * 2 * fs), sample_rate=fs, name="H1")
        est = estimate_psd(x, seglen=2.0, overlap=0.0)
        assert est.n_segments == 3
        ratios.append(est.value[4:-4] / (2.0 / fs))
    mean_ratio = float(np.mean(ratios))
    assert mean_ratio == pytest.approx(1.0, abs=0.04)
    assert mean_ratio * median_bias(3) == pytest.approx(5 / 6, abs=0.04)


def test_exclusion_window_and_nan_gaps():
    fs = 1024
    clean = gaussian_noise("design", 64.0, fs, 8)
    t = clean.times.value
    # A loud sine-Gaussian burst at t = 32 s, 1e3 times the in-band noise.
    burst = 1e-19 * np.exp(-(((t - 32.0) / 0.1) ** 2)) * np.sin(2 * np.pi * 200 * t)
    loud = TimeSeries(clean.value + burst, t0=0, sample_rate=fs, name="H1")
    a = estimate_psd(loud, exclude=(28.0, 36.0))
    b = estimate_psd(clean, exclude=[(28.0, 36.0)])
    assert np.array_equal(a.value, b.value)  # excluded data never enters
    assert a.n_segments < estimate_psd(clean).n_segments
    # NaN stretches are skipped, not propagated.
    gappy = clean.copy()
    gappy.value[20 * fs:30 * fs] = np.nan
    g = estimate_psd(gappy)
    assert np.all(np.isfinite(g.value)) and g.n_segments == 9 + 16


def test_bad_input():
    x = gaussian_noise("design", 8.0, 1024, 1)
    with pytest.raises(InputError, match="segment length 16 s"):
        estimate_psd(x, seglen=16.0)
    with pytest.raises(InputError, match="overlap"):
        estimate_psd(x, seglen=2.0, overlap=2.0)
    with pytest.raises(InputError, match="window"):
        estimate_psd(x, window="no-such-window")
    with pytest.raises(InputError, match="whole number"):
        estimate_psd(x, seglen=1e-4)
    with pytest.raises(InputError, match="exclude window"):
        estimate_psd(x, exclude=(5.0, 1.0))
    allnan = TimeSeries(np.full(4096, np.nan), sample_rate=1024, name="H1")
    with pytest.raises(InputError, match="no usable stretch"):
        estimate_psd(allnan, seglen=1.0)
