"""Noise covariance of a short time-domain segment, from a one-sided PSD.

The overtone analysis works in the time domain so that data before the
ringdown start time t0 (the merger) is excluded exactly.  For stationary
Gaussian noise the covariance of ``n`` consecutive samples is the Toeplitz
matrix of the autocovariance ``ACF(k dt) = ∫_0^{fs/2} S(f) cos(2π f k dt) df``.
This module builds that autocovariance, factors the Toeplitz matrix once
(Cholesky, scipy) and whitens data and design matrices with triangular solves,
so a whole (mass, spin) grid and start-time scan reuse a single factorisation.

Band limits.  The inner product of the project is restricted to
``[f_low, f_high]``.  Setting ``S = 0`` outside the band is not possible (the
covariance would be singular) and using the measured out-of-band PSD would
weight frequencies that the filtered data does not carry.  We replace the PSD
outside the band by a *ceiling*: ``out_of_band_factor`` (default 100) times the
largest in-band value.  Out-of-band content is then treated as very noisy
(weight ≤ 1 % of the worst in-band frequency), the Toeplitz matrix stays
positive definite with a condition number bounded by the in-band dynamic range
times that factor, and the time-domain inner products agree with the
frequency-domain ones over ``[f_low, f_high]`` to better than about one per cent
(tested).  Data fed to the likelihood should be band-passed to the same band
(see :func:`ringsearch.analysis.pipeline.bandpass`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.linalg as sla

from ringsearch.errors import InputError

__all__ = ["autocovariance", "ToeplitzNoise", "toeplitz_noise"]


def _band_limited_psd(freqs: np.ndarray, psd: np.ndarray, f_low: float, f_high: float,
                      out_of_band_factor: float) -> np.ndarray:
    band = (freqs >= f_low) & (freqs <= f_high)
    if not band.any():
        raise InputError(f"the band [{f_low}, {f_high}] Hz contains no PSD frequency.")
    inband = psd[band]
    if not np.all(np.isfinite(inband)) or np.any(inband <= 0):
        raise InputError("the PSD has non-positive or non-finite values inside the analysis band.")
    out = psd.astype(float).copy()
    out[~band] = out_of_band_factor * inband.max()
    return out


def autocovariance(freqs: np.ndarray, psd: np.ndarray, sample_rate: float, n: int,
                   f_low: float = 20.0, f_high: float | None = None,
                   out_of_band_factor: float = 100.0, oversample: int = 8) -> np.ndarray:
    """Autocovariance of noise with a one-sided PSD at lags ``0 .. n-1`` samples.

    Parameters
    ----------
    freqs, psd : array
        One-sided PSD in 1/Hz at frequencies in Hz (interpolated linearly onto
        the fine grid used here).
    sample_rate : float
        Sampling rate of the data in Hz.
    n : int
        Number of lags (the segment length in samples).
    f_low, f_high : float
        Analysis band in Hz (``f_high`` defaults to 0.9 × Nyquist).  Outside
        the band the PSD is replaced by ``out_of_band_factor`` times its
        largest in-band value (see the module docstring).
    oversample : int
        The PSD is sampled on a grid ``oversample`` times finer than ``1/(n dt)``
        so the lags of interest do not wrap around.

    Returns
    -------
    numpy.ndarray
        ``ACF[k]`` in strain², ``k = 0 .. n-1``.

    Examples
    --------
    >>> import numpy as np
    >>> f = np.linspace(0, 2048, 2049); s = np.full_like(f, 2e-46)  # white, sigma^2 = S fs / 2
    >>> acf = autocovariance(f, s, 4096.0, 8, f_low=0.0, f_high=2048.0)
    >>> bool(np.isclose(acf[0], 2e-46 * 2048)), bool(abs(acf[1]) < 1e-3 * acf[0])
    (True, True)
    """
    freqs = np.asarray(freqs, float)
    psd = np.asarray(psd, float)
    nyq = sample_rate / 2.0
    if f_high is None:
        f_high = 0.9 * nyq
    if not 0 <= f_low < f_high <= nyq:
        raise InputError(f"the band f_low={f_low}, f_high={f_high} Hz must satisfy "
                         f"0 <= f_low < f_high <= Nyquist ({nyq} Hz).")
    nfft = int(2 ** np.ceil(np.log2(max(oversample * n, 256))))
    grid = np.fft.rfftfreq(nfft, 1.0 / sample_rate)
    if freqs[0] > max(f_low, grid[1]) or freqs[-1] < f_high:
        raise InputError(f"the PSD covers [{freqs[0]}, {freqs[-1]}] Hz, not the band "
                         f"[{f_low}, {f_high}] Hz.")
    s = np.interp(grid, freqs, psd)
    s = _band_limited_psd(grid, s, f_low, f_high, out_of_band_factor)
    # Two-sided density S/2 on all nfft bins; the inverse DFT times fs gives the ACF:
    # ACF[k] = sum_j (S_j / 2) exp(2 pi i j k / N) df,  df * N = fs.
    acf = 0.5 * sample_rate * np.fft.irfft(s, nfft)
    return acf[:n]


@dataclass
class ToeplitzNoise:
    """Cholesky factor of a Toeplitz noise covariance, for whitening segments.

    ``C = L L^T``; whitening a vector ``x`` means ``L^{-1} x``, so that
    ``x^T C^{-1} y = (L^{-1} x) · (L^{-1} y)``.
    """

    acf: np.ndarray
    sample_rate: float
    f_low: float
    f_high: float
    chol: np.ndarray = field(repr=False)
    log_det: float = 0.0

    @property
    def n(self) -> int:
        """Segment length in samples."""
        return len(self.acf)

    @property
    def duration(self) -> float:
        """Segment length in seconds."""
        return self.n / self.sample_rate

    @property
    def effective_dof(self) -> float:
        """Whitened noise dimensions that carry unit variance for band-passed data.

        Out of band the model's noise is the ceiling while band-passed data has
        almost none there, so the residual power of pure (band-passed) noise is
        about ``n (f_high - f_low) / (fs / 2)``, not ``n``.
        """
        return self.n * (self.f_high - self.f_low) / (self.sample_rate / 2.0)

    def whiten(self, x: np.ndarray) -> np.ndarray:
        """``L^{-1} x`` for a vector or an (n, k) matrix (a triangular solve, no inverse).

        Examples
        --------
        >>> import numpy as np
        >>> f = np.linspace(0, 512, 513); tn = toeplitz_noise(f, np.full_like(f, 2.0), 1024.0, 16,
        ...                                                   f_low=0.0, f_high=512.0)
        >>> tn.whiten(np.ones(16)).shape
        (16,)
        """
        x = np.asarray(x, float)
        if x.shape[0] != self.n:
            raise InputError(f"a segment of {x.shape[0]} samples does not match the noise model's "
                             f"{self.n} samples.")
        return sla.solve_triangular(self.chol, x, lower=True, check_finite=False)

    def inner(self, a: np.ndarray, b: np.ndarray) -> float:
        """Noise-weighted inner product ``a^T C^{-1} b`` of two segments."""
        return float(self.whiten(a) @ self.whiten(b))


def toeplitz_noise(freqs: np.ndarray, psd: np.ndarray, sample_rate: float, n: int,
                   f_low: float = 20.0, f_high: float | None = None,
                   out_of_band_factor: float = 100.0) -> ToeplitzNoise:
    """Build and factor the noise covariance of an ``n``-sample segment.

    The Cholesky factor is computed once (``O(n^3/3)``) and reused for every
    template and start time with the same segment length.

    Examples
    --------
    >>> import numpy as np
    >>> f = np.linspace(0, 512, 513)
    >>> tn = toeplitz_noise(f, np.full_like(f, 2.0), 1024.0, 64, f_low=0.0, f_high=512.0)
    >>> round(float(tn.acf[0]), 6)   # white noise: variance S fs / 2
    1024.0
    """
    if n < 4:
        raise InputError(f"a segment of {n} samples is too short for a noise-weighted fit.")
    if f_high is None:
        f_high = 0.9 * sample_rate / 2.0
    acf = autocovariance(freqs, psd, sample_rate, n, f_low, f_high, out_of_band_factor)
    cov = sla.toeplitz(acf)
    try:
        chol = sla.cholesky(cov, lower=True, check_finite=False)
    except np.linalg.LinAlgError as exc:  # pragma: no cover - guarded by the PSD ceiling
        raise InputError("the noise covariance built from the PSD is not positive definite; "
                         "check the PSD and the band.") from exc
    log_det = 2.0 * float(np.sum(np.log(np.diag(chol))))
    return ToeplitzNoise(acf=acf, sample_rate=float(sample_rate), f_low=float(f_low),
                         f_high=float(f_high), chol=chol, log_det=log_det)
