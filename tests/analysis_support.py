"""Helpers shared by the analysis tests: a smooth coloured PSD, Gaussian noise
drawn from it, its Toeplitz noise model, and a QNM stand-in from published fits."""

from __future__ import annotations

import math

import numpy as np

from ringsearch.analysis.noise_model import toeplitz_noise
from ringsearch.physics.units import MSUN_S

FS = 4096.0

# Berti, Cardoso & Will (2006), PRD 73, 064030, Table VIII fits for (l, m) = (2, 2),
# n = 0, 1, 2: M omega_R = f1 + f2 (1-j)^f3, Q = q1 + q2 (1-j)^q3.  # from memory
BCW = {0: (1.5251, -1.1568, 0.1292, 0.7000, 1.4187, -0.4990),
       1: (1.3673, -1.0260, 0.1628, 0.1000, 0.5436, -0.4731),
       2: (1.3223, -1.0257, 0.1860, -0.1000, 0.4206, -0.4256)}


def bcw_modes(mass, spin, n):
    """Stand-in QNM provider (published fits, a few per cent accurate): (f_hz, tau_s)."""
    f1, f2, f3, q1, q2, q3 = BCW[n]
    mass, spin = np.asarray(mass, float), np.asarray(spin, float)
    f = (f1 + f2 * (1 - spin) ** f3) / (2 * math.pi * mass * MSUN_S)
    return f, (q1 + q2 * (1 - spin) ** q3) / (math.pi * f)


def psd(f):
    """A smooth one-sided test PSD (1/Hz), coloured at both ends of the band."""
    f = np.maximum(np.asarray(f, float), 10.0)
    return 1e-46 * (1.0 + (50.0 / f) ** 2 + (f / 500.0) ** 2)


def coloured_noise(rng, n_total):
    """Stationary Gaussian noise with one-sided PSD :func:`psd`, sampled at FS."""
    f = np.fft.rfftfreq(n_total, 1 / FS)
    x = np.sqrt(n_total * FS * psd(f) / 4) * (rng.standard_normal(len(f))
                                              + 1j * rng.standard_normal(len(f)))
    x[0] = x[-1] = 0.0
    return np.fft.irfft(x, n_total)


def noise_model(n):
    """Toeplitz noise model of :func:`psd` for segments of ``n`` samples."""
    fr = np.fft.rfftfreq(1 << 14, 1 / FS)
    return toeplitz_noise(fr, psd(fr), FS, n, f_low=0.0, f_high=FS / 2)
