"""Spin-weighted (s = -2) spheroidal harmonics of the Kerr quasinormal modes.

A QNM's angular pattern is the spin-weighted spheroidal harmonic
``S_lmn(theta) e^{i m phi}`` at the spheroidicity ``c = a omega = chi M omega``
of that mode.  It is built here from the same Leaver angular series whose
continued fraction fixes the separation constant (Leaver 1985, Proc. R. Soc.
Lond. A 402, 285, eqs. 18-21)::

    S(u) = e^{c u} (1 + u)^{k1} (1 - u)^{k2} sum_k a_k (1 + u)^k,   u = cos(theta),
    k1 = |m - s| / 2,  k2 = |m + s| / 2,

with the coefficients ``a_k`` the minimal solution of Leaver's three-term
recurrence (computed by backward recurrence of the ratios, which is stable
for a minimal solution), ``omega`` and ``A`` taken from the shipped table.
scipy has spheroidal functions only for spin weight 0 and real ``c``, hence
this module.

Normalisation and phase convention
----------------------------------
``integral |S|^2 dOmega = 1`` over the sphere.  The overall phase is fixed so
that the projection of ``S`` onto the spin-weighted spherical harmonic
``-2Y_lm`` (Goldberg et al. 1967, J. Math. Phys. 8, 2155 convention) is real
and positive; at zero spin ``S`` therefore equals ``-2Y_lm`` exactly, and the
convention is continuous in spin.
"""

from __future__ import annotations

import functools
import math

import numpy as np

from ringsearch.errors import InputError
from ringsearch.physics import leaver, qnm

_S = leaver.SPIN_WEIGHT
#: Gauss-Legendre nodes for the normalisation integrals over u = cos(theta).
_QUAD = np.polynomial.legendre.leggauss(96)


def spin_weighted_spherical(l: int, m: int, theta, phi=0.0, s: int = _S):
    """Spin-weighted spherical harmonic ``sY_lm(theta, phi)`` (Goldberg et al. 1967).

    Parameters
    ----------
    l, m : int
        Multipole indices (``l >= |s|``, ``|m| <= l``).
    theta, phi : float or array_like
        Polar and azimuthal angles in radians.
    s : int
        Spin weight (default -2).

    Examples
    --------
    >>> v = spin_weighted_spherical(2, 2, 0.0)   # -2Y_22 at the pole
    >>> round(abs(v), 6)
    0.630783
    """
    theta = np.asarray(theta, dtype=float)
    half = theta / 2.0
    pref = (-1.0) ** m * math.sqrt(
        math.factorial(l + m) * math.factorial(l - m) * (2 * l + 1)
        / (4 * math.pi * math.factorial(l + s) * math.factorial(l - s)))
    total = np.zeros_like(theta, dtype=complex)
    sin_h, cos_h = np.sin(half), np.cos(half)
    for r in range(0, l - s + 1):
        j = r + s - m
        if j < 0 or j > l + s:
            continue
        # sin^{2l}(x) cot^{2r+s-m}(x) written without dividing by sin at the poles
        p = 2 * r + s - m
        term = (math.comb(l - s, r) * math.comb(l + s, j) * (-1.0) ** (l - r - s)
                * sin_h ** (2 * l - p) * cos_h ** p)
        total = total + term
    out = pref * total * np.exp(1j * m * np.asarray(phi, dtype=float))
    return complex(out) if np.ndim(out) == 0 else out


def _leaver_series(l: int, m: int, c: complex, A: complex, depth: int) -> np.ndarray:
    """Minimal solution a_0 = 1, a_1, ... of Leaver's angular recurrence.

    As in the inverted continued fraction, the first ``N0 = l - max(|m|, 2)``
    coefficients come from the forward recurrence and the rest from ratios
    computed by backward recurrence (exact at ``c = 0``, where the series
    terminates at ``k = N0``).
    """
    alpha, beta, gamma = leaver._angular_coefficients(c, m, A, depth)
    n0 = l - max(abs(m), abs(_S))
    a = np.zeros(depth + 1, complex)
    a[0] = 1.0
    for k in range(n0):
        prev = a[k - 1] if k > 0 else 0.0
        a[k + 1] = -(beta[k] * a[k] + gamma[k] * prev) / alpha[k]
    ratios = np.zeros(depth + 1, complex)  # ratios[k] = a_{k+1} / a_k
    r = 0j
    for k in range(depth, n0, -1):
        r = -gamma[k] / (beta[k] + alpha[k] * r)
        ratios[k - 1] = r
    for k in range(n0 + 1, depth + 1):
        a[k] = a[k - 1] * ratios[k - 1]
    return a


def _evaluate(m: int, c: complex, coeffs: np.ndarray, u: np.ndarray) -> np.ndarray:
    k1 = abs(m - _S) / 2.0
    k2 = abs(m + _S) / 2.0
    x = 1.0 + u
    series = np.polynomial.polynomial.polyval(x, coeffs)
    return np.exp(c * u) * x ** k1 * np.clip(1.0 - u, 0.0, None) ** k2 * series


@functools.lru_cache(maxsize=256)
def _harmonic_data(l: int, m: int, n: int, spin: float) -> tuple[complex, np.ndarray]:
    """Spheroidicity and normalised, phase-fixed series coefficients of one mode."""
    omega = qnm.kerr_omega(l, m, n, spin)
    A = qnm.separation_constant(l, m, n, spin)
    c = spin * omega
    depth = leaver.angular_depth(c)
    coeffs = _leaver_series(l, m, c, A, depth)
    u, w = _QUAD
    S = _evaluate(m, c, coeffs, u)
    norm = math.sqrt(2 * math.pi * float(np.sum(w * np.abs(S) ** 2)))
    Y = spin_weighted_spherical(l, m, np.arccos(u)).real
    overlap = 2 * math.pi * np.sum(w * Y * S)
    phase = overlap / abs(overlap)
    return c, coeffs / (norm * phase)


def spheroidal_harmonic(l: int, m: int, n: int, spin: float, theta, phi=0.0):
    """Spin-weight -2 spheroidal harmonic of QNM (l, m, n) at ``c = chi M omega_lmn``.

    Parameters
    ----------
    l, m, n : int
        The mode (as in :func:`ringsearch.physics.qnm.kerr_omega`).
    spin : float
        Dimensionless spin within the table's range.
    theta : float or array_like
        Polar angle(s) in radians, ``0 <= theta <= pi``.
    phi : float or array_like
        Azimuthal angle(s) in radians (broadcast with ``theta``).

    Returns
    -------
    complex ndarray
        ``S_lmn(theta) exp(i m phi)``, normalised to unit norm on the sphere,
        phase such that its projection on ``-2Y_lm`` is real and positive.

    Examples
    --------
    >>> import numpy as np
    >>> S = spheroidal_harmonic(2, 2, 0, 0.0, np.pi / 3)
    >>> Y = spin_weighted_spherical(2, 2, np.pi / 3)
    >>> bool(abs(S - Y) < 1e-12)
    True
    """
    if np.ndim(spin) != 0:
        raise InputError(f"spin={spin!r} must be a single number for spheroidal_harmonic.")
    qnm.kerr_omega(l, m, n, spin)  # validates the mode and the spin
    theta = np.asarray(theta, dtype=float)
    if not np.all(np.isfinite(theta)) or np.any((theta < 0) | (theta > math.pi + 1e-12)):
        bad = theta[~np.isfinite(theta) | (theta < 0) | (theta > math.pi + 1e-12)].flat[0]
        raise InputError(f"theta={bad} must be an angle between 0 and pi radians.")
    c, coeffs = _harmonic_data(int(l), int(m), int(n), float(spin))
    u = np.clip(np.cos(theta), -1.0, 1.0)
    out = _evaluate(int(m), c, coeffs, u) * np.exp(1j * int(m) * np.asarray(phi, dtype=float))
    return complex(out) if np.ndim(out) == 0 else out
