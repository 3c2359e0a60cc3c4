"""Direct solver for Kerr quasinormal modes of spin weight -2 (Leaver's method).

This module finds a single Kerr QNM frequency ``M*omega`` and its angular
separation constant ``A`` by Leaver's continued-fraction method (Leaver 1985,
Proc. R. Soc. Lond. A 402, 285).  It is the slow, exact path: the package's
day-to-day API (:mod:`ringsearch.physics.qnm`) interpolates a table that
``scripts/make_qnm_table.py`` builds with this solver.

No library we depend on solves the Teukolsky eigenvalue problem, hence the
hand-written continued fractions below.

Method
------
* Leaver's units (``2M = 1``) are used internally: ``omega_L = 2 M omega``,
  ``a_L = chi / 2``; the angular parameter ``c = a_L omega_L = chi M omega``
  is the same in both.  Inputs and outputs of the public functions are in
  ``M = 1`` units.
* Radial equation: Leaver's three-term recurrence (his eq. 25) written as a
  continued fraction and "inverted" ``n`` times for overtone ``n`` (his
  section 4), which makes the ``n``-th root the stable one.  The infinite tail
  is closed with Nollert's (1993, Phys. Rev. D 47, 5253) asymptotic remainder
  ``a_{N+1}/a_N ~ sum_k C_k N^{-k/2}``, k <= 8 (``C1``, ``C2`` in closed
  form, higher orders solved numerically order by order for Leaver's Kerr
  recurrence in :func:`_nollert_coefficients`).  The depth is
  chosen adaptively by depth doubling until the root moves less than the
  tolerance.
* Angular equation: Leaver's spheroidal recurrence (his eqs. 18-21),
  inverted ``l - max(|m|, 2)`` times so that the root continuous with
  ``A = l(l+1) - s(s+1)`` at ``c = 0`` is the stable one.
* The two equations are solved together: for a trial ``omega`` the angular
  continued fraction is solved for ``A`` (complex secant, warm-started from the
  previous ``A``); the radial continued fraction with that ``A`` is then
  driven to zero by a complex secant iteration in ``omega``.
* A mode at spin ``chi > 0`` is defined by continuity from its Schwarzschild
  value (``Re omega > 0``, overtones ordered by damping): :func:`solve_mode`
  without a guess walks in spin from 0 in small steps with polynomial
  extrapolation of the previous roots.

Convergence: with the adaptive depth the roots are converged to ~1e-11
relative (the default ``tol``; round-off in continued fractions of 10^5 terms
sets the floor) for ``0 <= chi <= 0.99`` for all shipped modes.  Above 0.99 the
continued fraction needs rapidly more terms (its convergence rate scales with
``sqrt(1 - chi^2)``); the high counter-rotating overtones (2, -2, 7),
(2, -1, 7), (2, 0, 7), (2, -2, 6), (2, -1, 6) and (2, -2, 5) need more than
2^17 terms somewhere between chi = 0.994 and 0.999, which is where the shipped
table stops for them (``ringsearch.physics.qnm.spin_range``).
"""

from __future__ import annotations

import cmath
import math

import numpy as np

#: Spin weight of the perturbation (gravitational waves, Weyl scalar psi_4).
SPIN_WEIGHT = -2

_S = SPIN_WEIGHT


def _radial_coefficients(omega: complex, a: float, m: int, A: complex, depth: int):
    """Leaver's radial recurrence coefficients alpha_k, beta_k, gamma_k, k = 0..depth.

    Leaver units (2M = 1).  Returns three Python lists (fast scalar loops later).
    """
    s = _S
    b = math.sqrt(1.0 - 4.0 * a * a)
    w = omega
    x = (w / 2.0 - a * m)
    c0 = 1 - s - 1j * w - (2j / b) * x
    c1 = -4 + 2j * w * (2 + b) + (4j / b) * x
    c2 = s + 3 - 3j * w - (2j / b) * x
    c3 = (w * w * (4 + 2 * b - a * a) - 2 * a * m * w - s - 1 + (2 + b) * 1j * w - A
          + ((4 * w + 2j) / b) * x)
    c4 = s + 1 - 2 * w * w - (2 * s + 3) * 1j * w - ((4 * w + 2j) / b) * x
    k = np.arange(depth + 1, dtype=float)
    alpha = k * k + (c0 + 1) * k + c0
    beta = -2 * k * k + (c1 + 2) * k + c3
    gamma = k * k + (c2 - 3) * k + c4 - c2 + 2
    return alpha.tolist(), beta.tolist(), gamma.tolist(), (c0, c1, c2, c3, c4, b)


def _series_inverse(a: np.ndarray) -> np.ndarray:
    """Reciprocal of a truncated power series with a[0] != 0."""
    b = np.zeros_like(a)
    b[0] = 1.0 / a[0]
    for k in range(1, a.size):
        b[k] = -np.dot(a[1:k + 1], b[k - 1::-1]) / a[0]
    return b


def _series_mul(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    return np.convolve(a, b)[: a.size]


def _nollert_coefficients(c0, c1, c2, c3, c4, b: float, omega: complex,
                          order: int = 8) -> np.ndarray:
    """Coefficients C_k of ``a_{N+1}/a_N = sum_k C_k N^{-k/2}`` (Nollert 1993).

    Divide the recurrence ``alpha_N r_N + beta_N + gamma_N / r_{N-1} = 0`` by
    ``N^2`` and expand in ``u = N^{-1/2}`` (with ``r_{N-1}`` re-expanded through
    ``(N-1)^{-k/2} = u^k (1-u^2)^{-k/2}``).  Order ``u^2`` gives
    ``C1^2 = -(c0 + c1 + c2) = -2 i b omega``; the minimal solution takes the
    root with negative real part (checked in the tests against a much deeper
    backward recurrence).  Each further order ``u^{k+1}`` is affine in ``C_k``,
    which is solved for numerically with truncated power-series arithmetic
    (``C2 = (C1^2 + c2 - c0 - 7/2)/2`` in closed form).
    """
    K = max(order + 2, 5)
    pa = np.zeros(K, complex)
    pb = np.zeros(K, complex)
    pg = np.zeros(K, complex)
    pa[[0, 2, 4]] = 1.0, c0 + 1, c0
    pb[[0, 2, 4]] = -2.0, c1 + 2, c3
    pg[[0, 2, 4]] = 1.0, c2 - 3, c4 - c2 + 2
    C1 = cmath.sqrt(-2j * b * omega)
    if C1.real > 0:
        C1 = -C1
    C = np.zeros(K, complex)
    C[0], C[1] = 1.0, C1
    # (1 - u^2)^{-k/2} series, k = 0..K-1
    shifts = []
    for k in range(K):
        ser = np.zeros(K, complex)
        coef = 1.0
        for j in range(0, (K - k + 1) // 2):
            if k + 2 * j < K:
                ser[k + 2 * j] = coef
            coef *= (k / 2.0 + j) / (j + 1)
        shifts.append(ser)

    def residual(Cv: np.ndarray) -> np.ndarray:
        R = Cv
        Rt = sum(Cv[k] * shifts[k] for k in range(K))
        return _series_mul(pa, R) + pb + _series_mul(pg, _series_inverse(Rt))

    for k in range(2, order + 1):
        C[k] = 0.0
        r0 = residual(C)[k + 1]
        C[k] = 1.0
        r1 = residual(C)[k + 1]
        C[k] = -r0 / (r1 - r0)
    return C[: order + 1]


def _nollert_remainder(C: np.ndarray, N: int) -> complex:
    """Evaluate the asymptotic ratio a_{N+1}/a_N from its coefficients."""
    u = N ** -0.5
    return complex(np.polyval(C[::-1], u))


def _inverted_cf(alpha, beta, gamma, n_inv: int, tail: complex) -> complex:
    """Value of the n_inv-times inverted continued fraction (zero at an eigenvalue).

    ``tail`` is the ratio a_{N+1}/a_N at the last index N = len(alpha) - 1.
    """
    N = len(alpha) - 1
    r = tail
    for k in range(N, n_inv, -1):  # backward: r_{k-1} = -gamma_k / (beta_k + alpha_k r_k)
        r = -gamma[k] / (beta[k] + alpha[k] * r)
    q = 0j  # q_k = a_{k-1}/a_k, forward from a_{-1} = 0
    for k in range(n_inv):
        q = -alpha[k] / (beta[k] + gamma[k] * q)
    return (beta[n_inv] + alpha[n_inv] * r + gamma[n_inv] * q) / (n_inv + 1) ** 2


def radial_function(omega_L: complex, a_L: float, m: int, A: complex, n: int,
                    depth: int) -> complex:
    """Leaver's inverted radial continued fraction (Leaver units); zero at a QNM."""
    alpha, beta, gamma, (c0, c1, c2, c3, c4, b) = _radial_coefficients(
        omega_L, a_L, m, A, depth)
    C = _nollert_coefficients(c0, c1, c2, c3, c4, b, omega_L)
    tail = _nollert_remainder(C, depth)
    return _inverted_cf(alpha, beta, gamma, n, tail)


def _angular_coefficients(c: complex, m: int, A: complex, depth: int):
    """Leaver's spheroidal recurrence coefficients (his eq. 20) for k = 0..depth."""
    s = _S
    k1 = abs(m - s) / 2.0
    k2 = abs(m + s) / 2.0
    k = np.arange(depth + 1, dtype=float)
    alpha = -2 * (k + 1) * (k + 2 * k1 + 1)
    beta = (k * (k - 1) + 2 * k * (k1 + k2 + 1 - 2 * c)
            - (2 * c * (2 * k1 + s + 1) - (k1 + k2) * (k1 + k2 + 1))
            - (c * c + s * (s + 1) + A))
    gamma = 2 * c * (k + k1 + k2 + s)
    return (alpha.astype(complex).tolist(), np.asarray(beta, complex).tolist(),
            np.asarray(gamma, complex).tolist())


def angular_depth(c: complex) -> int:
    """Terms used in the angular series (it converges like |2c|^k / k!)."""
    return int(40 + 12 * abs(c))


def angular_function(c: complex, m: int, A: complex, l: int) -> complex:
    """Leaver's inverted angular continued fraction; zero at the separation constant."""
    depth = angular_depth(c)
    alpha, beta, gamma = _angular_coefficients(c, m, A, depth)
    return _inverted_cf(alpha, beta, gamma, l - max(abs(m), abs(_S)), 0j)


def _secant(f, x0: complex, x1: complex, tol: float, maxiter: int = 60) -> complex:
    """Complex secant iteration for an analytic function; raises if it fails.

    If two successive function values are identical (both at round-off level
    next to the root), the iterate is accepted when the residual is tiny
    compared with the largest residual seen; otherwise the step is perturbed.
    """
    f0 = f(x0)
    f1 = f(x1)
    scale = max(abs(f0), abs(f1))
    for _ in range(maxiter):
        if f1 == f0:
            if abs(f1) <= 1e-10 * scale or abs(x1 - x0) <= tol * max(1.0, abs(x1)):
                return x1
            x0, f0 = x1, f1
            x1 = x1 + (1e-7 + 1e-7j) * max(1.0, abs(x1))
            f1 = f(x1)
            continue
        x2 = x1 - f1 * (x1 - x0) / (f1 - f0)
        if not cmath.isfinite(x2):
            raise RuntimeError("secant iteration diverged")
        x0, f0 = x1, f1
        x1 = x2
        if abs(x1 - x0) <= tol * max(1.0, abs(x1)):
            return x1
        f1 = f(x1)
        scale = max(scale, abs(f1))
    raise RuntimeError("secant iteration did not converge")


def schwarzschild_separation_constant(l: int) -> float:
    """``A = l(l+1) - s(s+1)`` at zero spin (Leaver's convention)."""
    return float(l * (l + 1) - _S * (_S + 1))


def angular_separation_constant(l: int, m: int, c: complex, guess: complex | None = None,
                                tol: float = 1e-14) -> complex:
    """Separation constant ``A_lm(c)`` of the spin -2 spheroidal equation.

    Parameters
    ----------
    l, m : int
        Multipole indices.
    c : complex
        Spheroidicity ``a * omega`` (``chi * M * omega``).
    guess : complex, optional
        Starting value; default: the spherical value ``l(l+1) - s(s+1)``.

    Examples
    --------
    >>> angular_separation_constant(2, 2, 0.0)
    (4+0j)
    """
    if c == 0:
        return complex(schwarzschild_separation_constant(l))
    A0 = complex(schwarzschild_separation_constant(l) if guess is None else guess)
    return _secant(lambda A: angular_function(c, m, A, l), A0,
                   A0 + 1e-6 * (1 + abs(A0)), tol)


class _ModeProblem:
    """The coupled radial + angular problem at one spin, for one (l, m, n)."""

    def __init__(self, l: int, m: int, n: int, spin: float, A_guess: complex):
        self.l, self.m, self.n, self.spin = l, m, n, spin
        self.a_L = spin / 2.0
        self.A = A_guess

    def A_of(self, omega: complex) -> complex:
        c = self.spin * omega  # c = a_L omega_L = chi M omega
        self.A = angular_separation_constant(self.l, self.m, c, self.A)
        return self.A

    def F(self, omega: complex, depth: int) -> complex:
        A = self.A_of(omega)
        return radial_function(2.0 * omega, self.a_L, self.m, A, self.n, depth)

    def solve(self, guess: complex, depth: int, tol: float) -> complex:
        step = 1e-6 * (1 + abs(guess))
        return _secant(lambda w: self.F(w, depth), guess, guess + step, tol)


def default_depth(n: int, spin: float) -> int:
    """Starting depth of the radial continued fraction (doubled until converged)."""
    b = math.sqrt(max(1.0 - spin * spin, 1e-12))
    return int(min(200 + 100 * n / max(b, 0.05) ** 0.5, 20000))


def solve_at(l: int, m: int, n: int, spin: float, guess: complex,
             A_guess: complex | None = None, depth: int | None = None,
             tol: float = 1e-11, max_depth: int = 2 ** 17) -> tuple[complex, complex, int]:
    """One root near ``guess`` at a single spin, converged in the depth.

    Returns ``(M*omega, A, depth_used)``.  The depth is doubled until the root
    changes by less than ``tol`` (relative).
    """
    if A_guess is None:
        A_guess = schwarzschild_separation_constant(l)
    d = depth or default_depth(n, spin)
    prob = _ModeProblem(l, m, n, spin, A_guess)
    w = prob.solve(guess, d, tol * 0.1)
    while True:
        w2 = prob.solve(w, 2 * d, tol * 0.1)
        if abs(w2 - w) <= tol * abs(w2):
            A = prob.A_of(w2)
            return w2, A, d
        d *= 2
        if d > max_depth:
            raise RuntimeError(
                f"Leaver continued fraction for mode {(l, m, n)} at spin {spin} did not "
                f"converge within depth {max_depth}")
        w = w2


def schwarzschild_omega(l: int, n: int, tol: float = 1e-11) -> complex:
    """Schwarzschild QNM ``M*omega`` of overtone ``n`` (Re > 0), found from scratch.

    The fundamental starts from the eikonal estimate ``(l + 1/2 - i/2)/sqrt(27)``;
    each higher overtone starts from a linear extrapolation of the two below it.

    Examples
    --------
    >>> w = schwarzschild_omega(2, 0)
    >>> round(w.real, 6), round(w.imag, 6)
    (0.373672, -0.088962)
    """
    roots: list[complex] = []
    for k in range(n + 1):
        if k == 0:
            g = complex(l + 0.5, -0.5) / math.sqrt(27.0)
        elif k == 1:
            g = roots[0] - 1j / math.sqrt(27.0)
        else:
            g = 2 * roots[-1] - roots[-2]
        w, _, _ = solve_at(l, 0, k, 0.0, g, tol=tol)
        roots.append(w)
    return roots[n]


def _spin_path(spin: float) -> np.ndarray:
    """Spins from 0 to ``spin``, evenly spaced in ``sqrt(1 - chi)`` (denser near 1)."""
    y_end = math.sqrt(1.0 - spin)
    steps = max(2, int(math.ceil((1.0 - y_end) / 0.01)))
    y = np.linspace(1.0, y_end, steps + 1)
    return 1.0 - y * y


def follow_mode(l: int, m: int, n: int, spins, tol: float = 1e-11,
                omega0: complex | None = None):
    """Follow one mode continuously along an increasing sequence of spins.

    The first spin must be 0.  Guesses are extrapolated (quadratically once
    three points exist) from the previous roots.

    Returns
    -------
    omega, A : complex ndarray
        ``M*omega`` and the separation constant at each spin.
    depths : int ndarray
        Continued-fraction depth used at each spin.
    """
    spins = np.asarray(spins, dtype=float)
    if spins[0] != 0.0 or np.any(np.diff(spins) <= 0):
        raise ValueError("spins must start at 0 and increase")
    om = np.empty(spins.size, complex)
    AA = np.empty(spins.size, complex)
    dd = np.empty(spins.size, int)
    w0 = omega0 if omega0 is not None else schwarzschild_omega(l, n, tol)
    depth = None
    for i, chi in enumerate(spins):
        if i == 0:
            g, Ag = w0, None
        elif i == 1:
            g, Ag = om[0], AA[0]
        else:
            # quadratic (Lagrange) extrapolation in spin from the last three roots
            j = slice(max(0, i - 3), i)
            xs, ws, As = spins[j], om[j], AA[j]
            g = _lagrange(xs, ws, chi)
            Ag = _lagrange(xs, As, chi)
        w, A, depth = solve_at(l, m, n, float(chi), complex(g), Ag, depth, tol)
        om[i], AA[i], dd[i] = w, A, depth
    return om, AA, dd


def _lagrange(xs, ys, x):
    total = 0j
    for i, (xi, yi) in enumerate(zip(xs, ys, strict=True)):
        w = 1.0
        for j, xj in enumerate(xs):
            if j != i:
                w *= (x - xj) / (xi - xj)
        total += w * yi
    return total


def solve_mode(l: int, m: int, n: int, spin: float, guess: complex | None = None,
               tol: float = 1e-11) -> tuple[complex, complex]:
    """Solve Leaver's equations directly for one Kerr QNM.

    Parameters
    ----------
    l, m, n : int
        Mode indices (``l >= 2``, ``|m| <= l``, ``n >= 0``), spin weight -2.
    spin : float
        Dimensionless spin ``0 <= chi < 1``.
    guess : complex, optional
        Starting ``M*omega``.  Without it the mode is followed continuously in
        spin from its Schwarzschild value (slower but unambiguous).
    tol : float
        Relative tolerance on ``omega`` (also the depth-doubling criterion).

    Returns
    -------
    omega : complex
        ``M*omega`` with ``Im(omega) < 0`` (time dependence ``exp(-i omega t)``).
    A : complex
        Separation constant (``l(l+1) - s(s+1)`` at zero spin).

    Examples
    --------
    >>> w, A = solve_mode(2, 2, 0, 0.0)
    >>> round(w.real, 6), round(w.imag, 6), A
    (0.373672, -0.088962, (4+0j))
    """
    _validate(l, m, n, spin)
    if guess is not None:
        # separation constant guess from a Schwarzschild-continued start is only
        # needed near c = 0; otherwise follow A continuously from c = 0 at fixed omega
        A_guess = _follow_A(l, m, spin * complex(guess))
        w, A, _ = solve_at(l, m, n, float(spin), complex(guess), A_guess, None, tol)
        return w, A
    path = _spin_path(float(spin)) if spin > 0 else np.array([0.0])
    om, AA, _ = follow_mode(l, m, n, path, tol)
    return complex(om[-1]), complex(AA[-1])


def _validate(l, m, n, spin) -> None:
    from numbers import Integral, Real

    from ringsearch.errors import InputError

    for name, v in (("l", l), ("m", m), ("n", n)):
        if not isinstance(v, Integral) or isinstance(v, bool):
            raise InputError(f"mode index {name}={v!r} must be an integer.")
    if l < 2 or abs(m) > l or n < 0:
        raise InputError(f"mode (l, m, n)={(l, m, n)} is impossible (need l >= 2, |m| <= l, "
                         "n >= 0).")
    if not isinstance(spin, Real) or not math.isfinite(spin) or not 0 <= spin < 1:
        raise InputError(f"spin={spin!r} must be a number with 0 <= spin < 1.")


def _follow_A(l: int, m: int, c: complex, steps: int = 8) -> complex:
    """Separation constant at ``c``, followed from ``c = 0`` in small steps."""
    A = complex(schwarzschild_separation_constant(l))
    for t in np.linspace(0, 1, steps + 1)[1:]:
        A = angular_separation_constant(l, m, t * c, A)
    return A
