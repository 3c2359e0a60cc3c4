"""User-supplied waveforms: reading, scaling to mass and distance, injecting."""

from __future__ import annotations

import json

import h5py
import numpy as np
import pytest
from gwpy.timeseries import TimeSeries
from scipy.optimize import curve_fit

from ringsearch.cli import main
from ringsearch.data.inject import inject, signal_snr
from ringsearch.errors import InputError
from ringsearch.physics.external import ExternalWaveform, load_waveform, read_waveform_file
from ringsearch.physics.ringdown import RingdownSource, kerr_modes
from ringsearch.physics.units import MPC_M, MSUN_M, MSUN_S

GPS = 1126259450.0


def _geometric_table(src: RingdownSource, step_m: float = 0.02, length_m: float = 400.0):
    """(t/M, r h_plus/M, r h_cross/M) of a ringdown source, starting at its t0."""
    t_m = np.arange(0.0, length_m, step_m)
    hp, hc = src.polarizations(t_m * src.mass * MSUN_S, epoch=src.t0)
    scale = src.distance * MPC_M / (src.mass * MSUN_M)
    return t_m, hp * scale, hc * scale


@pytest.mark.parametrize("fmt", ["txt", "csv", "npz", "h5"])
def test_geometric_file_reproduces_the_kerr_model_at_another_mass_and_distance(tmp_path, fmt):
    # A waveform in units of M rescales exactly: h(t; M, D) = (M/D) H(t/M).  Tabulate a
    # ringdown at one mass/distance, load it at another, compare with the model there.
    ref = RingdownSource(50.0, 0.7, 100.0, 0.02, modes=kerr_modes(1), t0=0.0, inclination=0.7)
    t_m, hp, hc = _geometric_table(ref)
    path = tmp_path / f"wave.{fmt}"
    if fmt == "txt":
        np.savetxt(path, np.c_[t_m, hp, hc], header="t/M  rh+/M  rhx/M")
    elif fmt == "csv":
        np.savetxt(path, np.c_[t_m, hp, hc], delimiter=",")
    elif fmt == "npz":
        np.savez(path, time=t_m, h_plus=hp, h_cross=hc)
    else:
        with h5py.File(path, "w") as f:
            f["time"], f["h_plus"], f["h_cross"] = t_m, hp, hc
    target = RingdownSource(80.0, 0.7, 700.0, 0.02, modes=kerr_modes(1), t0=GPS + 0.3,
                            inclination=0.7, ra=1.0, dec=-0.2, psi=0.4)
    wave = load_waveform(path, "geometric", mass=80.0, distance=700.0, t_ref=GPS + 0.3,
                         ra=1.0, dec=-0.2, psi=0.4, align="file")
    times = np.arange(GPS + 0.25, GPS + 0.35, 1 / 4096)
    expect = target.detector_strain("H1", times)
    got = wave.detector_strain("H1", times)
    # cubic-spline interpolation of a table sampled at 0.02 M (~8 us at 80 Msun)
    np.testing.assert_allclose(got, expect, atol=1e-6 * np.abs(expect).max())
    assert wave.support("H1")[0] == pytest.approx(target.arrival_time("H1"), abs=1e-9)


def test_frequency_and_amplitude_scale_with_mass_and_distance(tmp_path):
    # A damped sinusoid with M omega = 0.5 - 0.08i in units of M (Schwarzschild-like):
    # at M = 60 Msun its frequency is 0.5 / (2 pi M G/c^3) and its peak r h / M = 1.
    t_m = np.arange(0.0, 200.0, 0.05)
    h = np.exp(-1j * (0.5 - 0.08j) * t_m)
    path = tmp_path / "ds.txt"
    np.savetxt(path, np.c_[t_m, h.real, -h.imag])
    wave = load_waveform(path, mass=60.0, distance=250.0, align="peak")
    m_s = 60 * MSUN_S

    def model(t, a, f, tau):
        return a * np.exp(-t / tau) * np.cos(2 * np.pi * f * t)

    p, _ = curve_fit(model, wave.time, wave.h_plus, p0=[1e-21, 1300, 0.0035])
    assert p[1] == pytest.approx(0.5 / (2 * np.pi * m_s), rel=1e-8)
    assert p[2] == pytest.approx(m_s / 0.08, rel=1e-8)
    assert p[0] == pytest.approx(60 * MSUN_M / (250 * MPC_M), rel=1e-8)


def test_si_units_rescale_with_reference_distance(tmp_path):
    t = np.linspace(-0.05, 0.05, 4001)
    hp, hc = 1e-21 * np.cos(900 * t) * np.exp(-t**2 / 1e-4), 1e-21 * np.sin(900 * t) * \
        np.exp(-t**2 / 1e-4)
    path = tmp_path / "si.npz"
    np.savez(path, time=t, h_plus=hp, h_cross=hc)
    near = load_waveform(path, "si", t_ref=GPS)
    far = load_waveform(path, "si", distance=400.0, reference_distance=100.0, t_ref=GPS)
    np.testing.assert_allclose(far.h_plus, near.h_plus / 4, rtol=1e-15)
    assert near.max_frequency == pytest.approx(900 / (2 * np.pi), rel=1e-3)


def test_external_waveform_injection_and_snr(tmp_path):
    src = RingdownSource(65.0, 0.68, 300.0, 0.02, modes=kerr_modes(1), t0=GPS + 1.1, ra=0.2,
                         dec=0.5, psi=0.1)
    t_m, hp, hc = _geometric_table(src, step_m=0.01)
    wave = ExternalWaveform(t_m * src.mass * MSUN_S,
                            hp * src.mass * MSUN_M / (src.distance * MPC_M),
                            hc * src.mass * MSUN_M / (src.distance * MPC_M),
                            t_ref=src.t0, ra=0.2, dec=0.5, psi=0.1)
    rng = np.random.default_rng(3)
    noise = TimeSeries(rng.normal(0, 1e-21, 4 * 4096), t0=GPS, sample_rate=4096, name="L1")
    a = inject(noise, wave)
    b = inject(noise, src)
    np.testing.assert_allclose(a.value - noise.value, b.value - noise.value,
                               atol=1e-6 * np.abs(b.value - noise.value).max())
    lo, hi = wave.support("L1")
    t = noise.times.value
    outside = (t < lo) | (t >= hi)
    assert a.value[outside].tobytes() == noise.value[outside].tobytes()
    from gwpy.frequencyseries import FrequencySeries

    f = np.arange(0, 2048.25, 0.25)
    psd = FrequencySeries(1e-46 * (1 + (f / 250) ** 2), frequencies=f)
    # the sampled external waveform and the sampled Kerr model have the same SNR, and the
    # analytic transform agrees up to the aliasing of the start discontinuity, which
    # falls as fs^-2 (2e-4 at 16384 Hz below 800 Hz)
    rho_wave = signal_snr(wave, "L1", psd, 4096.0, f_low=20.0, f_high=800.0)
    assert rho_wave == pytest.approx(signal_snr(src, "L1", psd, 4096.0, f_high=800.0),
                                     rel=1e-6)
    rho_fine = signal_snr(wave, "L1", psd, 16384.0, f_low=20.0, f_high=800.0)
    assert rho_fine == pytest.approx(signal_snr(src, "L1", psd, f_high=800.0), rel=1e-3)


def test_cli_injects_an_external_waveform(tmp_path):
    from ringsearch.data.io import read_strain, write_gwosc_hdf5
    from ringsearch.data.noise import gaussian_noise

    ts = gaussian_noise("design", 8.0, 4096, 5, gps_start=GPS, detector="V1")
    data = write_gwosc_hdf5(ts, tmp_path / "V-V1_SIM-1126259450-8.hdf5")
    t_m = np.arange(-300.0, 100.0, 0.1)
    env = np.exp(-np.abs(t_m) / 30.0)
    path = tmp_path / "bbh.txt"
    np.savetxt(path, np.c_[t_m, 0.3 * env * np.cos(0.4 * t_m), 0.3 * env * np.sin(0.4 * t_m)])
    status = main(["inject", str(data), "--out", str(tmp_path / "o"), "--waveform", str(path),
                   "--mass", "65", "--distance", "500", "--gps", str(GPS + 4), "--ra", "1",
                   "--dec", "0.3", "--psi", "0", "--psd", "design"])
    assert status == 0
    rec = json.loads((tmp_path / "o" / "injection.json").read_text())
    assert rec["source"]["kind"] == "external"
    assert rec["detectors"]["V1"]["optimal_snr"] > 0
    out = read_strain(tmp_path / "o" / rec["detectors"]["V1"]["file"])
    assert np.any(out.value != ts.value)


@pytest.mark.parametrize("content, word", [
    ("0 1\n1 2\n2 3\n3 4\n", "expected 3"),
    ("0 1 1\n2 1 1\n1 1 1\n3 1 1\n", "increase"),
    ("0 1 1\n1 nan 1\n2 1 1\n3 1 1\n", "NaN"),
    ("0 1 1\n1 1 1\n", "at least 4"),
])
def test_bad_waveform_files(tmp_path, content, word):
    path = tmp_path / "bad.txt"
    path.write_text(content)
    with pytest.raises(InputError, match=word):
        read_waveform_file(path)


def test_bad_waveform_arguments(tmp_path):
    path = tmp_path / "w.txt"
    t = np.linspace(0, 100, 400)
    np.savetxt(path, np.c_[t, np.cos(0.5 * t), np.sin(0.5 * t)])
    with pytest.raises(InputError, match="does not exist"):
        load_waveform(tmp_path / "none.txt", mass=10.0, distance=10.0)
    with pytest.raises(InputError, match="needs mass"):
        load_waveform(path, "geometric", distance=100.0)
    with pytest.raises(InputError, match="mass applies"):
        load_waveform(path, "si", mass=10.0)
    with pytest.raises(InputError, match="units"):
        load_waveform(path, "cgs", mass=10.0, distance=1.0)
    with pytest.raises(InputError, match="mass must be positive"):
        load_waveform(path, mass=-1.0, distance=1.0)
    npz = tmp_path / "w.npz"
    np.savez(npz, time=t, h_plus=t)
    with pytest.raises(InputError, match="h_cross"):
        read_waveform_file(npz)
    # 0.5 / M at 10 Msun is 1.6 kHz: too high for 2048 Hz sampling
    wave = load_waveform(path, mass=10.0, distance=100.0)
    with pytest.raises(InputError, match="too low"):
        wave.check_sample_rate(2048.0)
