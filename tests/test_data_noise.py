"""Synthetic noise and PSD models: reproducibility, PSD convention, no edge artefacts."""

from __future__ import annotations

import numpy as np
import pytest

from ringsearch.data.noise import (
    design_psd,
    flat_psd,
    gaussian_noise,
    interpolate_psd,
    psd_from_file,
)
from ringsearch.errors import InputError
from ringsearch.physics.units import C_SI, MPC_M, MSUN_S


def test_same_seed_same_bytes_and_generator_equivalence():
    a = gaussian_noise("design", 4.0, 2048, 11, gps_start=5.0, detector="L1")
    b = gaussian_noise("design", 4.0, 2048, 11, gps_start=5.0, detector="L1")
    c = gaussian_noise("design", 4.0, 2048, 12, gps_start=5.0, detector="L1")
    d = gaussian_noise("design", 4.0, 2048, np.random.default_rng(11), gps_start=5.0,
                       detector="L1")
    assert a.value.tobytes() == b.value.tobytes()
    assert a.value.tobytes() == d.value.tobytes()
    assert a.value.tobytes() != c.value.tobytes()
    assert a.name == "L1" and str(a.channel) == "L1:STRAIN"
    assert float(a.t0.value) == 5.0 and a.size == 8192 and float(a.sample_rate.value) == 2048


def test_flat_psd_gives_the_variance_of_the_one_sided_convention():
    # One-sided PSD S of white noise sampled at fs has variance S * fs / 2 (Parseval).
    # With S = 2/fs the samples are N(0, 1): 2**18 samples give a variance within
    # 5 standard errors (sqrt(2/n) = 0.0028) of 1; false-failure probability ~6e-7.
    fs = 1024.0
    x = gaussian_noise(flat_psd([0.0, fs / 2], 2.0 / fs), 256.0, fs, 3).value
    assert abs(np.var(x) - 1.0) < 5 * np.sqrt(2.0 / x.size)
    # Samples of white noise are uncorrelated (lag-1 correlation ~ N(0, 1/n)), 5 sigma.
    assert abs(np.corrcoef(x[:-1], x[1:])[0, 1]) < 5 / np.sqrt(x.size)


def test_no_circular_wrap_between_last_and_first_sample():
    # A frequency-domain draw of length N is periodic: its last sample runs smoothly
    # into its first, so for strongly coloured noise corr(x[-1], x[0]) would be as
    # high as between neighbours.  Our noise is a linear (not circular) filtering,
    # so across 200 realisations the correlation is N(0, 1/sqrt(200)); |c| < 0.35 is
    # a 5-sigma bound (false-failure probability ~6e-7).
    first, last, second = [], [], []
    rng = np.random.default_rng(2024)
    for _ in range(200):
        x = gaussian_noise("design", 1.0, 256, rng, filter_duration=2.0).value
        first.append(x[0])
        second.append(x[1])
        last.append(x[-1])
    assert abs(np.corrcoef(first, last)[0, 1]) < 0.35
    assert np.corrcoef(first, second)[0, 1] > 0.9  # neighbours are strongly correlated


def test_design_curve_matches_published_formula_and_binary_neutron_star_range():
    # Ajith (2011) PRD 84, 084037 eq. 4.7 at x = 1 (f = 245.4 Hz):
    # S = 1e-49 (1 - 5 + 111 * 0.5 / 1.5) = 3.3e-48 /Hz.   # from memory
    assert design_psd([245.4]).value[0] == pytest.approx(3.3e-48, rel=1e-12)
    # Physical check: the sky-averaged range for a 1.4+1.4 Msun binary neutron star
    # (SNR 8 horizon with the inspiral amplitude |h(f)| ~ f^-7/6, divided by 2.264;
    # Finn & Chernoff 1993, PRD 47, 2198) of the Advanced LIGO design is about
    # 200 Mpc (Abbott et al. 2018, Living Rev. Rel. 21, 3).   # from memory
    f = np.arange(10.0, 1570.0, 0.05)
    s = design_psd(f).value
    mc = (1.4 * 1.4) ** 0.6 / 2.8**0.2 * MSUN_S
    amp2 = (5 / 24) * np.pi ** (-4 / 3) * (C_SI / MPC_M) ** 2 * mc ** (5 / 3)
    rho_at_1mpc = np.sqrt(4 * amp2 * np.sum(f ** (-7 / 3) / s) * 0.05)
    bns_range = rho_at_1mpc / 8 / 2.264
    assert 150 < bns_range < 250
    # Below the 10 Hz lower limit of the fit the curve is held, not divergent.
    assert design_psd([0.0, 5.0]).value.tolist() == [design_psd([10.0]).value[0]] * 2


def test_psd_from_file_reads_asd_and_psd(tmp_path):
    asd = tmp_path / "asd.txt"
    asd.write_text("# f asd\n10 1e-22\n100 4e-24\n1000 1e-23\n")
    p = psd_from_file(asd)
    assert np.allclose(p.value, [1e-44, 1.6e-47, 1e-46], rtol=1e-12)
    psd = tmp_path / "psd.txt"
    psd.write_text("10 1e-44\n100 1.6e-47\n1000 1e-46\n")
    assert np.allclose(psd_from_file(psd).value, p.value, rtol=1e-12)
    assert np.allclose(psd_from_file(psd, asd=False).value, p.value, rtol=1e-12)
    # Log-log interpolation is exact for a power law, and holds the edges.
    grid = interpolate_psd(p, [5.0, 10.0, 2000.0])
    assert np.allclose(grid, [1e-44, 1e-44, 1e-46], rtol=1e-12)


@pytest.mark.parametrize("content, match", [
    ("10 1e-22\n", "two columns"),
    ("10 1e-22 3\n20 1e-22 3\n", "two columns"),
    ("20 1e-22\n10 1e-22\n", "increasing"),
    ("10 -1e-22\n20 1e-22\n", "<= 0"),
    ("ten eleven\n", "not a text table"),
])
def test_psd_file_bad_input(tmp_path, content, match):
    path = tmp_path / "bad.txt"
    path.write_text(content)
    with pytest.raises(InputError, match=match):
        psd_from_file(path)


def test_noise_bad_input():
    with pytest.raises(InputError, match="duration"):
        gaussian_noise("design", -1.0, 4096, 1)
    with pytest.raises(InputError, match="whole number of samples"):
        gaussian_noise("design", 1.00001, 4096, 1)
    with pytest.raises(InputError, match="sample_rate"):
        gaussian_noise("design", 1.0, 0.0, 1)
    with pytest.raises(InputError, match="seed"):
        gaussian_noise("design", 1.0, 4096, -3)
    with pytest.raises(InputError, match="rng_or_seed"):
        gaussian_noise("design", 1.0, 4096, "abc")
    with pytest.raises(InputError, match="detector"):
        gaussian_noise("design", 1.0, 4096, 1, detector="Hanford")
    with pytest.raises(InputError, match="PSD file"):
        gaussian_noise("no_such_psd.txt", 1.0, 4096, 1)
    with pytest.raises(InputError, match="level"):
        flat_psd([1.0], level=0.0)
    # regressions: a NaN or negative start time used to pass silently, an absurd length
    # ended in a MemoryError, and an empty PSD name was reported as the folder "."
    for bad in (float("nan"), -1.0, 1e20):
        with pytest.raises(InputError, match="gps_start"):
            gaussian_noise("design", 1.0, 4096, 1, gps_start=bad)
    with pytest.raises(InputError, match="samples"):
        gaussian_noise("design", 1e9, 4096, 1)
    with pytest.raises(InputError, match="empty"):
        gaussian_noise("", 1.0, 4096, 1)
