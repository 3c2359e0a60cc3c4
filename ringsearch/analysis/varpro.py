"""Free-frequency ringdown fits by variable projection (Golub & Pereyra 1973).

A sum of damped sinusoids is linear in its amplitudes and nonlinear in its
frequencies and damping times.  Variable projection eliminates the linear
part exactly: for nonlinear parameters θ the best amplitudes are
``â(θ) = A(θ)⁺ y`` and the residual is ``r(θ) = P⊥(θ) y`` with ``P⊥`` the
projector orthogonal to the whitened design matrix ``A(θ)``.  Only θ is
optimised (scipy's bounded trust-region least squares), with the
Golub–Pereyra Jacobian

``∂r/∂θ_j = -(P⊥ D_j â + (A⁺)ᵀ D_jᵀ r)``,  ``D_j = ∂A/∂θ_j``,

computed analytically for (f, τ) and by the chain rule for (mass, spin).
The parameter covariance is the inverse Fisher matrix with the amplitudes
marginalised, ``(Jₖᵀ Jₖ)⁻¹`` with the Kaufman columns ``Jₖ = -P⊥ D_j â``
(the Schur complement of the joint (θ, a) Fisher matrix).

Two parameterisations are provided: :func:`fit_free_modes` (agnostic: a free
(f, τ) per mode) and :func:`fit_kerr` ((mass, spin) with Kerr (2,2,n) modes).
Both run several starting points and report which converged to the same
solution.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import scipy.linalg as sla
from scipy.optimize import least_squares

from ringsearch.analysis.fits import FitResult, damped_basis, fit_amplitudes
from ringsearch.analysis.noise_model import ToeplitzNoise
from ringsearch.errors import InputError

__all__ = ["VarproResult", "fit_free_modes", "fit_kerr"]

#: (theta) -> (f_hz (K,), tau_s (K,), df/dtheta (K, P), dtau/dtheta (K, P))
ParamMap = Callable[[np.ndarray], tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]]


@dataclass
class VarproResult:
    """Best variable-projection fit and the outcome of every starting point."""

    names: list[str]
    params: np.ndarray
    param_sigma: np.ndarray
    param_cov: np.ndarray
    f_hz: np.ndarray
    tau_s: np.ndarray
    linear: FitResult               # amplitudes etc. at the best parameters
    residual_chi2: float
    starts: pd.DataFrame            # one row per start: start_*, end_*, chi2, status, group
    n_agree: int                    # starts that reached the best solution
    warnings: list[str] = field(default_factory=list)

    def as_dict(self) -> dict:
        """JSON-friendly summary."""
        return {"params": {k: float(v) for k, v in zip(self.names, self.params, strict=True)},
                "sigma": {k: float(v) for k, v in zip(self.names, self.param_sigma, strict=True)},
                "residual_chi2": self.residual_chi2, "n_starts": len(self.starts),
                "n_agree": self.n_agree, "warnings": list(self.warnings)}


def _basis_derivatives(t: np.ndarray, f: np.ndarray, tau: np.ndarray
                       ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Design matrix and its derivatives with respect to each f_k and tau_k."""
    x = damped_basis(t, f, tau)
    tt = t[:, None]
    dxf = np.empty_like(x)   # d/df of e^{-t/τ} (cos, sin)(2πft) = 2πt e^{-t/τ} (-sin, cos)
    dxf[:, 0::2] = -2 * np.pi * tt * x[:, 1::2]
    dxf[:, 1::2] = 2 * np.pi * tt * x[:, 0::2]
    dxt = x * np.repeat(tt / tau[None, :] ** 2, 2, axis=1)
    return x, dxf, dxt


class _Problem:
    def __init__(self, y, t, noise: ToeplitzNoise, pmap: ParamMap):
        self.t = np.asarray(t, float)
        self.noise = noise
        self.yw = noise.whiten(np.asarray(y, float))
        self.pmap = pmap
        self._cache = None   # (theta bytes, pieces): least_squares asks for r and J at one x

    def _pieces(self, theta):
        key = np.asarray(theta, float).tobytes()
        if self._cache is not None and self._cache[0] == key:
            return self._cache[1]
        f, tau, dfd, dtd = self.pmap(np.asarray(theta, float))
        x, dxf, dxt = _basis_derivatives(self.t, f, tau)
        k2 = x.shape[1]
        big = self.noise.whiten(np.hstack([x, dxf, dxt]))
        aw, dfw, dtw = big[:, :k2], big[:, k2:2 * k2], big[:, 2 * k2:]
        q, r = sla.qr(aw, mode="economic", check_finite=False)
        qy = q.T @ self.yw
        amps = sla.solve_triangular(r, qy, check_finite=False)
        resid = self.yw - q @ qy
        p = dfd.shape[1]
        dmats = []
        for j in range(p):
            wts = np.repeat(dfd[:, j], 2)[None, :] * dfw + np.repeat(dtd[:, j], 2)[None, :] * dtw
            dmats.append(wts)
        out = (q, r, amps, resid, dmats)
        self._cache = (key, out)
        return out

    def residual(self, theta):
        try:
            return self._pieces(theta)[3]
        except (np.linalg.LinAlgError, ValueError):
            return np.full_like(self.yw, 1e10)

    def jacobian(self, theta, kaufman: bool = False):
        q, r, amps, resid, dmats = self._pieces(theta)
        cols = []
        for d in dmats:
            da = d @ amps
            term1 = da - q @ (q.T @ da)                   # P⊥ D â
            if kaufman:
                cols.append(-term1)
                continue
            # (A⁺)ᵀ Dᵀ r = Q R⁻ᵀ Dᵀ r
            w = sla.solve_triangular(r, d.T @ resid, trans="T", check_finite=False)
            cols.append(-(term1 + q @ w))
        return np.stack(cols, axis=1)


def _run(y, t, noise, pmap: ParamMap, names: list[str], starts: np.ndarray,
         bounds: tuple[np.ndarray, np.ndarray], canon: Callable[[np.ndarray], np.ndarray],
         x_scale: np.ndarray) -> VarproResult:
    prob = _Problem(y, t, noise, pmap)
    rows, ends, chi2s = [], [], []
    for i, x0 in enumerate(starts):
        x0 = np.clip(x0, bounds[0], bounds[1])
        sol = least_squares(prob.residual, x0, jac=prob.jacobian, bounds=bounds,
                            method="trf", x_scale=x_scale, xtol=1e-12, ftol=1e-14, gtol=1e-12,
                            max_nfev=200)
        end = canon(sol.x)
        chi2 = float(2 * sol.cost)
        ends.append(end)
        chi2s.append(chi2)
        row = {"start": i, "chi2": chi2, "status": int(sol.status), "nfev": int(sol.nfev)}
        row.update({f"start_{k}": v for k, v in zip(names, x0, strict=True)})
        row.update({f"end_{k}": v for k, v in zip(names, end, strict=True)})
        rows.append(row)
    ends_a = np.asarray(ends)
    best = int(np.argmin(chi2s))
    theta = ends_a[best]
    jk = prob.jacobian(theta, kaufman=True)
    warnings: list[str] = []
    try:
        cov = np.linalg.inv(jk.T @ jk)
        sig = np.sqrt(np.clip(np.diag(cov), 0, None))
    except np.linalg.LinAlgError:
        cov = np.full((len(theta), len(theta)), np.inf)
        sig = np.full(len(theta), np.inf)
        warnings.append("the Fisher matrix is singular at the best fit: parameters are "
                        "not constrained by the data.")
    # Starts agree when every parameter is within 0.1 sigma (or 1e-6 relative) of the best.
    tol = np.maximum(0.1 * np.where(np.isfinite(sig), sig, 0), 1e-6 * np.abs(theta))
    groups = np.full(len(ends_a), -1)
    gid = 0
    order = np.argsort(chi2s)
    for i in order:
        if groups[i] >= 0:
            continue
        same = np.all(np.abs(ends_a - ends_a[i]) <= tol, axis=1) & (groups < 0)
        groups[same] = gid
        gid += 1
    starts_df = pd.DataFrame(rows)
    starts_df["group"] = groups
    n_agree = int(np.sum(groups == groups[best]))
    if n_agree < max(2, len(starts) // 2):
        warnings.append(f"only {n_agree} of {len(starts)} starting points reached the best "
                        "solution; the fit has several local minima.")
    at_bound = (np.isclose(theta, bounds[0], rtol=1e-6) | np.isclose(theta, bounds[1], rtol=1e-6))
    if at_bound.any():
        warnings.append("best fit on the boundary for " +
                        ", ".join(n for n, b in zip(names, at_bound, strict=True) if b) + ".")
    f, tau, _, _ = pmap(theta)
    lin = fit_amplitudes(y, t, noise, f, tau)
    warnings.extend(lin.warnings)
    return VarproResult(names=names, params=theta, param_sigma=sig, param_cov=cov, f_hz=f,
                        tau_s=tau, linear=lin, residual_chi2=float(chi2s[best]),
                        starts=starts_df, n_agree=n_agree, warnings=warnings)


def fit_free_modes(y: np.ndarray, t: np.ndarray, noise: ToeplitzNoise,
                   f_start: Sequence[float], tau_start: Sequence[float],
                   f_bounds: tuple[float, float] = (20.0, 1000.0),
                   tau_bounds: tuple[float, float] = (1e-4, 0.1), n_starts: int = 6,
                   spread: float = 0.1, rng: np.random.Generator | int = 0) -> VarproResult:
    """Agnostic fit: free frequency and damping time for each of K modes.

    Parameters
    ----------
    y, t : array
        Segment of band-passed strain and its sample times relative to t0 (s).
    noise : ToeplitzNoise
        Noise model for the segment length.
    f_start, tau_start : sequences of K floats
        First starting point (e.g. the Kerr values at the posterior maximum).
    f_bounds, tau_bounds : (lo, hi)
        Bounds in Hz and s for every mode.
    n_starts : int
        Number of starting points: the given one and ``n_starts - 1``
        perturbed by a relative ``spread`` (log-normal), drawn from ``rng``.
    rng : numpy.random.Generator or int
        Random generator (or seed) for the perturbed starts.

    Returns
    -------
    VarproResult
        Parameters ``f0, tau0, f1, tau1, ...`` ordered by decreasing damping
        time (n = 0 first), Fisher errors, the linear fit at the optimum, and
        a table of starts with the group each converged to.

    Examples
    --------
    >>> import numpy as np
    >>> from ringsearch.analysis.noise_model import toeplitz_noise
    >>> fr = np.linspace(0, 2048, 2049)
    >>> tn = toeplitz_noise(fr, np.full_like(fr, 1e-46), 4096.0, 200, f_low=0.0, f_high=2048.0)
    >>> t = np.arange(200) / 4096.0
    >>> y = 1e-21 * np.exp(-t / 0.004) * np.cos(2 * np.pi * 250 * t)
    >>> r = fit_free_modes(y, t, tn, [240.0], [0.0045], n_starts=2)
    >>> bool(abs(r.f_hz[0] / 250 - 1) < 1e-8)
    True
    """
    f0 = np.asarray(f_start, float)
    t0 = np.asarray(tau_start, float)
    if f0.shape != t0.shape or f0.ndim != 1 or len(f0) == 0:
        raise InputError("f_start and tau_start must be equal-length, non-empty lists.")
    if 2 * len(f0) >= len(y) // 2:
        raise InputError(f"{len(f0)} free modes cannot be constrained by {len(y)} samples.")
    k = len(f0)
    names = [f"{p}{i}" for i in range(k) for p in ("f", "tau")]

    def pmap(theta):
        f = theta[0::2]
        tau = theta[1::2]
        p = 2 * k
        dfd = np.zeros((k, p))
        dtd = np.zeros((k, p))
        dfd[np.arange(k), 2 * np.arange(k)] = 1.0
        dtd[np.arange(k), 2 * np.arange(k) + 1] = 1.0
        return f, tau, dfd, dtd

    def canon(theta):
        pairs = theta.reshape(k, 2)
        return pairs[np.argsort(-pairs[:, 1], kind="stable")].ravel()

    lo = np.tile([f_bounds[0], tau_bounds[0]], k)
    hi = np.tile([f_bounds[1], tau_bounds[1]], k)
    first = np.column_stack([f0, t0]).ravel()
    gen = rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)
    starts = [first] + [first * np.exp(spread * gen.standard_normal(2 * k))
                        for _ in range(max(0, n_starts - 1))]
    scale = np.tile([10.0, 1e-3], k)
    return _run(y, t, noise, pmap, names, np.asarray(starts), (lo, hi), canon, scale)


def fit_kerr(y: np.ndarray, t: np.ndarray, noise: ToeplitzNoise, n_overtones: int,
             mass_start: float, spin_start: float, mass_bounds: tuple[float, float],
             spin_bounds: tuple[float, float], modes=None, n_starts: int = 6,
             rng: np.random.Generator | int = 0) -> VarproResult:
    """Kerr-constrained fit: (mass, spin) with modes (2,2,0..N) and free amplitudes.

    Starting points: the given one plus ``n_starts - 1`` drawn uniformly in
    the bounds from ``rng``.  The (f, τ) derivatives with respect to (mass,
    spin) come from central differences of the QNM provider.

    Examples
    --------
    >>> import numpy as np
    >>> from ringsearch.analysis.noise_model import toeplitz_noise
    >>> def toy(m, s, n):   # a made-up spectrum for the example only
    ...     m, s = np.asarray(m, float), np.asarray(s, float)
    ...     return 16000.0 / m * (1 + 0.3 * s) * (1 - 0.02 * n), m * 6e-5 / (1 + 2 * n) * (1 + s)
    >>> fr = np.linspace(0, 2048, 2049)
    >>> tn = toeplitz_noise(fr, np.full_like(fr, 1e-46), 4096.0, 300, f_low=0.0, f_high=2048.0)
    >>> t = np.arange(300) / 4096.0
    >>> f, tau = toy(65.0, 0.6, 0)
    >>> y = 1e-21 * np.exp(-t / tau) * np.cos(2 * np.pi * f * t)
    >>> r = fit_kerr(y, t, tn, 0, 60.0, 0.5, (40, 90), (0.0, 0.95), modes=toy, n_starts=2)
    >>> np.round(r.params, 4).tolist()
    [65.0, 0.6]
    """
    if modes is None:
        from ringsearch.analysis.posterior import kerr_modes
        modes = kerr_modes()
    nm = int(n_overtones) + 1
    if nm < 1 or 2 * nm >= len(y) // 2:
        raise InputError(f"n_overtones={n_overtones} cannot be constrained by {len(y)} samples.")

    def pmap(theta):
        m, s = theta
        hm, hs = 1e-6 * m, 1e-6
        s_lo, s_hi = max(s - hs, spin_bounds[0] - 1e-9), min(s + hs, spin_bounds[1] + 1e-9)
        # one vectorised call per mode: the point and its four central-difference neighbours
        mm = np.array([m, m + hm, m - hm, m, m])
        ss = np.array([s, s, s, s_hi, s_lo])
        fs = np.empty((nm, 5))
        ts = np.empty((nm, 5))
        for n in range(nm):
            f, tau = modes(mm, ss, n)
            fs[n], ts[n] = np.ravel(f), np.ravel(tau)
        ds = s_hi - s_lo
        dfd = np.column_stack([(fs[:, 1] - fs[:, 2]) / (2 * hm), (fs[:, 3] - fs[:, 4]) / ds])
        dtd = np.column_stack([(ts[:, 1] - ts[:, 2]) / (2 * hm), (ts[:, 3] - ts[:, 4]) / ds])
        return fs[:, 0], ts[:, 0], dfd, dtd

    lo = np.array([mass_bounds[0], spin_bounds[0]], float)
    hi = np.array([mass_bounds[1], spin_bounds[1]], float)
    if not (0 < lo[0] < hi[0]) or not (lo[1] < hi[1]):
        raise InputError(f"the bounds mass {mass_bounds} and spin {spin_bounds} must be "
                         "increasing (and masses positive).")
    gen = rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)
    starts = [np.array([mass_start, spin_start], float)] + [
        lo + (hi - lo) * gen.uniform(size=2) for _ in range(max(0, n_starts - 1))]
    return _run(y, t, noise, pmap, ["mass", "spin"], np.asarray(starts), (lo, hi),
                lambda x: np.asarray(x, float), np.array([1.0, 0.01]))
