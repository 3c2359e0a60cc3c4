"""Ringdown waveform model: frequencies, analytic transforms, energy, SNR, bad input."""

from __future__ import annotations

import math

import numpy as np
import pytest
from gwpy.frequencyseries import FrequencySeries
from gwpy.timeseries import TimeSeries
from scipy import signal
from scipy.optimize import curve_fit

from ringsearch.errors import InputError
from ringsearch.physics import ringdown as rd
from ringsearch.physics.ringdown import (
    Mode,
    RingdownSource,
    amplitude_from_energy,
    damped_sinusoid,
    damped_sinusoid_fd,
    kerr_modes,
    mode_polarizations,
    mode_polarizations_fd,
    network_snr,
    optimal_snr,
    scale_to_snr,
)
from ringsearch.physics.units import MPC_M, MSUN_S


def _reference_omega(l, m, n, spin):
    """Kerr M*omega from the independent `qnm` package (Stein 2019, JOSS 4, 1683)."""
    qnm = pytest.importorskip("qnm")
    return complex(qnm.modes_cache(s=-2, l=l, m=m, n=n)(a=spin)[0])


def _sym_y22(theta, phi):
    # spin-weight -2 spherical harmonic (2,2): sqrt(5/(64 pi)) (1 + cos theta)^2 e^{2 i phi}
    # (Goldberg et al. 1967, J. Math. Phys. 8, 2155)  # from memory
    return np.sqrt(5 / (64 * np.pi)) * (1 + np.cos(theta)) ** 2 * np.exp(2j * phi)


# --------------------------------------------------------------------------- layer 1 & 2


def _fit_f_tau(t, h, f_guess, tau_guess):
    def model(t, amp, f, tau, phase):
        return amp * np.exp(-t / tau) * np.cos(2 * np.pi * f * t + phase)

    p, _ = curve_fit(model, t, h, p0=[np.abs(h).max(), f_guess * 1.02, tau_guess * 0.97, 0.1])
    return p[1], p[2]


def test_single_kerr_mode_has_its_frequency_and_damping_time():
    mass, spin = 68.0, 0.69
    w = _reference_omega(2, 2, 1, spin) / (mass * MSUN_S)
    f, tau = w.real / (2 * np.pi), -1 / w.imag
    t = np.arange(0, 10 * tau, 1 / 16384)
    hp, hc = mode_polarizations(t, [w], [0.7 * np.exp(0.4j)])
    for h in (hp, hc):
        f_fit, tau_fit = _fit_f_tau(t, h, f, tau)
        assert f_fit == pytest.approx(f, rel=1e-7)
        assert tau_fit == pytest.approx(tau, rel=1e-7)
    h = damped_sinusoid(t, f, tau, 0.0, phase=1.0)
    f_fit, tau_fit = _fit_f_tau(t, h, f, tau)
    assert (f_fit, tau_fit) == pytest.approx((f, tau), rel=1e-7)


def test_damped_sinusoid_basics():
    t = np.linspace(-0.01, 0.05, 601)
    h = damped_sinusoid(t, 250.0, 0.004, t0=0.0012, phase=0.3, amplitude=2.0)
    assert np.all(h[t < 0.0012] == 0.0)
    on = t >= 0.0012
    s = t[on] - 0.0012
    np.testing.assert_allclose(h[on], 2 * np.exp(-s / 0.004) * np.cos(2 * np.pi * 250 * s + 0.3),
                               rtol=1e-14, atol=1e-15)
    both = damped_sinusoid(t, [250.0, 300.0], [0.004, 0.002], t0=0.0012, phase=[0.3, 0.0])
    assert both.shape == (2, t.size)
    np.testing.assert_allclose(both[0], h / 2, rtol=1e-14, atol=1e-16)
    with pytest.raises(InputError, match="tau_s"):
        damped_sinusoid(t, 250.0, -1.0)


def _aliased(fn, freqs, fs, images):
    """Sum of the analytic transform over spectral images (Poisson summation)."""
    m = np.arange(-images, images + 1)
    return fn((freqs[:, None] + m[None, :] * fs).ravel()).reshape(freqs.size, m.size).sum(1)


@pytest.mark.parametrize("phase", [0.0, 1.1, -np.pi / 2])
def test_damped_sinusoid_transform_matches_fft(phase):
    # The DFT of samples of a function equals the sum of its continuous Fourier transform
    # over all images f + k fs (Poisson summation formula; e.g. Bracewell, "The Fourier
    # Transform and its Applications", ch. 10) -- exact when the start falls between samples.
    fs, n = 4096.0, 8192
    t = np.arange(n) / fs
    t0, f, tau, amp = 0.31234567, 251.0, 0.0042, 1.3
    h = damped_sinusoid(t, f, tau, t0, phase, amp)
    dft = np.fft.rfft(h) / fs
    freqs = np.fft.rfftfreq(n, 1 / fs)
    pick = np.arange(0, freqs.size, 41)
    expect = _aliased(lambda x: damped_sinusoid_fd(x, f, tau, amp, phase, t0), freqs[pick],
                      fs, 20000)
    peak = np.abs(damped_sinusoid_fd(f, f, tau, amp, phase, t0))
    assert np.max(np.abs(dft[pick] - expect)) < 1e-5 * peak


def test_mode_sum_transform_matches_fft_with_mirror_terms():
    fs, n = 8192.0, 16384
    t = np.arange(n) / fs
    # explicit complex frequencies (rad/s) of a (2,2,n) n = 0..2 family near 60 Msun
    w = 2 * np.pi * np.array([290.0, 285.0, 270.0]) - 1j / np.array([4e-3, 1.3e-3, 0.75e-3])
    a = np.array([1.0, 2.0 * np.exp(1j), 1.5j])
    b = np.array([0.3, -0.2j, 0.1 + 0.1j])
    hp, hc = mode_polarizations(t, w, a, b, t0=0.5000123)
    freqs = np.fft.rfftfreq(n, 1 / fs)
    pick = np.arange(0, freqs.size, 97)
    for k, h in enumerate((hp, hc)):
        dft = np.fft.rfft(h) / fs
        expect = _aliased(lambda x, k=k: mode_polarizations_fd(x, w, a, b, t0=0.5000123)[k],
                          freqs[pick], fs, 5000)
        scale = np.max(np.abs(dft))
        assert np.max(np.abs(dft[pick] - expect)) < 2e-5 * scale
    # plain damped sinusoid = one term with a = amp * e^{-i phase}, omega = 2 pi f - i / tau
    x = np.linspace(0, 2000, 101)
    hp1, _ = mode_polarizations_fd(x, [2 * np.pi * 250 - 1j / 0.004], [2 * np.exp(-0.5j)])
    np.testing.assert_allclose(hp1, damped_sinusoid_fd(x, 250, 0.004, 2.0, 0.5), rtol=1e-12)


def _radiated_energy(polarizations, distance_s, duration, dt, n_theta=24, n_phi=12):
    """D^2/(16 pi) * integral over time and sphere of |dh/dt|^2, geometric units (seconds).

    Energy flux formula: Ruiz, Alcubierre, Nunez & Takahashi 2008, GRG 40, 1705, eq. (2.8).
    Time derivative by second-order finite differences at steps dt and 2 dt combined by
    Richardson extrapolation (fourth order), time integral by Simpson's rule, theta by
    Gauss-Legendre in cos(theta), phi by the trapezoid rule (exact for the e^{i k phi},
    |k| <= 4, that appear).
    """
    from scipy.integrate import simpson

    x, wx = np.polynomial.legendre.leggauss(n_theta)
    phis = np.arange(n_phi) * 2 * np.pi / n_phi
    t = np.arange(0.0, duration, dt)
    total = 0.0
    for theta, w_theta in zip(np.arccos(x), wx, strict=True):
        for phi in phis:
            hp, hc = polarizations(t, theta, phi)
            h = hp - 1j * hc
            fine = np.gradient(h, dt, edge_order=2)[::2]
            coarse = np.gradient(h[::2], 2 * dt, edge_order=2)
            hdot = (4 * fine - coarse) / 3
            total += w_theta * (2 * np.pi / n_phi) * simpson(np.abs(hdot) ** 2, x=t[::2])
    return distance_s**2 / (16 * np.pi) * total


def test_energy_of_spherical_mode_with_mirror_equals_epsilon_m():
    # Explicit angular factors: the (2,2) spherical harmonic, exact at spin 0
    mass, eps, dist = 50.0, 0.03, 300.0
    w_hat = _reference_omega(2, 2, 0, 0.0)
    w = w_hat / (mass * MSUN_S)
    c = amplitude_from_energy(eps, w_hat) * mass * MSUN_S / (dist * MPC_M / 2.99792458e8)
    tau = -1 / w.imag

    def pol(t, theta, phi):
        return mode_polarizations(t, [w], [c * _sym_y22(theta, phi)],
                                  [c * _sym_y22(np.pi - theta, phi)])

    e = _radiated_energy(pol, dist * MPC_M / 2.99792458e8, 40 * tau, tau / 2000, 8, 6)
    assert e / (mass * MSUN_S) == pytest.approx(eps, rel=1e-6)


def test_optimal_snr_frequency_domain_equals_whitened_time_domain_sum():
    # Coloured Gaussian noise n = (b/a) * white(sigma): one-sided PSD
    # S(f) = 2 sigma^2 dt |B/A|^2 (Wiener-Khinchin for a linear filter).  The whitening
    # filter a/b (b minimum phase) turns it back into white noise, where the optimal SNR is
    # sqrt(sum_j hw_j^2) / sigma (detection theory: matched filter in white noise).
    fs, n, sigma = 2048.0, 8192, 3e-22
    b, a = [1.0, -0.5, 0.2], [1.0, -1.2, 0.5]
    t = np.arange(n) / fs
    h = (damped_sinusoid(t, 180.0, 0.006, 1.00017, 0.4, 1e-21)
         + damped_sinusoid(t, 175.0, 0.002, 1.00017, -1.0, 2e-21))
    white = signal.lfilter(a, b, h)
    rho_td = math.sqrt(np.sum(white**2)) / sigma
    freqs = np.fft.rfftfreq(n, 1 / fs)
    _, resp = signal.freqz(b, a, worN=freqs, fs=fs)
    psd = FrequencySeries(2 * sigma**2 / fs * np.abs(resp) ** 2, frequencies=freqs)
    rho_fd = optimal_snr(TimeSeries(h, sample_rate=fs), psd, f_low=0.0)
    assert rho_fd == pytest.approx(rho_td, rel=1e-3)


def test_optimal_snr_band_and_bad_input():
    fs = 4096.0
    h = TimeSeries(damped_sinusoid(np.arange(4096) / fs, 250.0, 0.004, 0.2), sample_rate=fs)
    psd = FrequencySeries(np.full(2049, 1e-46), df=1.0)
    full = optimal_snr(h, psd, 0.0)
    band = optimal_snr(h, psd, 200.0, 300.0)
    assert 0 < band < full
    with pytest.raises(InputError, match="f_high"):
        optimal_snr(h, psd, 300.0, 200.0)
    bad = FrequencySeries(np.zeros(2049), df=1.0)
    with pytest.raises(InputError, match="psd"):
        optimal_snr(h, bad, 20.0)
    short = FrequencySeries(np.ones(100), df=1.0)
    with pytest.raises(InputError, match="psd covers"):
        optimal_snr(h, short, 20.0)
    nan = TimeSeries(np.full(16, np.nan), sample_rate=fs)
    with pytest.raises(InputError, match="NaN"):
        optimal_snr(nan, psd)


def test_redshift_matches_astropy_inversion():
    from astropy import units as u
    from astropy.cosmology import Planck18, z_at_value

    for d in (10.0, 440.0, 5000.0):
        z = float(z_at_value(Planck18.luminosity_distance, d * u.Mpc))
        assert float(rd.redshift_from_distance(d)) == pytest.approx(z, rel=1e-5)
    # GW150914: D ~ 440 Mpc, z ~ 0.09 (Abbott et al. 2016, PRL 116, 061102)  # from memory
    assert float(rd.redshift_from_distance(440.0)) == pytest.approx(0.09, abs=0.01)
    assert rd.detector_frame_mass(rd.source_frame_mass(70.0, 800.0), 800.0) == pytest.approx(70)
    with pytest.raises(InputError, match="distance"):
        rd.redshift_from_distance(-3.0)


# --------------------------------------------------------------------------- Kerr layer


def _source(**kw):
    base = dict(mass=68.0, spin=0.69, distance=440.0, epsilon=0.02, t0=1126259462.4221,
                ra=1.95, dec=-1.27, psi=0.8, inclination=2.6, azimuth=0.3)
    base.update(kw)
    return RingdownSource(**base)


def test_kerr_source_frequencies_match_reference_package():
    src = _source(modes=kerr_modes(2, extra={(3, 3, 0): 0.1, (2, 1, 0): 0.05j,
                                               (4, 4, 0): 0.02}))
    f, tau = src.f_tau()
    for k, m in enumerate(src.modes):
        w = _reference_omega(m.l, m.m, m.n, 0.69) / (68.0 * MSUN_S)
        assert f[k] == pytest.approx(w.real / (2 * np.pi), rel=1e-4), m.label
        assert tau[k] == pytest.approx(-1 / w.imag, rel=1e-4), m.label
    # GW150914: f ~ 251 Hz, tau ~ 4 ms (Abbott et al. 2016, PRL 116, 221101)  # from memory
    assert f[0] == pytest.approx(251, abs=10) and tau[0] == pytest.approx(4e-3, abs=0.5e-3)


def test_kerr_single_mode_fit_and_projection():
    src = _source(modes=(Mode(2, 2, 0),))
    ts = src.project("H1", 16384.0)
    t = ts.times.value - src.arrival_time("H1")
    on = t >= 0
    f, tau = src.f_tau()
    f_fit, tau_fit = _fit_f_tau(t[on], ts.value[on], f[0], tau[0])
    assert (f_fit, tau_fit) == pytest.approx((f[0], tau[0]), rel=1e-7)
    assert np.all(ts.value[~on] == 0.0)
    assert ts.name == "H1"


@pytest.mark.parametrize("lmn", [(2, 2, 3), (3, 3, 0), (2, 1, 0), (4, 4, 0)])
def test_each_single_mode_has_the_reference_frequency_and_damping_time(lmn):
    # (2,2,0) carries the scale but is switched off (ratio 0) so only one mode rings
    src = _source(modes=(Mode(2, 2, 0, ratio=0.0), Mode(*lmn)), t0=0.0, inclination=1.0)
    w = _reference_omega(*lmn, 0.69) / (68.0 * MSUN_S)
    f, tau = w.real / (2 * np.pi), -1 / w.imag
    t = np.arange(0, 12 * tau, 1 / 32768)
    hp, _ = src.polarizations(t)
    f_fit, tau_fit = _fit_f_tau(t, hp, f, tau)
    # the shipped table interpolates the Kerr spectrum; the reference solves it directly
    assert f_fit == pytest.approx(f, rel=1e-4)
    assert tau_fit == pytest.approx(tau, rel=1e-4)


def test_kerr_energy_with_spheroidal_harmonics_equals_epsilon_m():
    src = _source(modes=(Mode(2, 2, 0),), spin=0.8, epsilon=0.015, mass=40.0, t0=0.0)
    tau = src.f_tau()[1][0]
    d_s = src.distance * MPC_M / 2.99792458e8

    def pol(t, theta, phi):
        return RingdownSource(**{**_kw(src), "inclination": theta, "azimuth": phi}
                              ).polarizations(t)

    e = _radiated_energy(pol, d_s, 40 * tau, tau / 2000, n_theta=16, n_phi=6)
    assert e / (src.mass * MSUN_S) == pytest.approx(0.015, rel=1e-6)


def _kw(src):
    return dict(mass=src.mass, spin=src.spin, distance=src.distance, epsilon=src.epsilon,
                modes=src.modes, t0=src.t0, ra=src.ra, dec=src.dec, psi=src.psi,
                inclination=src.inclination, azimuth=src.azimuth)


def test_equatorial_reflection_symmetry():
    # non-precessing remnant: h_plus even, h_cross odd under theta -> pi - theta
    src = _source(modes=kerr_modes(3, ratios=[1.5, 2, 1], phases=[0.1, 2, 3],
                                   extra={(3, 3, 0): 0.2}), t0=0.0)
    mirror = RingdownSource(**{**_kw(src), "inclination": np.pi - src.inclination})
    t = np.linspace(0, 0.02, 200)
    hp1, hc1 = src.polarizations(t)
    hp2, hc2 = mirror.polarizations(t)
    np.testing.assert_allclose(hp1, hp2, atol=1e-12 * np.abs(hp1).max())
    np.testing.assert_allclose(hc1, -hc2, atol=1e-12 * np.abs(hc1).max())


def test_detector_transform_matches_fft_and_snr_paths_agree():
    src = _source(modes=kerr_modes(2, ratios=[2.0, 3.0], phases=[1.0, -2.0]))
    fs = 4096.0
    epoch = math.floor(src.t0) - 1
    ts = src.project("L1", fs, epoch=epoch, duration=4.0)
    dft = np.fft.rfft(ts.value) / fs
    freqs = np.fft.rfftfreq(ts.size, 1 / fs)
    pick = np.arange(0, freqs.size, 53)
    expect = _aliased(lambda x: src.detector_strain_fd("L1", x, epoch=epoch), freqs[pick], fs,
                      5000)
    assert np.max(np.abs(dft[pick] - expect)) < 2e-5 * np.max(np.abs(dft))
    # The optimal SNR of a sampled series is that of its DFT, i.e. of the aliased spectrum
    # checked above; the analytic (continuous-signal) SNR differs from it by the aliasing
    # of the start discontinuity's 1/f tail (relative size ~ (pi^2/3) (f/fs)^2 where that
    # tail dominates).  For loud short overtones that is ~1%; for the (2,2,0) mode alone it
    # is below 1e-3 at 4096 Hz:
    f = np.arange(0, 2048.25, 0.25)
    psd = FrequencySeries(1e-46 * (1 + (60 / np.maximum(f, 1)) ** 4 + (f / 300) ** 2),
                          frequencies=f)
    one = _source(modes=(Mode(2, 2, 0),))
    ts1 = one.project("L1", fs, epoch=epoch, duration=4.0)
    rho_fd = network_snr(one, {"L1": psd}, 20.0, 1500.0)["L1"]
    assert optimal_snr(ts1, psd, 20.0, 1500.0) == pytest.approx(rho_fd, rel=1e-3)


def test_scale_to_snr_and_network():
    src = _source(modes=kerr_modes(1))
    f = np.arange(0, 2048.25, 0.25)
    psd = FrequencySeries(np.full(f.size, 1e-46), frequencies=f)
    loud = scale_to_snr(src, 25.0, {"H1": psd, "L1": psd, "V1": psd})
    snr = network_snr(loud, {"H1": psd, "L1": psd, "V1": psd})
    assert snr["network"] == pytest.approx(25.0, rel=1e-10)
    assert snr["network"] ** 2 == pytest.approx(snr["H1"] ** 2 + snr["L1"] ** 2 + snr["V1"] ** 2)
    # strain scales as 1/distance
    assert loud.amplitude_220 * loud.distance == pytest.approx(src.amplitude_220 * src.distance)
    assert src.mass_source == pytest.approx(68.0 / (1 + src.redshift))


def test_sub_sample_start_is_exact():
    src = _source(modes=kerr_modes(1), t0=1000.0 + 0.3 / 4096)
    ts = src.project("V1", 4096.0)
    arrival = src.arrival_time("V1")
    times = ts.times.value
    assert times[0] <= arrival < times[0] + 1 / 4096
    expect = src.detector_strain("V1", times)
    np.testing.assert_array_equal(ts.value, expect)
    assert ts.value[0] == 0.0 and ts.value[1] != 0.0


@pytest.mark.parametrize("kw, word", [
    (dict(spin=1.0), "spin"), (dict(spin=-0.1), "spin"), (dict(mass=0.0), "mass"),
    (dict(mass=-5.0), "mass"), (dict(distance=0.0), "distance"), (dict(epsilon=0.0), "epsilon"),
    (dict(epsilon=1.0), "epsilon"), (dict(mass=float("nan")), "mass"),
    (dict(modes=(Mode(2, 2, 1),)), "2,2,0"),
])
def test_bad_source_input(kw, word):
    with pytest.raises(InputError, match=word):
        _source(**kw)


def test_bad_modes_and_sample_rate():
    with pytest.raises(InputError, match="overtones"):
        kerr_modes(8)
    with pytest.raises(InputError, match="ratios"):
        kerr_modes(2, ratios=[1.0])
    with pytest.raises(InputError, match="not allowed"):
        Mode(2, -2, 0)
    with pytest.raises(InputError, match="detector"):
        _source().project("X7")
    light = _source(mass=10.0, modes=kerr_modes(7))
    with pytest.raises(InputError, match=r"sample rate 2048 Hz is too low for mode \(2,2,"):
        light.project("H1", 2048.0)


def test_top_level_optimal_snr_is_this_function():
    import ringsearch

    assert ringsearch.optimal_snr is optimal_snr
