"""Spin-weighted spheroidal harmonics: zero-spin limit, normalisation, the ODE itself."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad

from ringsearch.errors import InputError
from ringsearch.physics import qnm
from ringsearch.physics.harmonics import spheroidal_harmonic, spin_weighted_spherical


def _closed_form_l2(m, theta, phi):
    """-2Y_2m in closed form, e.g. Wiaux, Jacques & Vandergheynst (2007) / Ajith et al.

    (2007) tables:  # from memory
    -2Y_22 = sqrt(5/(64 pi)) (1 + cos th)^2 e^{2i phi}
    -2Y_21 = sqrt(5/(16 pi)) sin th (1 + cos th) e^{i phi}
    -2Y_20 = sqrt(15/(32 pi)) sin^2 th
    -2Y_2-1 = sqrt(5/(16 pi)) sin th (1 - cos th) e^{-i phi}
    -2Y_2-2 = sqrt(5/(64 pi)) (1 - cos th)^2 e^{-2i phi}
    """
    c, s = np.cos(theta), np.sin(theta)
    table = {
        2: math.sqrt(5 / (64 * math.pi)) * (1 + c) ** 2,
        1: math.sqrt(5 / (16 * math.pi)) * s * (1 + c),
        0: math.sqrt(15 / (32 * math.pi)) * s ** 2,
        -1: math.sqrt(5 / (16 * math.pi)) * s * (1 - c),
        -2: math.sqrt(5 / (64 * math.pi)) * (1 - c) ** 2,
    }
    return table[m] * np.exp(1j * m * phi)


def _goldberg(l, m, theta, s=-2):
    """Goldberg et al. (1967), J. Math. Phys. 8, 2155, eq. (3.1), written out afresh."""
    total = 0.0
    for r in range(l - s + 1):
        if 0 <= r + s - m <= l + s:
            total += (math.comb(l - s, r) * math.comb(l + s, r + s - m) * (-1) ** (l - r - s)
                      / math.tan(theta / 2) ** (2 * r + s - m))
    norm = math.sqrt(math.factorial(l + m) * math.factorial(l - m) * (2 * l + 1)
                     / (4 * math.pi * math.factorial(l + s) * math.factorial(l - s)))
    return (-1) ** m * norm * math.sin(theta / 2) ** (2 * l) * total


@pytest.mark.parametrize("m", range(-2, 3))
def test_zero_spin_reduces_to_closed_form_l2(m):
    theta = np.linspace(0.0, math.pi, 41)
    S = spheroidal_harmonic(2, m, 0, 0.0, theta, phi=0.7)
    np.testing.assert_allclose(S, _closed_form_l2(m, theta, 0.7), atol=1e-12)


@pytest.mark.parametrize(("l", "m"), [(3, 3), (3, -1), (3, 0), (4, 4), (4, -3), (4, 1)])
def test_zero_spin_reduces_to_goldberg(l, m):
    theta = np.linspace(0.05, math.pi - 0.05, 23)
    S = spheroidal_harmonic(l, m, 0, 0.0, theta)
    ref = np.array([_goldberg(l, m, t) for t in theta])
    np.testing.assert_allclose(S, ref, atol=1e-12)


@pytest.mark.parametrize(("l", "m", "n", "spin"),
                         [(2, 2, 0, 0.69), (2, -1, 3, 0.9), (3, 0, 1, 0.5), (4, 4, 0, 0.99),
                          (2, 2, 7, 0.95)])
def test_unit_norm_on_sphere(l, m, n, spin):
    # independent adaptive quadrature over theta (scipy.integrate.quad)
    def integrand(t):
        return abs(spheroidal_harmonic(l, m, n, spin, t)) ** 2 * math.sin(t)

    value, _ = quad(integrand, 0.0, math.pi, limit=200, epsabs=1e-12)
    assert abs(2 * math.pi * value - 1.0) < 1e-9


@pytest.mark.parametrize(("l", "m", "n", "spin"),
                         [(2, 2, 0, 0.69), (2, -2, 1, 0.8), (3, 1, 2, 0.95), (4, -3, 0, 0.6)])
def test_satisfies_teukolsky_angular_equation(l, m, n, spin):
    """Residual of the s = -2 angular Teukolsky equation (Teukolsky 1973, ApJ 185, 635):

    d/du[(1-u^2) S'] + [c^2 u^2 - 2 c s u + s + A - (m + s u)^2 / (1 - u^2)] S = 0,
    with c = chi * M omega and A the separation constant (Leaver's convention).
    """
    s = -2
    w = qnm.kerr_omega(l, m, n, spin)
    A = qnm.separation_constant(l, m, n, spin)
    c = spin * w
    u = np.linspace(-0.8, 0.8, 17)
    h = 1e-4

    def S(x):
        return spheroidal_harmonic(l, m, n, spin, np.arccos(x))

    d1 = (S(u + h) - S(u - h)) / (2 * h)
    d2 = (S(u + h) - 2 * S(u) + S(u - h)) / h ** 2
    lhs = (1 - u ** 2) * d2 - 2 * u * d1 + (
        c * c * u * u - 2 * c * s * u + s + A - (m + s * u) ** 2 / (1 - u ** 2)) * S(u)
    scale = np.max(np.abs(A * S(u)))
    assert np.max(np.abs(lhs)) < 1e-5 * scale


def test_phase_convention_and_continuity_in_spin():
    theta = np.linspace(0.0, math.pi, 200)
    dth = theta[1] - theta[0]
    for spin in (0.3, 0.9):
        S = spheroidal_harmonic(2, 2, 0, spin, theta)
        Y = spin_weighted_spherical(2, 2, theta).real
        overlap = 2 * math.pi * np.sum(Y * S * np.sin(theta)) * dth
        assert abs(overlap.imag) < 1e-3 * abs(overlap) and overlap.real > 0.9
    a = spheroidal_harmonic(2, 1, 1, 0.5, theta)
    b = spheroidal_harmonic(2, 1, 1, 0.5001, theta)
    assert np.max(np.abs(a - b)) < 1e-3


def test_vectorised_over_theta_and_phi():
    theta = np.linspace(0.1, 3.0, 12).reshape(3, 4)
    out = spheroidal_harmonic(3, -2, 0, 0.4, theta, phi=np.zeros((3, 4)))
    assert out.shape == (3, 4) and out.dtype == complex


@pytest.mark.parametrize("kwargs", [{"theta": -0.1}, {"theta": float("nan")}, {"theta": 4.0},
                                    {"spin": 1.0}, {"m": 3}])
def test_bad_input(kwargs):
    args = {"l": 2, "m": 2, "n": 0, "spin": 0.5, "theta": 1.0} | kwargs
    with pytest.raises(InputError):
        spheroidal_harmonic(**args)
