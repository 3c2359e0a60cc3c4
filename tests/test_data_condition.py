"""Conditioning: whitening statistics, the filter_response contract, NaN gaps, gating."""

from __future__ import annotations

import numpy as np
import pytest
from gwpy.timeseries import TimeSeries
from scipy import stats

from ringsearch.data.condition import condition
from ringsearch.data.noise import design_psd, gaussian_noise
from ringsearch.data.psd import estimate_psd, median_bias
from ringsearch.errors import InputError

FS = 4096
PSD = design_psd(np.arange(0.0, FS / 2 + 0.25, 0.25))


@pytest.fixture(scope="module")
def noise():
    return gaussian_noise(PSD, 128.0, FS, 31)


def _inside(cond):
    seg = cond.analysable[0]
    return cond.whitened.crop(float(seg[0]), float(seg[1])).value


@pytest.mark.parametrize("known_psd", [True, False])
def test_whitened_gaussian_noise_is_unit_variance_and_normal(noise, known_psd):
    cond = condition(noise, psd=PSD if known_psd else None)
    # Band-limited variant: with H = 1/sqrt(S fs/2) on [f_low, f_high], whitened noise
    # has variance 2 (f_high - f_low) / fs (Parseval), not 1; cond.sigma records it.
    expected = np.sqrt(2 * (cond.f_high - cond.f_low) / FS)
    assert cond.sigma == pytest.approx(expected, rel=0.02 if not known_psd else 2e-3)
    z = _inside(cond) / cond.sigma
    # ~2 B T = 4e5 independent samples: the variance has standard error 0.0022; a
    # tolerance of 0.015 (0.03 with an estimated PSD, whose errors add) is > 6 sigma.
    assert np.var(z) == pytest.approx(1.0, abs=0.015 if known_psd else 0.03)
    # KS test against N(0, 1) on every 64th sample (band-limited samples 64 apart have
    # correlation < 0.013): false-failure probability 1e-4 by construction of p.
    assert stats.kstest(z[::64], "norm").pvalue > 1e-4
    assert cond.gates.empty


def test_whitened_spectrum_is_flat(noise):
    cond = condition(noise, psd=PSD)
    seg = cond.analysable[0]
    wpsd = estimate_psd(cond.whitened.crop(float(seg[0]), float(seg[1])), seglen=2.0)
    f = wpsd.frequencies.value
    band = (f >= cond.f_low + 2) & (f <= cond.f_high - 2)
    ratio = wpsd.value[band][::4] / (2.0 / FS)  # flat level of the normalised whitening
    n = wpsd.n_segments
    z = (ratio - 1) * median_bias(n) * np.sqrt(n)
    # Same statistics as the PSD-estimate test: ~800 independent z -> 5/sqrt(M) on the
    # mean and 0.85..1.15 on the spread (> 6 sigma); false-failure probability < 1e-5.
    assert abs(z.mean()) < 5 / np.sqrt(z.size)
    assert 0.85 < z.std() < 1.15
    # Below the band nothing is left but window leakage (measured < 1e-5 of the level).
    below = (f >= 1) & (f < cond.f_low - 2)
    assert np.all(wpsd.value[below] < 1e-4 * (2.0 / FS))


def test_filter_response_gives_the_matched_filter_inner_product(noise):
    cond = condition(noise, psd=PSD)
    n = noise.size
    t = np.arange(n) / FS
    f = np.fft.rfftfreq(n, 1 / FS)
    band = (f >= cond.f_low) & (f <= cond.f_high)
    s = design_psd(f).value
    # Direct frequency-domain inner product 4 Re sum d~ conj(u~) / S df (DESIGN.md),
    # with d~ = dt * DFT(d).
    def inner(a, b):
        a_f = np.fft.rfft(a) / FS
        b_f = np.fft.rfft(b) / FS
        return 4 * np.real(np.sum(a_f[band] * np.conj(b_f[band]) / s[band])) * FS / n

    t0 = 64.0
    tail = np.clip(t - t0, 0, None)
    ringdown = np.where(t >= t0, np.exp(-tail / 0.004) * np.cos(2 * np.pi * 251 * tail), 0)
    sinusoid = np.sin(2 * np.pi * 150.0 * t) * np.exp(-(((t - 60) / 2.0) ** 2))
    for u in (1e-21 * ringdown, 1e-22 * sinusoid):
        # <u, u>: both sides whitened with H
        td = np.sum(cond.whiten(u) ** 2)
        assert td == pytest.approx(inner(u, u), rel=1e-3)
        # <d, u>: the conditioned data of d = noise + u against the whitened template
        d = TimeSeries(noise.value + u, t0=0, sample_rate=FS, name="H1")
        dc = condition(d, psd=PSD)
        assert np.sum(dc.whitened.value * dc.whiten(u)) == pytest.approx(
            inner(noise.value + u, u), rel=1e-3)
    # In band H^2 S fs / 2 = 1 up to the smoothing of the truncated filter: measured
    # 1.3e-2 within 2 Hz of f_low (the ideal response has a kink there) and < 2e-4 above.
    h = cond.filter_response(f)
    ratio = h ** 2 * s * FS / 2
    assert np.all(np.abs(ratio[band] - 1) < 0.02)
    assert np.all(np.abs(ratio[band & (f > cond.f_low + 2)] - 1) < 1e-3)
    assert np.all(h[~band] == 0.0)


def test_filter_response_on_any_grid():
    cond = condition(gaussian_noise(PSD, 16.0, FS, 4), psd=PSD)
    grid = np.fft.rfftfreq(3000, 1 / FS)  # an FFT grid the data never used
    off = grid + 1e-3  # not on any FFT grid: evaluated by the direct cosine sum
    a, b = cond.filter_response(grid), cond.filter_response(off)
    inb = (grid > cond.f_low + 1) & (grid < cond.f_high - 1)
    assert np.allclose(a[inb], b[inb], rtol=1e-3)
    # Exact on the grid: the FFT of the taps equals their direct cosine sum.
    k = (cond.taps.size - 1) // 2
    lags = np.arange(-k, k + 1)
    direct = np.array([np.sum(cond.taps * np.cos(2 * np.pi * fr * lags / FS))
                       for fr in grid[inb][::50]])
    assert np.allclose(a[inb][::50], direct, rtol=1e-9)
    assert cond.filter_response(np.array([[100.0, 5.0]])).shape == (1, 2)


def test_nan_gap_is_zero_filled_and_excluded(noise):
    x = noise.value.copy()
    x[50 * FS:54 * FS] = np.nan
    cond = condition(TimeSeries(x, t0=100.0, sample_rate=FS, name="L1"), psd=PSD)
    w = cond.whitened.value
    assert np.all(np.isfinite(w))
    assert np.all(w[50 * FS:54 * FS] == 0.0)
    segs = [(float(a), float(b)) for a, b in cond.analysable]
    e = cond.edge
    assert segs == [(100 + e, 150 - e), (154 + e, 228 - e)]
    assert cond.detector == "L1" and cond.t0 == 100.0
    z = np.concatenate([cond.whitened.crop(a, b).value for a, b in segs]) / cond.sigma
    assert np.var(z) == pytest.approx(1.0, abs=0.02)  # as above, > 6 sigma
    # DQ segments restrict the same way.
    dq = condition(noise, psd=PSD, analysable=[(0.0, 40.0), (60.0, 128.0)])
    assert [(float(a), float(b)) for a, b in dq.analysable] == [(e, 40 - e), (60 + e, 128 - e)]
    assert np.all(dq.whitened.value[41 * FS:59 * FS] == 0.0)


def test_gating_finds_a_loud_glitch_at_the_right_time(noise):
    t = noise.times.value
    # Sine-Gaussian glitch, 300 Hz, Q ~ 9 (tau 5 ms), peak 100 times the noise's
    # standard deviation.
    t_g = 71.3
    amp = 100 * np.std(noise.value)
    glitch = amp * np.exp(-(((t - t_g) / 0.005) ** 2)) * np.sin(2 * np.pi * 300 * t)
    dirty = TimeSeries(noise.value + glitch, t0=0, sample_rate=FS, name="H1")
    cond = condition(dirty, psd=PSD)
    assert len(cond.gates) == 1
    gate = cond.gates.iloc[0]
    assert abs(gate.gps - t_g) < 0.01
    assert gate.peak > cond.gate_threshold == 100 and gate.width_s == 0.5
    # The gated time is no longer analysable; the rest is untouched Gaussian noise.
    assert not any(a <= t_g <= b for a, b in cond.analysable)
    clean = condition(noise, psd=PSD)
    far = (t > 10) & (t < 60)  # the band mask's weak 1/t tails reach here (~1e-3 sigma)
    diff = cond.whitened.value[far] - clean.whitened.value[far]
    assert np.max(np.abs(diff)) < 0.01 * cond.sigma
    near = (t > t_g - 0.2) & (t < t_g + 0.2)
    assert np.max(np.abs(cond.whitened.value[near])) / cond.sigma < 5
    # Without gating the glitch stays in the data.
    ungated = condition(dirty, psd=PSD, gate_threshold=np.inf)
    assert ungated.gates.empty
    assert np.max(np.abs(ungated.whitened.value[near])) / ungated.sigma > 100


def test_default_gate_spares_loud_ringdowns(noise):
    # A ringdown of optimal SNR 80 at 1 kHz (tau 1 ms, the spikiest case considered)
    # peaks near 0.8 * 80 = 64 whitened sigmas: below the default threshold, so the
    # signal the search looks for is never removed.
    t = noise.times.value
    tail = np.clip(t - 64.0, 0, None)
    u = np.where(t >= 64.0, np.exp(-tail / 0.001) * np.cos(2 * np.pi * 1000 * tail), 0.0)
    clean = condition(noise, psd=PSD)
    u *= 80 / np.sqrt(np.sum(clean.whiten(u) ** 2))
    cond = condition(TimeSeries(noise.value + u, t0=0, sample_rate=FS, name="H1"), psd=PSD)
    assert cond.gates.empty
    assert 40 < np.max(np.abs(cond.whitened.value)) / cond.sigma < cond.gate_threshold


def test_gaussian_noise_is_gated_at_the_rate_the_threshold_implies(noise):
    # At the default threshold (100 sigma) the chance per sample underflows to 0:
    # no gate is expected.
    assert condition(noise, psd=PSD).gates.empty
    # At 4 sigma: P(|z| > 4) = 6.3e-5 per sample; each gate needs at least one such
    # sample, so the count is at most Poisson with mean 6.3e-5 * n_samples (~33).  The
    # 1 - 1e-6 quantile bounds it (false-failure probability 1e-6).
    cond = condition(noise, psd=PSD, gate_threshold=4.0)
    n_inside = sum(float(b - a) for a, b in condition(noise, psd=PSD).analysable) * FS
    mean = 2 * stats.norm.sf(4.0) * n_inside
    assert len(cond.gates) <= stats.poisson.ppf(1 - 1e-6, mean)
    assert np.all(cond.gates.peak > 4.0)


def test_conditioning_is_reproducible(noise):
    a = condition(noise)
    b = condition(noise)
    assert a.whitened.value.tobytes() == b.whitened.value.tobytes()
    assert a.psd.value.tobytes() == b.psd.value.tobytes()


def test_psd_exclusion_changes_only_the_psd_input():
    x = gaussian_noise(PSD, 32.0, FS, 2)
    a = condition(x, psd_exclude=(14.0, 18.0))
    assert a.psd.n_segments < condition(x).psd.n_segments


def test_bad_input(noise):
    short = gaussian_noise(PSD, 2.0, FS, 1)
    with pytest.raises(InputError, match="segment length 4 s"):
        condition(short)
    with pytest.raises(InputError, match="f_high"):
        condition(noise, f_high=3000.0)
    with pytest.raises(InputError, match="f_high"):
        condition(noise, f_low=500.0, f_high=400.0)
    with pytest.raises(InputError, match="f_low"):
        condition(noise, f_low=-1.0)
    with pytest.raises(InputError, match="truncation"):
        condition(noise, truncation=8.0)
    with pytest.raises(InputError, match="gate_threshold"):
        condition(noise, gate_threshold=0.0)
    allnan = TimeSeries(np.full(8 * FS, np.nan), sample_rate=FS, name="H1")
    with pytest.raises(InputError, match="no finite data"):
        condition(allnan)


def test_gw150914_whitened_peak_is_the_event(gw150914_files):
    from conftest import GW150914_GPS

    from ringsearch.data.io import read_strain_with_quality

    strain, segs = read_strain_with_quality(gw150914_files["H1"])
    cond = condition(strain, analysable=segs)
    assert cond.gates.empty  # the event must not be gated away
    inside = cond.whitened.crop(*cond.analysable[0])
    z = np.abs(inside.value) / cond.sigma
    # The loudest whitened H1 sample lies at the published merger time
    # (Abbott et al. 2016, PRL 116, 061102: GPS 1126259462.42), within 0.1 s.
    assert abs(inside.times.value[np.argmax(z)] - GW150914_GPS) < 0.1
    # Whitened real noise is near unit variance (lines make it slightly non-white).
    assert 0.8 < np.std(inside.value) / cond.sigma < 1.2
