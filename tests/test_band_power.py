"""The band-power measurement behind the choice of grouped over band-limited correlations.

Checked against the closed form for white noise: a damped sinusoid started
abruptly has the Lorentzian power spectrum of a one-sided exponential,
``P(f) ~ 1 / (1 + (2 pi (f - f0) tau)^2)`` near f0 (Fourier transform of
``e^{-t/tau}``, e.g. Bracewell, The Fourier Transform and Its Applications,
table of transforms # from memory), so the fraction within ``|f - f0| <= B`` is
``(2/pi) arctan(2 pi B tau)``, and the half-band holding a fraction q is
``tan(q pi / 2) / (2 pi tau)``.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "scripts"))
from bench_band import band_halfwidths  # noqa: E402


@pytest.mark.parametrize("keep", [0.9, 0.99])
def test_half_band_of_a_lorentzian_is_the_closed_form(keep):
    f0, tau = 1000.0, 0.01
    freqs = f0 + np.linspace(-1e5, 1e5, 4_000_001)  # symmetric, wide and fine
    power = 1.0 / (1.0 + (2 * np.pi * (freqs - f0) * tau) ** 2)
    b = band_halfwidths(power[None], freqs, np.array([f0]), keep)[0]
    expected = np.tan(keep * np.pi / 2) / (2 * np.pi * tau)
    # the grid leaves out the far tails, (2/pi)/(2 pi 1e5 tau) ~ 1e-4 of the power
    assert b == pytest.approx(expected, rel=0.03)


def test_a_narrower_spectrum_needs_a_narrower_band():
    freqs = np.linspace(0.0, 4000.0, 40_001)
    f0 = np.array([500.0, 500.0])
    taus = np.array([0.02, 0.002])
    power = 1.0 / (1.0 + (2 * np.pi * (freqs[None] - f0[:, None]) * taus[:, None]) ** 2)
    b = band_halfwidths(power, freqs, f0, 0.9)
    assert b[0] < b[1]
