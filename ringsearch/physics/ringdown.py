"""The ringdown signal model: damped sinusoids, Kerr multi-mode waveforms, SNR.

Three layers, each usable on its own:

1. Plain real damped sinusoids and their analytic Fourier transforms
   (:func:`damped_sinusoid`, :func:`damped_sinusoid_fd`); the time-domain
   one is built on :func:`ringsearch.physics.basis.damped_basis`, the basis
   the search filters with.
2. Sums of complex QNM terms with explicit complex frequencies (rad/s),
   complex amplitudes and angular factors (:func:`mode_polarizations`,
   :func:`mode_polarizations_fd`), in time and frequency domain.
3. A Kerr remnant (:class:`RingdownSource`): detector-frame mass and spin set
   the frequencies through :mod:`ringsearch.physics.qnm`; the angular factors
   are the spin-weighted spheroidal harmonics of
   :mod:`ringsearch.physics.harmonics`; distance and radiated-energy fraction
   (or a target SNR) set the amplitude; sky position, polarisation and
   geocentre start time project it onto detectors.

The waveform (time dependence ``exp(-i omega t)``, ``Im omega < 0``)::

    h_plus - i h_cross = sum_k  C_k S_k(theta, phi) e^{-i omega_k (t - t0)}
                              + conj( C_k S_k(pi - theta, phi) e^{-i omega_k (t - t0)} )

for ``t >= t0`` (zero before).  The second line is the mirror mode of
``(l, m, n)``: frequency ``-conj(omega_lmn)`` in the ``(l, -m)`` harmonic.  For a
non-precessing remnant equatorial symmetry fixes it completely: its
amplitude times angular function equals ``conj`` of the prograde one seen from
the reflected direction ``pi - theta``, so ``h(pi - theta, phi) = conj h(theta,
phi)`` (the plus polarisation is even and the cross polarisation odd under
reflection).  Consequently the prograde and mirror halves radiate equal
energy and do not interfere in the flux (their ``e^{i m phi}`` and
``e^{-i m phi}`` are orthogonal on the sphere).

Physical amplitude.  In geometric units the energy flux is
``dE/dt = D^2 / (16 pi) \\oint |dh/dt|^2 dOmega`` (e.g. Ruiz, Alcubierre,
Nunez & Takahashi 2008, Gen. Rel. Grav. 40, 1705, eq. 2.8, with
``dh/dt = \\int psi_4 dt``).  For one mode with ``C = (M / D) A`` and
``M omega = w`` the prograde part radiates ``M A^2 |w|^2 / (32 pi (-Im w))``
and the mirror the same again, so the total energy ``epsilon M`` fixes
``A = |w|^-1 sqrt(16 pi epsilon (-Im w))`` (:func:`amplitude_from_energy`).
The energy fraction ``epsilon`` is the fraction of the remnant's mass radiated
in the (2,2,0) mode together with its mirror, as in Flanagan & Hughes 1998,
PRD 57, 4535; other modes are set relative to (2,2,0) by amplitude ratio and
phase.  ``M`` and ``D`` are the detector-frame mass and luminosity distance,
which keeps the formula valid at any redshift.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from functools import lru_cache
from typing import Any

import numpy as np

from ringsearch.errors import InputError
from ringsearch.physics.basis import damped_basis
from ringsearch.physics.units import MPC_M, MSUN_M, MSUN_S

__all__ = [
    "damped_sinusoid",
    "damped_sinusoid_fd",
    "mode_polarizations",
    "mode_polarizations_fd",
    "amplitude_from_energy",
    "Mode",
    "kerr_modes",
    "RingdownSource",
    "optimal_snr",
    "inner_product",
    "network_snr",
    "scale_to_snr",
    "redshift_from_distance",
    "source_frame_mass",
    "detector_frame_mass",
    "DECAY_TIMES",
]

#: Signals are evaluated until this many damping times of the longest-lived
#: mode after the start (e^-30 ~ 1e-13 of the initial amplitude).
DECAY_TIMES: float = 30.0


# ---------------------------------------------------------------------------
# Layer 1: real damped sinusoids


def damped_sinusoid(times: Any, f_hz: Any, tau_s: Any, t0: float = 0.0, phase: Any = 0.0,
                    amplitude: Any = 1.0) -> np.ndarray:
    """``amplitude * exp(-(t-t0)/tau) * cos(2 pi f (t-t0) + phase)`` for ``t >= t0``, else 0.

    ``f_hz``, ``tau_s``, ``phase`` and ``amplitude`` broadcast against each
    other; the result has their broadcast shape followed by ``times.shape``.
    ``phase=-pi/2`` gives the sine basis function.

    Examples
    --------
    >>> t = np.arange(4) / 4096
    >>> damped_sinusoid(t, 250.0, 0.004).round(3)
    array([1.   , 0.872, 0.637, 0.34 ])
    >>> damped_sinusoid(t, [250.0, 240.0], [0.004, 0.001], phase=-np.pi / 2).shape
    (2, 4)
    """
    times = np.asarray(times, dtype=float)
    f, tau, ph, amp = (np.asarray(x, dtype=float)[..., None]
                       for x in np.broadcast_arrays(f_hz, tau_s, phase, amplitude))
    if np.any(tau <= 0) or not np.all(np.isfinite(tau)):
        raise InputError(f"tau_s must be positive and finite, got {np.ravel(tau_s)[:3]}.")
    if f.ndim == 1:  # all parameters scalar: result has the shape of ``times``
        f, tau, ph, amp = f[0], tau[0], ph[0], amp[0]
    # one single-mode basis pair per output element (parameters broadcast against times)
    s, f, tau = np.broadcast_arrays(times - t0, f, tau)
    u = damped_basis(s.reshape(-1, 1), f.reshape(-1, 1), tau.reshape(-1, 1))  # (m, 2, 1)
    cos_row, sin_row = u[:, 0, 0].reshape(s.shape), u[:, 1, 0].reshape(s.shape)
    return amp * (np.cos(ph) * cos_row - np.sin(ph) * sin_row)


def damped_sinusoid_fd(freqs: Any, f_hz: Any, tau_s: Any, amplitude: Any = 1.0,
                       phase: Any = 0.0, t0: float = 0.0) -> np.ndarray:
    """Analytic Fourier transform of :func:`damped_sinusoid` (truncated at ``t0``).

    Convention ``h(f) = \\int h(t) exp(-2 pi i f t) dt``.  Exact for the
    continuous, one-sided signal, so there is no windowing error::

        h(f) = A/2 e^{-2 pi i f t0} [ e^{i phase} / (1/tau + 2 pi i (f - f_hz))
                                    + e^{-i phase} / (1/tau + 2 pi i (f + f_hz)) ]

    Parameters broadcast like :func:`damped_sinusoid`; the last axis is ``freqs``.

    Examples
    --------
    >>> h0 = damped_sinusoid_fd([0.0], 250.0, 0.004)
    >>> bool(np.isclose(h0[0].real, 0.004 / (1 + (2 * np.pi * 250 * 0.004) ** 2)))
    True
    """
    freqs = np.asarray(freqs, dtype=float)
    f, tau, ph, amp = (np.asarray(x, dtype=float)[..., None]
                       for x in np.broadcast_arrays(f_hz, tau_s, phase, amplitude))
    if np.any(tau <= 0):
        raise InputError(f"tau_s must be positive, got {np.ravel(tau_s)[:3]}.")
    if f.ndim == 1:  # all parameters scalar: result has the shape of ``freqs``
        f, tau, ph, amp = f[0], tau[0], ph[0], amp[0]
    g = 1.0 / tau
    two_pi_i = 2j * np.pi
    return 0.5 * amp * np.exp(-two_pi_i * freqs * t0) * (
        np.exp(1j * ph) / (g + two_pi_i * (freqs - f)) +
        np.exp(-1j * ph) / (g + two_pi_i * (freqs + f)))


# ---------------------------------------------------------------------------
# Layer 2: complex QNM sums with explicit frequencies and angular factors


def _mode_arrays(omegas: Any, front: Any, mirror: Any
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    w = np.atleast_1d(np.asarray(omegas, dtype=complex))
    a = np.atleast_1d(np.asarray(front, dtype=complex))
    b = np.zeros_like(a) if mirror is None else np.atleast_1d(np.asarray(mirror, complex))
    w, a, b = np.broadcast_arrays(w, a, b)
    if np.any(w.imag >= 0):
        raise InputError("omegas must have negative imaginary parts (decaying modes), got "
                         f"{w[w.imag >= 0][:3]}.")
    return w, a, b


def mode_polarizations(times: Any, omegas: Any, front: Any, mirror: Any = None,
                       t0: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """``(h_plus, h_cross)`` of a sum of QNM terms with explicit coefficients.

    ``h_plus - i h_cross = sum_k a_k e^{-i w_k s} + conj(b_k e^{-i w_k s})`` for
    ``s = t - t0 >= 0`` and zero before, with ``a_k = front[k]`` (amplitude times
    angular factor of the prograde mode) and ``b_k = mirror[k]`` (amplitude times
    the angular factor at the reflected direction; ``None`` for no mirror).

    Parameters
    ----------
    times : array
        Sample times, s.
    omegas : array of complex
        Angular frequencies ``omega_k`` in rad/s with ``Im < 0``.
    front, mirror : array of complex
        Coefficients ``a_k`` and ``b_k``.
    t0 : float
        Start time, s (same clock as ``times``).

    Examples
    --------
    >>> w = 2 * np.pi * 250.0 - 1j / 0.004
    >>> hp, hc = mode_polarizations(np.array([-1e-3, 0.0, 1e-3]), [w], [1.0])
    >>> hp.round(3), hc.round(3)
    (array([0., 1., 0.]), array([0.   , 0.   , 0.779]))
    """
    w, a, b = _mode_arrays(omegas, front, mirror)
    times = np.asarray(times, dtype=float)
    s = times - t0
    on = s >= 0
    idx = np.nonzero(on)
    hp = np.zeros(times.shape)
    hc = np.zeros(times.shape)
    if idx[0].size:
        e = np.exp(-1j * np.multiply.outer(s[idx], w))  # (n_on, K)
        hp[idx] = (e @ (a + b)).real
        hc[idx] = (e @ (b - a)).imag
    return hp, hc


def mode_polarizations_fd(freqs: Any, omegas: Any, front: Any, mirror: Any = None,
                          t0: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Analytic Fourier transforms of :func:`mode_polarizations` (no windowing).

    Each term ``c e^{-i w s}`` (``s >= 0``) transforms to ``c / (i (w + 2 pi f))``
    and its conjugate to ``conj(c) / (i (2 pi f - conj w))``; a start time
    ``t0`` multiplies by ``e^{-2 pi i f t0}``.

    Examples
    --------
    >>> w = 2 * np.pi * 250.0 - 1j / 0.004
    >>> hp, hc = mode_polarizations_fd([0.0, 250.0], [w], [1.0])
    >>> bool(np.allclose(hp, damped_sinusoid_fd([0.0, 250.0], 250.0, 0.004)))
    True
    """
    w, a, b = _mode_arrays(omegas, front, mirror)
    freqs = np.asarray(freqs, dtype=float)
    om = 2.0 * np.pi * freqs[..., None]
    p = 1.0 / (1j * (w + om))               # transform of e^{-i w s}
    q = 1.0 / (1j * (om - np.conj(w)))      # transform of conj(e^{-i w s})
    shift = np.exp(-2j * np.pi * freqs * t0)
    c_plus, c_cross = a + b, b - a  # h_plus = Re(c_plus e), h_cross = Im(c_cross e)
    hp = 0.5 * (p @ c_plus + q @ np.conj(c_plus)) * shift
    hc = (0.5 / 1j) * (p @ c_cross - q @ np.conj(c_cross)) * shift
    return hp, hc


def amplitude_from_energy(epsilon: Any, omega_hat: Any) -> np.ndarray:
    """Dimensionless amplitude ``A`` of a mode radiating ``epsilon * M`` (with its mirror).

    ``A = sqrt(16 pi epsilon (-Im w)) / |w|`` for ``w = M omega``; the strain
    coefficient is ``C = A M / D`` (see the module docstring for the
    derivation and source).

    Examples
    --------
    >>> round(float(amplitude_from_energy(0.01, 0.5 - 0.08j)), 4)
    0.396
    """
    eps = np.asarray(epsilon, dtype=float)
    w = np.asarray(omega_hat, dtype=complex)
    return np.sqrt(16.0 * np.pi * eps * (-w.imag)) / np.abs(w)


# ---------------------------------------------------------------------------
# Redshift


@lru_cache(maxsize=4)
def _distance_grid(cosmology_name: str) -> tuple[np.ndarray, np.ndarray]:
    import astropy.cosmology as cosmo_mod
    from astropy import units as u

    cosmo = getattr(cosmo_mod, cosmology_name)
    z = np.concatenate([[0.0], np.geomspace(1e-6, 100.0, 20000)])
    d = cosmo.luminosity_distance(z).to_value(u.Mpc)
    return z, d


def redshift_from_distance(distance_mpc: Any, cosmology: str = "Planck18") -> np.ndarray:
    """Redshift at luminosity distance(s) ``distance_mpc`` in an astropy cosmology.

    The luminosity-distance relation comes from ``astropy.cosmology``
    (``Planck18`` by default, any of its built-in realisations by name); it is
    tabulated once and inverted by interpolation (relative error < 1e-6),
    which is fast enough for thousands of injections.

    Examples
    --------
    >>> round(float(redshift_from_distance(440.0)), 3)
    0.093
    """
    d = np.asarray(distance_mpc, dtype=float)
    if np.any(~np.isfinite(d)) or np.any(d <= 0):
        raise InputError(f"distance must be positive and finite, got {d.ravel()[:3]} Mpc.")
    try:
        z, dl = _distance_grid(cosmology)
    except AttributeError:
        raise InputError(f"unknown astropy cosmology {cosmology!r}.") from None
    if np.any(d > dl[-1]):
        raise InputError(f"distance {d.max()} Mpc is beyond redshift 100.")
    return np.interp(np.log(d), np.log(dl[1:]), z[1:], left=0.0)


def source_frame_mass(mass: Any, distance_mpc: Any, cosmology: str = "Planck18") -> np.ndarray:
    """Source-frame mass ``mass / (1 + z)`` for a detector-frame mass at a distance.

    Examples
    --------
    >>> round(float(source_frame_mass(68.0, 440.0)), 1)
    62.2
    """
    return np.asarray(mass, float) / (1.0 + redshift_from_distance(distance_mpc, cosmology))


def detector_frame_mass(mass_source: Any, distance_mpc: Any,
                        cosmology: str = "Planck18") -> np.ndarray:
    """Detector-frame mass ``(1 + z) mass_source`` at luminosity distance ``distance_mpc``.

    Examples
    --------
    >>> round(float(detector_frame_mass(62.0, 440.0)), 1)
    67.8
    """
    return np.asarray(mass_source, float) * (1.0 + redshift_from_distance(distance_mpc,
                                                                          cosmology))


# ---------------------------------------------------------------------------
# Layer 3: Kerr remnant


@dataclass(frozen=True)
class Mode:
    """One QNM ``(l, m, n)`` with amplitude ratio and phase relative to (2,2,0).

    Examples
    --------
    >>> Mode(2, 2, 1, ratio=2.0, phase=0.5).label
    '(2,2,1)'
    """

    l: int
    m: int
    n: int
    ratio: float = 1.0
    phase: float = 0.0

    def __post_init__(self) -> None:
        l, m, n = self.l, self.m, self.n
        if not all(isinstance(v, int | np.integer) for v in (l, m, n)):
            raise InputError(f"mode indices must be integers, got ({l!r}, {m!r}, {n!r}).")
        if l < 2 or not 1 <= m <= l or n < 0:
            raise InputError(f"mode ({l},{m},{n}) is not allowed: need l >= 2, 1 <= m <= l, "
                             "n >= 0 (mirror modes m < 0 are added automatically).")
        if not (math.isfinite(self.ratio) and self.ratio >= 0):
            raise InputError(f"mode ({l},{m},{n}) ratio must be >= 0, got {self.ratio!r}.")
        if not math.isfinite(self.phase):
            raise InputError(f"mode ({l},{m},{n}) phase must be finite, got {self.phase!r}.")

    @property
    def label(self) -> str:
        return f"({self.l},{self.m},{self.n})"

    @property
    def lmn(self) -> tuple[int, int, int]:
        return (self.l, self.m, self.n)


#: Highest overtone of (2,2,n) the model offers.
MAX_OVERTONE = 7


def kerr_modes(overtones: int = 0, ratios: Sequence[float] | None = None,
               phases: Sequence[float] | None = None,
               extra: Mapping[tuple[int, int, int], complex] | None = None
               ) -> tuple[Mode, ...]:
    """The mode list (2,2,0)...(2,2,N) plus optional extra modes.

    Parameters
    ----------
    overtones : int
        ``N``, the highest overtone (0 to 7).
    ratios, phases : sequence of float, optional
        ``|C_22n / C_220|`` and ``arg(C_22n / C_220)`` for n = 1..N (defaults
        1 and 0).
    extra : mapping, optional
        ``{(l, m, n): complex ratio to C_220}`` for further modes such as
        (3,3,0), (2,1,0), (4,4,0).

    Examples
    --------
    >>> [m.label for m in kerr_modes(2, extra={(3, 3, 0): 0.1j})]
    ['(2,2,0)', '(2,2,1)', '(2,2,2)', '(3,3,0)']
    """
    if isinstance(overtones, bool) or not isinstance(overtones, int | np.integer) or not (
            0 <= overtones <= MAX_OVERTONE):
        raise InputError(f"overtones must be an integer from 0 to {MAX_OVERTONE}, "
                         f"got {overtones!r}.")
    ratios = [1.0] * overtones if ratios is None else [float(r) for r in ratios]
    phases = [0.0] * overtones if phases is None else [float(p) for p in phases]
    if len(ratios) != overtones or len(phases) != overtones:
        raise InputError(f"ratios and phases need {overtones} values each (one per overtone), "
                         f"got {len(ratios)} and {len(phases)}.")
    modes = [Mode(2, 2, 0)]
    modes += [Mode(2, 2, n + 1, ratios[n], phases[n]) for n in range(overtones)]
    for (l, m, n), c in (extra or {}).items():
        if (l, m, n) in [md.lmn for md in modes]:
            raise InputError(f"extra mode ({l},{m},{n}) is already in the list.")
        modes.append(Mode(int(l), int(m), int(n), float(abs(c)), float(np.angle(c))))
    return tuple(modes)


@dataclass(frozen=True)
class RingdownSource:
    """A Kerr black-hole ringdown seen from a given direction and distance.

    Parameters
    ----------
    mass : float
        Remnant mass in the detector frame, solar masses.
    spin : float
        Dimensionless remnant spin in [0, 1).
    distance : float
        Luminosity distance, Mpc.
    epsilon : float
        Fraction of the remnant mass radiated in the (2,2,0) mode and its
        mirror, in (0, 1).
    modes : tuple of Mode
        Modes with ratios/phases relative to (2,2,0) (:func:`kerr_modes`).
        Must contain (2,2,0).
    t0 : float
        GPS start time of the ringdown at the geocentre.
    ra, dec, psi : float
        Sky position and polarisation angle, radians.
    inclination, azimuth : float
        Direction to the observer in the remnant's frame (polar angle from the
        spin axis, and azimuth; the azimuth acts as an overall phase
        ``e^{i m azimuth}``), radians.
    cosmology : str
        astropy cosmology used for :attr:`redshift` and :attr:`mass_source`.

    Examples
    --------
    >>> src = RingdownSource(68.0, 0.69, distance=440.0, epsilon=0.01,
    ...                      modes=kerr_modes(1), t0=1126259462.42)
    >>> f, tau = src.f_tau()
    >>> f.round(1), (tau * 1e3).round(2)
    (array([251. , 245.4]), array([4.13, 1.36]))
    """

    mass: float
    spin: float
    distance: float = 100.0
    epsilon: float = 0.01
    modes: tuple[Mode, ...] = (Mode(2, 2, 0),)
    t0: float = 0.0
    ra: float = 0.0
    dec: float = 0.0
    psi: float = 0.0
    inclination: float = 0.0
    azimuth: float = 0.0
    cosmology: str = "Planck18"
    _omegas: np.ndarray = field(init=False, repr=False, compare=False)
    _coeffs: tuple[np.ndarray, np.ndarray] = field(init=False, repr=False, compare=False)
    _cache: dict = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        for key in ("mass", "spin", "distance", "epsilon", "t0", "ra", "dec", "psi",
                    "inclination", "azimuth"):
            v = getattr(self, key)
            if isinstance(v, bool) or not isinstance(v, numbers.Real) or not math.isfinite(v):
                raise InputError(f"{key} must be a finite number, got {v!r}.")
            object.__setattr__(self, key, float(v))
        if self.mass <= 0:
            raise InputError(f"mass must be positive, got {self.mass!r} solar masses.")
        if not 0.0 <= self.spin < 1.0:
            raise InputError(f"spin must be in [0, 1), got {self.spin!r}.")
        if self.distance <= 0:
            raise InputError(f"distance must be positive, got {self.distance!r} Mpc.")
        if not 0.0 < self.epsilon < 1.0:
            raise InputError(f"epsilon must be in (0, 1), got {self.epsilon!r}.")
        modes = tuple(Mode(*m) if not isinstance(m, Mode) else m for m in self.modes)
        if len({m.lmn for m in modes}) != len(modes):
            raise InputError("modes contains the same (l, m, n) twice.")
        if (2, 2, 0) not in [m.lmn for m in modes]:
            raise InputError("modes must include (2,2,0), which sets the amplitude scale.")
        object.__setattr__(self, "modes", modes)
        object.__setattr__(self, "_cache", {})
        from ringsearch.physics.qnm import kerr_omega

        w_hat = np.array([complex(kerr_omega(m.l, m.m, m.n, self.spin)) for m in modes])
        object.__setattr__(self, "_omegas", w_hat / (self.mass * MSUN_S))
        object.__setattr__(self, "_coeffs", self._angular_coefficients(w_hat))

    # -- derived quantities ------------------------------------------------
    @property
    def omega_hat(self) -> np.ndarray:
        """Dimensionless ``M omega`` of each mode (``Im < 0``)."""
        return self._omegas * (self.mass * MSUN_S)

    @property
    def omegas(self) -> np.ndarray:
        """Complex angular frequency of each mode, rad/s."""
        return self._omegas.copy()

    def f_tau(self) -> tuple[np.ndarray, np.ndarray]:
        """Frequencies (Hz) and damping times (s) of the modes, in ``modes`` order."""
        return self._omegas.real / (2 * np.pi), -1.0 / self._omegas.imag

    @property
    def redshift(self) -> float:
        """Redshift of the source from its luminosity distance."""
        return float(redshift_from_distance(self.distance, self.cosmology))

    @property
    def mass_source(self) -> float:
        """Source-frame remnant mass, solar masses."""
        return self.mass / (1.0 + self.redshift)

    @property
    def amplitude_220(self) -> float:
        """Strain amplitude ``|C_220|`` of the (2,2,0) mode (before angular factors)."""
        i220 = [m.lmn for m in self.modes].index((2, 2, 0))
        a = amplitude_from_energy(self.epsilon, self.omega_hat[i220])
        return float(a * self.mass * MSUN_M / (self.distance * MPC_M))

    @property
    def amplitudes(self) -> np.ndarray:
        """Complex strain amplitudes ``C_k`` of the modes."""
        ratios = np.array([m.ratio * np.exp(1j * m.phase) for m in self.modes])
        return self.amplitude_220 * ratios

    def _angular_coefficients(self, w_hat: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        from ringsearch.physics.harmonics import spheroidal_harmonic

        front, mirror = [], []
        for m in self.modes:
            front.append(complex(spheroidal_harmonic(m.l, m.m, m.n, self.spin,
                                                     self.inclination, self.azimuth)))
            mirror.append(complex(spheroidal_harmonic(m.l, m.m, m.n, self.spin,
                                                      np.pi - self.inclination, self.azimuth)))
        return np.array(front), np.array(mirror)

    def coefficients(self) -> tuple[np.ndarray, np.ndarray]:
        """``(a_k, b_k)`` for :func:`mode_polarizations`: amplitudes times angular factors."""
        c = self.amplitudes
        return c * self._coeffs[0], c * self._coeffs[1]

    @property
    def max_frequency(self) -> float:
        """Highest mode frequency, Hz."""
        return float(np.max(self._omegas.real) / (2 * np.pi))

    @property
    def duration(self) -> float:
        """Length of the evaluated support: ``DECAY_TIMES`` longest damping times, s."""
        return float(DECAY_TIMES * np.max(-1.0 / self._omegas.imag))

    # -- waveforms ---------------------------------------------------------
    def polarizations(self, times: Any, epoch: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
        """``(h_plus, h_cross)`` at the geocentre at GPS ``epoch + times`` (zero before ``t0``).

        Passing a GPS ``epoch`` and small ``times`` keeps full precision
        (``epoch - t0`` is computed exactly when the two are close).

        Examples
        --------
        >>> src = RingdownSource(68.0, 0.69, t0=1e9)
        >>> hp, hc = src.polarizations(np.arange(64) / 4096, epoch=1e9)
        >>> float(hp[0]) == float(src.amplitudes[0].real * (
        ...     src.coefficients()[0][0] + src.coefficients()[1][0]).real / src.amplitudes[0].real)
        True
        """
        a, b = self.coefficients()
        s = (epoch - self.t0) + np.asarray(times, dtype=float)
        return mode_polarizations(s, self._omegas, a, b)

    def polarizations_fd(self, freqs: Any, epoch: float | None = None
                         ) -> tuple[np.ndarray, np.ndarray]:
        """Analytic Fourier transforms of the polarisations on a clock starting at ``epoch``.

        ``epoch`` defaults to ``t0`` (the transform of the signal shifted to
        start at zero); keeping it near ``t0`` avoids phase round-off.
        """
        a, b = self.coefficients()
        shift = 0.0 if epoch is None else self.t0 - epoch
        return mode_polarizations_fd(freqs, self._omegas, a, b, t0=shift)

    def _geometry(self, detector: Any) -> tuple[float, float, float]:
        """``(F_plus, F_cross, delay)`` at ``detector`` (cached: one sidereal time per detector)."""
        from ringsearch.physics.detectors import (
            antenna_pattern,
            get_detector,
            time_delay_from_geocentre,
        )

        det = get_detector(detector)
        key = (det.name, det.latitude_deg, det.longitude_deg, det.xarm_bearing_deg)
        if key not in self._cache:
            fp, fc = antenna_pattern(det, self.ra, self.dec, self.psi, self.t0)
            delay = time_delay_from_geocentre(det, self.ra, self.dec, self.t0)
            self._cache[key] = (float(fp), float(fc), float(delay))
        return self._cache[key]

    def delay(self, detector: Any) -> float:
        """Arrival time at ``detector`` minus ``t0`` (light travel from the geocentre), s."""
        return self._geometry(detector)[2]

    def arrival_time(self, detector: Any) -> float:
        """GPS start time of the ringdown at ``detector``."""
        return self.t0 + self.delay(detector)

    def antenna_pattern(self, detector: Any) -> tuple[float, float]:
        """``(F_plus, F_cross)`` of ``detector`` for this source at ``t0``."""
        fp, fc, _ = self._geometry(detector)
        return fp, fc

    def support(self, detector: Any) -> tuple[float, float]:
        """GPS interval ``[start, end)`` outside which the signal at ``detector`` is zero."""
        start = self.arrival_time(detector)
        return start, start + self.duration

    def detector_strain(self, detector: Any, times: Any, epoch: float = 0.0) -> np.ndarray:
        """``F_plus h_plus + F_cross h_cross`` at ``detector`` at GPS ``epoch + times``.

        The arrival time is shifted by the geocentre delay; the antenna
        patterns are those at ``t0`` (the Earth turns by < 1e-5 rad during a
        ringdown).  Give a GPS ``epoch`` near ``t0`` and small ``times`` for
        full precision (GPS times as float64 resolve only ~0.2 us).
        """
        fp, fc, delay = self._geometry(detector)
        a, b = self.coefficients()
        s = ((epoch - self.t0) + np.asarray(times, dtype=float)) - delay
        hp, hc = mode_polarizations(s, self._omegas, a, b)
        return fp * hp + fc * hc

    def detector_strain_fd(self, detector: Any, freqs: Any, epoch: float | None = None
                           ) -> np.ndarray:
        """Analytic Fourier transform of :meth:`detector_strain` on a clock starting at ``epoch``.

        ``epoch`` defaults to the arrival time at the detector.
        """
        fp, fc, delay = self._geometry(detector)
        a, b = self.coefficients()
        shift = 0.0 if epoch is None else (self.t0 - epoch) + delay
        hp, hc = mode_polarizations_fd(freqs, self._omegas, a, b, t0=shift)
        return fp * hp + fc * hc

    def check_sample_rate(self, sample_rate: float) -> None:
        """Raise :class:`InputError` if a mode frequency is at or above Nyquist."""
        if not sample_rate > 0:
            raise InputError(f"sample_rate must be positive, got {sample_rate!r} Hz.")
        if self.max_frequency >= 0.5 * sample_rate:
            k = int(np.argmax(self._omegas.real))
            raise InputError(
                f"sample rate {sample_rate:g} Hz is too low for mode {self.modes[k].label} at "
                f"{self.max_frequency:.1f} Hz (Nyquist {0.5 * sample_rate:g} Hz).")

    def project(self, detector: Any, sample_rate: float = 4096.0,
                epoch: float | None = None, duration: float | None = None):
        """The signal at ``detector`` as a gwpy ``TimeSeries`` on a regular grid.

        The grid is ``epoch + k / sample_rate``; by default it is the grid of
        GPS multiples of ``1/sample_rate`` covering the signal's support, so a
        start time between samples is represented exactly (samples before
        the arrival time are zero).

        Examples
        --------
        >>> ts = RingdownSource(68.0, 0.69, t0=1e9).project("H1")
        >>> ts.name, float(ts.sample_rate.value)
        ('H1', 4096.0)
        """
        from gwpy.timeseries import TimeSeries

        from ringsearch.physics.detectors import get_detector

        self.check_sample_rate(sample_rate)
        det = get_detector(detector)
        start, end = self.support(det)
        if epoch is None:
            epoch = math.floor(start * sample_rate) / sample_rate
        if duration is None:
            duration = end - epoch
        n = max(int(math.ceil(duration * sample_rate)), 1)
        data = self.detector_strain(det, np.arange(n) / sample_rate, epoch=epoch)
        return TimeSeries(data, t0=epoch, sample_rate=sample_rate, name=det.name,
                          channel=f"{det.name}:RINGDOWN_INJECTION", unit="strain")

    def with_distance(self, distance: float) -> RingdownSource:
        """A copy at another luminosity distance (same detector-frame mass)."""
        return replace(self, distance=float(distance))


# ---------------------------------------------------------------------------
# Inner products and SNR


def _psd_on(psd: Any, freqs: np.ndarray) -> np.ndarray:
    """PSD values at ``freqs`` by linear interpolation of a FrequencySeries."""
    pf = np.asarray(psd.frequencies.value if hasattr(psd.frequencies, "value")
                    else psd.frequencies, dtype=float)
    pv = np.asarray(getattr(psd, "value", psd), dtype=float)
    if freqs.size and (freqs[0] < pf[0] - 1e-9 or freqs[-1] > pf[-1] + 1e-9):
        raise InputError(f"psd covers {pf[0]:g}-{pf[-1]:g} Hz but the band needs "
                         f"{freqs[0]:g}-{freqs[-1]:g} Hz.")
    return np.interp(freqs, pf, pv)


def inner_product(a_f: Any, b_f: Any, freqs: Any, psd_values: Any, f_low: float = 20.0,
                  f_high: float | None = None) -> float:
    """``4 Re sum a(f) conj(b(f)) / S(f) df`` over ``[f_low, f_high]`` on a uniform grid.

    Examples
    --------
    >>> f = np.arange(0, 1024.0, 0.25)
    >>> round(inner_product(np.ones(f.size), np.ones(f.size), f, np.ones(f.size), 20, 100), 6)
    321.0
    """
    freqs = np.asarray(freqs, dtype=float)
    s = np.asarray(psd_values, dtype=float)
    hi = freqs[-1] if f_high is None else f_high
    band = (freqs >= f_low) & (freqs <= hi)
    if not np.any(band):
        raise InputError(f"the band f_low={f_low:g} Hz to f_high={hi:g} Hz contains no "
                         "frequency bins.")
    sb = s[band]
    if np.any(~(sb > 0)):
        raise InputError("psd has zero, negative or NaN values inside the band "
                         f"{f_low:g}-{hi:g} Hz.")
    df = freqs[1] - freqs[0]
    a = np.asarray(a_f)[band]
    b = np.asarray(b_f)[band]
    return float(4.0 * df * np.sum((a * np.conj(b)).real / sb))


def optimal_snr(h: Any, psd: Any, f_low: float = 20.0, f_high: float | None = None) -> float:
    """Optimal SNR ``sqrt(<h, h>)`` of a signal ``TimeSeries`` in noise with one-sided ``psd``.

    The signal's discrete Fourier transform (``dt * rfft``) is compared with
    the PSD (a gwpy ``FrequencySeries``, linearly interpolated to the signal's
    frequency grid) over ``[f_low, f_high]``; ``f_high`` defaults to Nyquist.
    Zero-pad the signal if the PSD's resolution is finer than ``1/duration``.
    A ringdown starts with a jump, whose ``1/f`` tail reaches Nyquist; open
    data are anti-alias filtered there (their PSD falls steeply), so keep
    ``f_high`` below that roll-off (the search uses 0.8 x Nyquist) or the
    tail gains spurious SNR.

    Examples
    --------
    >>> from gwpy.timeseries import TimeSeries
    >>> from gwpy.frequencyseries import FrequencySeries
    >>> h = TimeSeries(damped_sinusoid(np.arange(4096) / 4096, 250.0, 0.004, 0.1),
    ...                sample_rate=4096)
    >>> psd = FrequencySeries(np.full(2049, 2.0), df=1.0)
    >>> round(optimal_snr(h, psd, 0.0), 3)   # white noise: rho^2 = 2/S0 * int h^2 dt
    0.032
    """
    if f_high is not None and f_high <= f_low:
        raise InputError(f"f_high={f_high} must exceed f_low={f_low}.")
    if f_low < 0:
        raise InputError(f"f_low must be >= 0, got {f_low}.")
    values = np.asarray(getattr(h, "value", h), dtype=float)
    try:
        dt = float(h.dt.value) if hasattr(h.dt, "value") else float(h.dt)
    except AttributeError:
        raise InputError("optimal_snr needs a TimeSeries signal with a sample spacing.") \
            from None
    if not np.all(np.isfinite(values)):
        raise InputError("the signal passed to optimal_snr contains NaN or infinite samples.")
    hf = np.fft.rfft(values) * dt
    freqs = np.fft.rfftfreq(values.size, dt)
    hi = freqs[-1] if f_high is None else min(f_high, freqs[-1])
    band = (freqs >= f_low) & (freqs <= hi)
    s = np.full(freqs.size, np.inf)
    s[band] = _psd_on(psd, freqs[band])
    return math.sqrt(inner_product(hf, hf, freqs, s, f_low, hi))


def network_snr(source: RingdownSource, psds: Mapping[str, Any], f_low: float = 20.0,
                f_high: float | None = None) -> dict[str, float]:
    """Optimal SNR of a ringdown in each detector (analytic transform) and the network.

    ``psds`` maps detector names to one-sided PSD ``FrequencySeries``; the
    signal's analytic Fourier transform is evaluated on each PSD's own grid,
    up to ``f_high`` (default: the PSD's last frequency).  Returns
    ``{name: snr, ..., "network": sqrt(sum snr^2)}``.

    This is the SNR of the continuous signal.  A sampled copy differs by the
    aliasing of the start discontinuity's ``1/f`` tail, relatively
    ``~ (pi^2/3) (f/fs)^2`` at frequencies where that tail dominates: typically
    0.1-1% at 4096 Hz (more for loud short overtones), falling as ``fs^-2``.

    Examples
    --------
    >>> from gwpy.frequencyseries import FrequencySeries
    >>> psd = FrequencySeries(np.full(8193, 1e-46), df=0.25)
    >>> src = RingdownSource(68.0, 0.69, distance=400.0, t0=1e9)
    >>> snrs = network_snr(src, {"H1": psd, "L1": psd})
    >>> sorted(snrs)
    ['H1', 'L1', 'network']
    """
    if not psds:
        raise InputError("network_snr needs at least one detector PSD.")
    out = {}
    for name, psd in psds.items():
        freqs = np.asarray(psd.frequencies.value, dtype=float)
        values = np.asarray(psd.value, dtype=float)
        hf = source.detector_strain_fd(name, freqs)
        hi = freqs[-1] if f_high is None else f_high
        out[str(name)] = math.sqrt(max(inner_product(hf, hf, freqs,
                                                     np.where(freqs >= f_low, values, np.inf),
                                                     f_low, hi), 0.0))
    out["network"] = math.sqrt(sum(v * v for v in out.values()))
    return out


def scale_to_snr(source: RingdownSource, target_snr: float, psds: Mapping[str, Any],
                 f_low: float = 20.0, f_high: float | None = None) -> RingdownSource:
    """A copy of ``source`` moved to the distance where its network optimal SNR is ``target_snr``.

    The strain scales as ``1/distance`` at fixed detector-frame mass, so one
    evaluation suffices.

    Examples
    --------
    >>> from gwpy.frequencyseries import FrequencySeries
    >>> psd = FrequencySeries(np.full(8193, 1e-46), df=0.25)
    >>> src = RingdownSource(68.0, 0.69, distance=400.0, t0=1e9)
    >>> loud = scale_to_snr(src, 20.0, {"H1": psd})
    >>> round(network_snr(loud, {"H1": psd})["network"], 6)
    20.0
    """
    if not (isinstance(target_snr, int | float) and math.isfinite(target_snr)
            and target_snr > 0):
        raise InputError(f"target snr must be positive, got {target_snr!r}.")
    rho = network_snr(source, psds, f_low, f_high)["network"]
    if rho <= 0:
        raise InputError("the source has zero SNR in these detectors (e.g. both "
                         "antenna patterns vanish), so it cannot be scaled to an SNR.")
    return source.with_distance(source.distance * rho / target_snr)
