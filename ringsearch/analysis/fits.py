"""Noise-weighted linear fits of damped sinusoids with fixed frequencies.

Given the frequencies and damping times of K modes (from a remnant's mass and
spin, or chosen freely), the ringdown ``h(t) = Σ_k e^{-(t-t_ref)/τ_k}
[a_k cos 2πf_k(t-t_ref) + b_k sin 2πf_k(t-t_ref)]`` for ``t >= t0`` is linear in
its 2K real amplitudes.  They follow from weighted least squares through the
Toeplitz noise model of :mod:`ringsearch.analysis.noise_model`: whiten the
data and the design matrix with the Cholesky factor, then solve with a QR
factorisation (never the normal equations, which square the condition
number).  The complex amplitude of mode k is ``A_k = a_k + i b_k`` so that
``h = Re Σ A_k exp(-i ω_k (t - t_ref))`` with ``ω = 2π f - i/τ`` (the project's
``exp(-iωt)`` convention).

This module also holds :class:`DetectorSeries`, the minimal strain container
the analysis needs, and :func:`start_time_scan`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import scipy.linalg as sla

from ringsearch.analysis.noise_model import ToeplitzNoise
from ringsearch.errors import InputError
from ringsearch.physics import basis as physics_basis

__all__ = ["DetectorSeries", "damped_basis", "FitResult", "fit_amplitudes",
           "start_time_scan"]


@dataclass
class DetectorSeries:
    """Band-passed strain of one detector, sampled uniformly.

    Attributes
    ----------
    name : str
        Detector name (``"H1"``...).
    values : numpy.ndarray
        Strain samples (dimensionless).
    t_start : float
        GPS time of ``values[0]`` in s.
    sample_rate : float
        Samples per second.
    time_shift : float
        Arrival-time offset of the signal in this detector relative to the
        reference start time, in s (the segment of this detector starts at
        ``t0 + time_shift``).
    """

    name: str
    values: np.ndarray
    t_start: float
    sample_rate: float
    time_shift: float = 0.0

    @property
    def t_end(self) -> float:
        """GPS time just after the last sample."""
        return self.t_start + len(self.values) / self.sample_rate

    def segment(self, t0: float, n: int) -> tuple[np.ndarray, np.ndarray]:
        """Samples at or after ``t0 + time_shift`` and their times relative to ``t0 + time_shift``.

        Examples
        --------
        >>> import numpy as np
        >>> s = DetectorSeries("H1", np.arange(10.0), 100.0, 10.0)
        >>> y, t = s.segment(100.25, 3)
        >>> y.tolist(), np.round(t, 3).tolist()
        ([3.0, 4.0, 5.0], [0.05, 0.15, 0.25])
        """
        start = t0 + self.time_shift
        i0 = int(math.ceil((start - self.t_start) * self.sample_rate - 1e-6))
        if i0 < 0 or i0 + n > len(self.values):
            raise InputError(
                f"the start time {start:.4f} with a {n / self.sample_rate:.3f} s segment lies "
                f"outside the {self.name} data [{self.t_start:.3f}, {self.t_end:.3f}] s.")
        y = np.asarray(self.values[i0:i0 + n], float)
        if not np.all(np.isfinite(y)):
            raise InputError(f"the {self.name} data starting at {start:.4f} contains missing "
                             "(NaN) samples.")
        times = self.t_start + (i0 + np.arange(n)) / self.sample_rate - start
        return y, times


def damped_basis(t: np.ndarray, f_hz: np.ndarray, tau_s: np.ndarray) -> np.ndarray:
    """Design matrix of damped cosines and sines: shape ``(len(t), 2K)``, or ``(len(t), ..., 2K)``.

    Column ``2k`` is ``e^{-t/τ_k} cos 2πf_k t`` and ``2k+1`` the sine (the
    rows of :func:`ringsearch.physics.basis.damped_basis`, transposed); ``t`` is
    measured from the amplitude reference time.  Unlike the signal model, the
    functions are not cut at ``t < 0``: a fit may refer its amplitudes to a
    time after the segment's first sample (a start-time scan with a common
    reference).  ``f_hz`` and ``tau_s`` of shape ``(..., K)`` give one matrix
    per leading index, on the middle axes.

    Examples
    --------
    >>> import numpy as np
    >>> damped_basis(np.array([0.0, 0.001]), np.array([250.0]), np.array([0.004])).shape
    (2, 2)
    >>> x = damped_basis(np.array([-0.001, 0.0]), [250.0], [0.004])
    >>> bool(np.allclose(x[0], [np.exp(0.25) * np.cos(np.pi / 2), -np.exp(0.25)]))
    True
    >>> damped_basis(np.zeros(3), np.ones((5, 2)), np.ones((5, 2))).shape
    (3, 5, 4)
    """
    t = np.asarray(t, float)
    f, tau = np.broadcast_arrays(np.atleast_1d(np.asarray(f_hz, float)),
                                 np.atleast_1d(np.asarray(tau_s, float)))
    c = min(0.0, float(t.min())) if t.size else 0.0
    u = physics_basis.damped_basis(t - c, f, tau)  # (..., 2K, n), at times >= 0 only
    if c < 0.0:
        # earlier times: e^{(2πi f - 1/τ)(s + c)} = e^{(2πi f - 1/τ) s} z_k, so each
        # (cos, sin) pair is the pair at s, rotated and scaled by z_k = e^{-c/τ} e^{2πi f c}
        env = np.exp(-c / tau)[..., None]
        zr = env * np.cos(2.0 * np.pi * f * c)[..., None]
        zi = env * np.sin(2.0 * np.pi * f * c)[..., None]
        cs, sn = u[..., 0::2, :].copy(), u[..., 1::2, :].copy()
        u[..., 0::2, :] = cs * zr - sn * zi
        u[..., 1::2, :] = cs * zi + sn * zr
    return np.moveaxis(u, -1, 0)


@dataclass
class FitResult:
    """Outcome of a fixed-frequency fit (all amplitudes in strain at ``t_ref``)."""

    f_hz: np.ndarray
    tau_s: np.ndarray
    amplitudes: np.ndarray          # 2K real (a_0, b_0, a_1, b_1, ...)
    covariance: np.ndarray          # 2K x 2K, strain^2
    amp_abs: np.ndarray             # |A_k|
    amp_abs_sigma: np.ndarray       # 1-sigma of |A_k| (linearised)
    phase_rad: np.ndarray           # arg A_k
    phase_sigma_rad: np.ndarray
    mode_snr: np.ndarray            # optimal SNR of each fitted mode component
    snr: float                      # SNR of the fitted signal, sqrt(y^T P y)
    residual_chi2: float            # whitened residual power
    dof: int                        # n - 2K
    cond: float                     # condition number of the column-normalised whitened design
    log_likelihood: float           # maximum log-likelihood (up to the data's constant)
    warnings: list[str] = field(default_factory=list)

    @property
    def complex_amplitudes(self) -> np.ndarray:
        """``A_k = a_k + i b_k``."""
        return self.amplitudes[0::2] + 1j * self.amplitudes[1::2]


def _mode_labels(k: int) -> str:
    return f"n={k}"


def fit_amplitudes(y: np.ndarray, t: np.ndarray, noise: ToeplitzNoise, f_hz, tau_s,
                   t_ref: float = 0.0) -> FitResult:
    """Weighted least-squares amplitudes of K damped sinusoids in one segment.

    Parameters
    ----------
    y : array
        Segment of band-passed strain (``noise.n`` samples starting at t0).
    t : array
        Sample times in s relative to the segment's start time t0 (``t >= 0``).
    noise : ToeplitzNoise
        Factored noise covariance for this segment length.
    f_hz, tau_s : array-like
        Mode frequencies (Hz) and damping times (s).
    t_ref : float
        Amplitude reference time in s relative to t0 (e.g. ``-0.003`` refers
        amplitudes to 3 ms before this segment's start, for a start-time scan).

    Returns
    -------
    FitResult
        Amplitudes, covariance ``(X^T C^{-1} X)^{-1}``, per-mode SNR, condition
        number and warnings.  Two warnings are issued:

        * *ill-conditioned*: the least-squares perturbation bound
          ``||δc|| / ||c|| <= cond * ||P n|| / ||X c||`` (Golub & Van Loan,
          "Matrix Computations", §5.3) with the expected projected noise
          ``||P n|| = sqrt(2K)`` (whitened units) and signal ``||X c|| = SNR``
          exceeds 1, i.e. ``cond * sqrt(2K) > SNR``: noise can change the
          amplitudes by more than their size.
        * *mode consistent with zero*: ``|A_k| < σ(|A_k|)`` for some mode.

    Examples
    --------
    >>> import numpy as np
    >>> from ringsearch.analysis.noise_model import toeplitz_noise
    >>> fs, n = 4096.0, 400
    >>> fr = np.linspace(0, 2048, 2049)
    >>> tn = toeplitz_noise(fr, np.full_like(fr, 1e-46), fs, n, f_low=0.0, f_high=2048.0)
    >>> t = np.arange(n) / fs
    >>> y = 1e-21 * np.exp(-t / 0.004) * np.cos(2 * np.pi * 250 * t)
    >>> r = fit_amplitudes(y, t, tn, [250.0], [0.004])
    >>> bool(np.isclose(r.amp_abs[0], 1e-21, rtol=1e-10))
    True
    """
    f = np.atleast_1d(np.asarray(f_hz, float))
    tau = np.atleast_1d(np.asarray(tau_s, float))
    if f.shape != tau.shape or f.ndim != 1 or len(f) == 0:
        raise InputError("f_hz and tau_s must be equal-length, non-empty lists.")
    if np.any(tau <= 0) or np.any(f <= 0):
        raise InputError("every mode needs a positive frequency and damping time.")
    k2 = 2 * len(f)
    n = len(y)
    if k2 >= n:
        raise InputError(f"{len(f)} modes ({k2} amplitudes) cannot be constrained by "
                         f"{n} samples.")
    x = damped_basis(np.asarray(t, float) - t_ref, f, tau)
    xw = noise.whiten(x)
    yw = noise.whiten(np.asarray(y, float))
    q, r = sla.qr(xw, mode="economic", check_finite=False)
    qy = q.T @ yw
    amps = sla.solve_triangular(r, qy, check_finite=False)
    rinv = sla.solve_triangular(r, np.eye(k2), check_finite=False)
    cov = rinv @ rinv.T
    norms = np.linalg.norm(xw, axis=0)
    sv = np.linalg.svd(xw / np.where(norms > 0, norms, 1.0), compute_uv=False)
    cond = float(sv[0] / sv[-1]) if sv[-1] > 0 else math.inf
    snr = float(np.linalg.norm(qy))
    resid = float(yw @ yw - qy @ qy)
    a, b = amps[0::2], amps[1::2]
    absA = np.hypot(a, b)
    abs_sig = np.empty_like(absA)
    ph_sig = np.empty_like(absA)
    mode_snr = np.empty_like(absA)
    for k in range(len(f)):
        c = cov[2 * k:2 * k + 2, 2 * k:2 * k + 2]
        if absA[k] > 0:
            g = np.array([a[k], b[k]]) / absA[k]
            abs_sig[k] = math.sqrt(max(g @ c @ g, 0.0))
            gp = np.array([-b[k], a[k]]) / absA[k] ** 2
            ph_sig[k] = min(math.sqrt(max(gp @ c @ gp, 0.0)), math.pi)
        else:   # zero amplitude: phase undetermined
            abs_sig[k] = math.sqrt(0.5 * np.trace(c))
            ph_sig[k] = math.pi
        comp = xw[:, 2 * k:2 * k + 2] @ amps[2 * k:2 * k + 2]
        mode_snr[k] = float(np.linalg.norm(comp))
    warnings: list[str] = []
    if not math.isfinite(cond) or cond * math.sqrt(k2) > max(snr, 1e-300):
        warnings.append(
            f"ill-conditioned fit: condition number {cond:.3g} times sqrt(2K)={math.sqrt(k2):.2f} "
            f"exceeds the fitted SNR {snr:.3g}, so noise can change the amplitudes by more than "
            "their size.")
    weak = [k for k in range(len(f)) if absA[k] < abs_sig[k]]
    if weak:
        warnings.append("amplitude consistent with zero (|A| < 1 sigma) for mode(s) "
                        + ", ".join(_mode_labels(k) for k in weak) + ".")
    return FitResult(f_hz=f, tau_s=tau, amplitudes=amps, covariance=cov, amp_abs=absA,
                     amp_abs_sigma=abs_sig, phase_rad=np.arctan2(b, a), phase_sigma_rad=ph_sig,
                     mode_snr=mode_snr, snr=snr, residual_chi2=resid, dof=n - k2, cond=cond,
                     log_likelihood=-0.5 * resid, warnings=warnings)


def start_time_scan(series: DetectorSeries, noise: ToeplitzNoise, t0_gps, f_hz, tau_s,
                    max_overtones: int | None = None, t_ref_gps: float | None = None
                    ) -> pd.DataFrame:
    """Fits for every start time and every overtone count N = 0..N_max.

    Parameters
    ----------
    series : DetectorSeries
        Band-passed strain of one detector.
    noise : ToeplitzNoise
        Noise model for the segment length (one factorisation for all t0).
    t0_gps : array-like
        Start times (GPS s).
    f_hz, tau_s : array-like
        Frequencies and damping times of the modes n = 0..N_max, in order.
    max_overtones : int, optional
        Largest N (defaults to ``len(f_hz) - 1``).
    t_ref_gps : float, optional
        Common amplitude reference time (default: the earliest t0), so that
        amplitudes at different t0 are comparable (a constant for a true QNM).

    Returns
    -------
    pandas.DataFrame
        One row per (t0, N, mode n) with columns ``detector, t0_gps_s, t0_rel_ms,
        n_overtones, mode_n, f_hz, tau_s, amp_strain, amp_sigma_strain,
        phase_rad, phase_sigma_rad, mode_snr, fit_snr, residual_chi2,
        residual_dof, residual_chi2_sigma, cond, ill_conditioned``.
        ``t0_rel_ms`` is relative to ``t_ref_gps``; the residual power of pure
        band-passed noise has mean ``residual_dof`` (the in-band dimensions
        :attr:`ToeplitzNoise.effective_dof` minus 2K) and standard deviation
        ``residual_chi2_sigma = sqrt(2 residual_dof)``.

    Examples
    --------
    >>> import numpy as np
    >>> from ringsearch.analysis.noise_model import toeplitz_noise
    >>> fr = np.linspace(0, 2048, 2049)
    >>> tn = toeplitz_noise(fr, np.full_like(fr, 1e-46), 4096.0, 200, f_low=0.0, f_high=2048.0)
    >>> s = DetectorSeries("H1", np.zeros(4096), 0.0, 4096.0)
    >>> df = start_time_scan(s, tn, [0.1, 0.101], [250.0, 245.0], [0.004, 0.0013])
    >>> len(df)   # 2 start times x (1 + 2) mode rows
    6
    """
    t0s = np.atleast_1d(np.asarray(t0_gps, float))
    f = np.atleast_1d(np.asarray(f_hz, float))
    tau = np.atleast_1d(np.asarray(tau_s, float))
    nmax = len(f) - 1 if max_overtones is None else int(max_overtones)
    if nmax < 0 or nmax >= len(f):
        raise InputError(f"max_overtones={max_overtones} needs {nmax + 1} modes but "
                         f"{len(f)} were given.")
    if t_ref_gps is None:
        t_ref_gps = float(t0s.min())
    rows = []
    for t0 in t0s:
        y, t = series.segment(t0, noise.n)
        for nov in range(nmax + 1):
            r = fit_amplitudes(y, t, noise, f[:nov + 1], tau[:nov + 1],
                               t_ref=t_ref_gps - t0)
            ill = any(w.startswith("ill-conditioned") for w in r.warnings)
            dof = max(noise.effective_dof - 2 * (nov + 1), 1.0)
            for k in range(nov + 1):
                rows.append({
                    "detector": series.name, "t0_gps_s": t0,
                    "t0_rel_ms": 1e3 * (t0 - t_ref_gps), "n_overtones": nov, "mode_n": k,
                    "f_hz": f[k], "tau_s": tau[k], "amp_strain": r.amp_abs[k],
                    "amp_sigma_strain": r.amp_abs_sigma[k], "phase_rad": r.phase_rad[k],
                    "phase_sigma_rad": r.phase_sigma_rad[k], "mode_snr": r.mode_snr[k],
                    "fit_snr": r.snr, "residual_chi2": r.residual_chi2,
                    "residual_dof": dof, "residual_chi2_sigma": math.sqrt(2.0 * dof),
                    "cond": r.cond, "ill_conditioned": ill,
                })
    return pd.DataFrame(rows)
