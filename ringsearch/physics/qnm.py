"""Kerr quasinormal-mode spectrum: the shipped table, its interpolant and conversions.

This is the public QNM API of ringsearch.  Frequencies come from a table built
by ``scripts/make_qnm_table.py`` with our own Leaver solver
(:mod:`ringsearch.physics.leaver`) and shipped as
``ringsearch/physics/data/qnm_table.npz``; between grid points they are
interpolated with piecewise quintic polynomials (scipy's interpolating
B-spline of degree 5, converted to per-interval polynomial coefficients so
that evaluation on a uniform grid needs no search) in the coordinate
``u = -log(1 - chi)``, which resolves the extremal limit and the spirals of
the m = 0 high overtones near it.  Each mode has its own grid, uniform within
each of 8 equal segments of ``u`` and refined segment by segment when the
table was built, until the interpolant agreed with direct solves at every
interval midpoint to a relative 3e-8 (the achieved error is stored per mode
as ``interp_error``).

Conventions (DEVELOPERS.md): spin weight -2, time dependence
``exp(-i omega t)`` so ``Im(omega) < 0``, dimensionless ``M*omega`` with ``M``
the black-hole mass.  For every ``-l <= m <= l`` the mode ``(l, m, n)`` is the
branch followed continuously in spin from its Schwarzschild value with
``Re(omega) > 0``, overtones numbered by damping at zero spin.  The mirror
solution is ``-conj(omega(l, -m, n))`` (:func:`mirror_omega`).

Table content: l = 2 with n = 0..7, l = 3 and 4 with n = 0..3, all m, spins
0 <= chi <= 0.999.  Six high overtones of counter-rotating modes stop short
of 0.999 because Leaver's continued fraction there needs more than 2^17
terms: (2, -2, 7) at 0.99406, (2, -1, 7) at 0.99571, (2, 0, 7) at 0.99796,
(2, -2, 6) at 0.99645, (2, -1, 6) at 0.99775 and (2, -2, 5) at 0.99814
(:func:`spin_range` gives each mode's limit; asking beyond it is an
InputError, never an extrapolation).  Every mode covers 0 <= chi <= 0.99.

Overtone labels: for all 104 modes our branches agree with the independent
``qnm`` package's own continuation from chi = 0 (``KerrSpinSeq``, seeded with
the same Schwarzschild values) up to 0.99, to that package's root tolerance
(relative differences below 4e-7); no relabelling was needed.  The m = 0
high overtones are not monotonic near the extremal limit: (2, 0, 7) spirals
with a period of about 0.2 in log(1 - chi) above chi ~ 0.9, which is why the
table is built in u = -log(1 - chi) and refined locally.
"""

from __future__ import annotations

import functools
import math
from numbers import Integral
from pathlib import Path

import numpy as np

from ringsearch.errors import InputError
from ringsearch.physics.units import MSUN_S

TABLE_PATH = Path(__file__).resolve().parent / "data" / "qnm_table.npz"


class _ModeInterpolant:
    """Piecewise quintic interpolant of one mode's omega and A in ``u = -log(1 - chi)``.

    The nodes are uniform within each of a few equal-length segments of ``u``
    (the step may differ between segments, where the table builder refined),
    so the interval holding any ``u`` is found by arithmetic, not by search.
    """

    def __init__(self, u: np.ndarray, omega: np.ndarray, A: np.ndarray, seg_len: float):
        from scipy.interpolate import make_interp_spline

        u = np.asarray(u, dtype=float)
        self.nint = u.size - 1
        self.u_max = float(u[-1])
        self.spin_max = float(-np.expm1(-u[-1]))
        # Each interval's polynomial is re-expanded about the interval's midpoint
        # (the degree-5 spline is one polynomial there), so evaluation needs only
        # an index computation and a Horner loop; scipy's own spline evaluation
        # searches the knots and is several times slower.
        self.mid = 0.5 * (u[:-1] + u[1:])
        self.seg_len = float(seg_len)
        nseg = max(1, int(math.ceil(self.u_max / self.seg_len - 1e-9)))
        seg = np.minimum((self.mid / self.seg_len).astype(np.intp), nseg - 1)
        first = np.searchsorted(seg, np.arange(nseg))
        h = np.diff(u)
        hinv = np.array([1.0 / h[min(f, self.nint - 1)] for f in first])
        # interval index = floor(u * hinv[s] + off[s]) for u in segment s
        self.hinv = hinv
        self.off = first - np.arange(nseg) * self.seg_len * hinv
        self.nseg = nseg

        def coeffs(v: np.ndarray) -> np.ndarray:
            spl = make_interp_spline(u, v, k=5)
            return np.array([spl(self.mid, nu=k) / math.factorial(k) for k in range(5, -1, -1)])

        # coefficient arrays of shape (degree + 1, intervals), highest power first
        c_w, c_A = coeffs(omega), coeffs(A)
        # real and imaginary rows kept apart, contiguous, for real-arithmetic Horner
        self.c_omega = (np.ascontiguousarray(c_w.real), np.ascontiguousarray(c_w.imag))
        self.c_A = (np.ascontiguousarray(c_A.real), np.ascontiguousarray(c_A.imag))

    def _index(self, u: np.ndarray) -> np.ndarray:
        s = np.clip((u * (1.0 / self.seg_len)).astype(np.intp), 0, self.nseg - 1)
        return np.clip((u * self.hinv[s] + self.off[s]).astype(np.intp), 0, self.nint - 1)

    def _eval(self, c: tuple[np.ndarray, np.ndarray], u: np.ndarray) -> np.ndarray:
        # Horner in real arithmetic on the real and imaginary coefficient rows
        # (u is real), in place: about three times faster than complex Horner.
        u = np.asarray(u, dtype=float)
        i = self._index(u)
        t = u - self.mid[i]
        out = np.empty(u.shape, complex)
        for part, rows in ((out.real, c[0]), (out.imag, c[1])):
            acc = rows[0, i]
            for k in range(1, rows.shape[0]):
                acc *= t
                acc += rows[k, i]
            part[...] = acc
        return out if out.ndim else out[()]

    def omega(self, u: np.ndarray) -> np.ndarray:
        return self._eval(self.c_omega, u)

    def A(self, u: np.ndarray) -> np.ndarray:
        return self._eval(self.c_A, u)


@functools.lru_cache(maxsize=1)
def _table() -> dict:
    if not TABLE_PATH.exists():
        raise FileNotFoundError(TABLE_PATH)  # pragma: no cover - packaging error
    with np.load(TABLE_PATH) as z:
        return {k: z[k] for k in z.files}


@functools.lru_cache(maxsize=1)
def _mode_index() -> dict[tuple[int, int, int], int]:
    return {tuple(int(v) for v in row): i for i, row in enumerate(_table()["modes"])}


@functools.cache
def _interpolant(mode: tuple[int, int, int]) -> _ModeInterpolant:
    t = _table()
    i = _mode_index()[mode]
    sl = slice(int(t["offsets"][i]), int(t["offsets"][i + 1]))
    return _ModeInterpolant(t["u"][sl], t["omega"][sl], t["A"][sl], float(t["segment_length"]))


def available_modes() -> list[tuple[int, int, int]]:
    """All ``(l, m, n)`` in the shipped table.

    Examples
    --------
    >>> (2, 2, 7) in available_modes()
    True
    """
    return list(_mode_index())


def spin_range(l: int | None = None, m: int | None = None,
               n: int | None = None) -> tuple[float, float]:
    """Spin interval covered by the table, for one mode or (default) for all modes.

    Examples
    --------
    >>> spin_range(2, 2, 0)
    (0.0, 0.999)
    >>> spin_range()[1] >= 0.99
    True
    """
    if l is None and m is None and n is None:
        return 0.0, float(round(np.min(_table()["spin_max"]), 12))
    mode = _check_mode(l, m, n)
    return 0.0, float(round(_table()["spin_max"][_mode_index()[mode]], 12))


def _is_int(v) -> bool:
    return isinstance(v, Integral | np.integer) and not isinstance(v, bool)


def _check_mode(l, m, n) -> tuple[int, int, int]:
    for name, v in (("l", l), ("m", m), ("n", n)):
        if not _is_int(v):
            raise InputError(f"mode index {name}={v!r} must be an integer.")
    l, m, n = int(l), int(m), int(n)
    if l < 2:
        raise InputError(f"mode index l={l} is impossible for gravitational waves (need l >= 2).")
    if abs(m) > l:
        raise InputError(f"mode index m={m} is impossible for l={l} (need |m| <= l).")
    if n < 0:
        raise InputError(f"overtone index n={n} must be >= 0.")
    if (l, m, n) not in _mode_index():
        ls = sorted({k[0] for k in _mode_index()})
        if l not in ls:
            raise InputError(f"mode index l={l} is not in the QNM table (it has l = {ls}).")
        nmax = max(k[2] for k in _mode_index() if k[0] == l)
        raise InputError(f"overtone n={n} of l={l} is not in the QNM table (it has n <= {nmax}).")
    return l, m, n


def _check_spin(spin, spin_max: float, mode) -> tuple[np.ndarray, bool]:
    scalar = np.ndim(spin) == 0
    try:
        arr = np.asarray(spin, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"spin={spin!r} is not a number.") from None
    if not np.all(np.isfinite(arr)):
        v = _first_bad(arr, ~np.isfinite(arr))
        raise InputError(f"spin={v} is not a finite number.")
    bad = (arr < 0) | (arr > spin_max + 1e-12)
    if np.any(bad):
        v = _first_bad(arr, bad)
        if v >= 1 or v < 0:
            raise InputError(f"spin={v} is outside the physical range 0 <= spin < 1.")
        raise InputError(f"spin={v} is above the QNM table's maximum {spin_max:g} "
                         f"for mode {mode}.")
    return arr, scalar


def _first_bad(arr: np.ndarray, mask: np.ndarray):
    return arr[mask].flat[0]


def _u_of(chi: np.ndarray) -> np.ndarray:
    return -np.log1p(-chi)


def kerr_omega(l: int, m: int, n: int, spin: float | np.ndarray) -> complex | np.ndarray:
    """Dimensionless complex QNM frequency ``M*omega`` of a Kerr black hole.

    Parameters
    ----------
    l, m, n : int
        Mode: multipole ``l >= 2``, azimuthal ``|m| <= l``, overtone ``n``.
    spin : float or array_like
        Dimensionless spin ``chi`` in ``[0, spin_range(l, m, n)[1]]``.

    Returns
    -------
    complex or complex ndarray
        ``M*omega`` (``Im < 0``), same shape as ``spin``; interpolated from the
        shipped table (relative error below 1e-7, see the tests).

    Examples
    --------
    >>> w = kerr_omega(2, 2, 0, 0.0)
    >>> round(w.real, 6), round(w.imag, 6)
    (0.373672, -0.088962)
    >>> kerr_omega(2, 2, 0, [0.0, 0.7]).shape
    (2,)
    """
    mode = _check_mode(l, m, n)
    itp = _interpolant(mode)
    chi, scalar = _check_spin(spin, itp.spin_max, mode)
    out = itp.omega(_u_of(chi))
    return complex(out) if scalar else out


def separation_constant(l: int, m: int, n: int, spin):
    """Angular separation constant ``A_lmn(chi)`` in Leaver's convention.

    ``A = l(l+1) - s(s+1) = l(l+1) - 2`` at zero spin; it belongs to the
    spheroidicity ``c = chi * M*omega`` of the mode.

    Examples
    --------
    >>> separation_constant(2, 2, 0, 0.0)
    (4+0j)
    """
    mode = _check_mode(l, m, n)
    itp = _interpolant(mode)
    chi, scalar = _check_spin(spin, itp.spin_max, mode)
    out = itp.A(_u_of(chi))
    if scalar:
        v = complex(out)
        return complex(round(v.real, 12), round(v.imag, 12)) if chi == 0 else v
    return out


def mirror_omega(l: int, m: int, n: int, spin):
    """The mirror solution ``-conj(M*omega(l, -m, n))`` (``Re < 0``) of mode (l, m, n).

    Examples
    --------
    >>> w = mirror_omega(2, 2, 0, 0.5)
    >>> w.real < 0 and w.imag < 0
    True
    """
    w = -np.conj(kerr_omega(l, -m, n, spin))
    return complex(w) if np.ndim(w) == 0 else w


def _check_positive(name: str, value) -> np.ndarray:
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"{name}={value!r} is not a number.") from None
    bad = ~np.isfinite(arr) | (arr <= 0)
    if np.any(bad):
        raise InputError(f"{name}={_first_bad(arr, bad)} must be a finite positive number.")
    return arr


def mode_f_tau(mass: float | np.ndarray, spin: float | np.ndarray, l: int = 2, m: int = 2,
               n: int = 0) -> tuple[float | np.ndarray, float | np.ndarray]:
    """Frequency (Hz) and damping time (s) of a QNM of a black hole.

    ``f = Re(M omega) / (2 pi M)``, ``tau = -M / Im(M omega)`` with ``M`` in
    seconds (``mass * G M_sun / c^3``).

    Parameters
    ----------
    mass : float or array_like
        Detector-frame mass in solar masses (> 0).
    spin : float or array_like
        Dimensionless spin; broadcast against ``mass``.
    l, m, n : int
        The mode.

    Returns
    -------
    f_hz, tau_s : float or ndarray

    Examples
    --------
    >>> f, tau = mode_f_tau(68.0, 0.69)
    >>> round(f), round(tau * 1e3, 1)
    (251, 4.1)
    """
    M = _check_positive("mass", mass)
    w = kerr_omega(l, m, n, spin)
    Ms = M * MSUN_S
    f = np.real(w) / (2.0 * math.pi * Ms)
    tau = -Ms / np.imag(w)
    if np.ndim(f) == 0:
        return float(f), float(tau)
    return f, tau


@functools.cache
def _q_table(mode: tuple[int, int, int]):
    """Quality factor on a dense u grid, and whether it is monotonic in spin."""
    itp = _interpolant(mode)
    y = np.linspace(0.0, itp.u_max, 20001)
    w = itp.omega(y)
    q = -w.real / (2.0 * w.imag)
    dq = np.diff(q)
    monotonic = bool(np.all(dq < 0) or np.all(dq > 0))
    return y, q, monotonic


def remnant_from_f_tau(f_hz: float | np.ndarray, tau_s: float | np.ndarray, l: int = 2,
                       m: int = 2, n: int = 0
                       ) -> tuple[float | np.ndarray, float | np.ndarray]:
    """Mass and spin of the black hole whose mode (l, m, n) has frequency f and damping tau.

    The quality factor ``Q = pi f tau = -Re(omega) / (2 Im(omega))`` depends on
    spin only; where it is monotonic in spin (true for the fundamental modes
    with ``m > 0``) it fixes the spin, and the frequency then fixes the mass.

    Parameters
    ----------
    f_hz, tau_s : float or array_like
        Frequency (Hz) and damping time (s), positive; broadcast together.
    l, m, n : int
        The mode.

    Returns
    -------
    mass, spin : float or ndarray
        Detector-frame mass (solar masses) and dimensionless spin.

    Raises
    ------
    InputError
        If ``Q`` is outside the range the table covers for the mode, or the
        mode's ``Q`` is not monotonic in spin.

    Examples
    --------
    >>> M, chi = remnant_from_f_tau(*mode_f_tau(68.0, 0.69))
    >>> round(M, 6), round(chi, 6)
    (68.0, 0.69)
    """
    mode = _check_mode(l, m, n)
    f = _check_positive("f_hz", f_hz)
    tau = _check_positive("tau_s", tau_s)
    f, tau = np.broadcast_arrays(f, tau)
    scalar = f.ndim == 0
    yg, qg, monotonic = _q_table(mode)
    if not monotonic:
        raise InputError(f"mode {mode} has a quality factor that is not monotonic in spin, "
                         "so f and tau do not fix the remnant uniquely.")
    q = math.pi * f * tau
    qlo, qhi = float(min(qg[0], qg[-1])), float(max(qg[0], qg[-1]))
    bad = (q < qlo * (1 - 1e-12)) | (q > qhi * (1 + 1e-12))
    if np.any(bad):
        v = _first_bad(q, bad)
        raise InputError(f"quality factor pi*f_hz*tau_s={v:.6g} is outside the range "
                         f"[{qlo:.6g}, {qhi:.6g}] that mode {mode} spans over the table's spins.")
    order = np.argsort(qg)
    itp = _interpolant(mode)
    u = np.interp(q, qg[order], yg[order])
    # polish with Newton steps on the interpolant (Q(u) is smooth and monotonic)
    du = 1e-6
    for _ in range(4):
        up, um = np.minimum(u + du, itp.u_max), np.maximum(u - du, 0.0)
        w0, w1, w2 = itp.omega(u), itp.omega(up), itp.omega(um)
        q0 = -w0.real / (2 * w0.imag)
        dq = (-w1.real / (2 * w1.imag) + w2.real / (2 * w2.imag)) / (up - um)
        u = np.clip(u - (q0 - q) / dq, 0.0, itp.u_max)
    chi = np.clip(-np.expm1(-u), 0.0, itp.spin_max)
    w = itp.omega(u)
    mass = w.real / (2.0 * math.pi * f * MSUN_S)
    if scalar:
        return float(mass), float(chi)
    return mass, chi
