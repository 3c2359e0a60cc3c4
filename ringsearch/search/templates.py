"""Template preparation: whitened, orthonormalised damped-sinusoid bases on an FFT grid.

For a template with K = N+1 modes the real basis is the physics layer's
:func:`ringsearch.physics.basis.damped_basis` (``cos_0, sin_0, cos_1, ...``,
zero before the start and after :data:`~ringsearch.search.bank.DECAY_TIMES`
damping times of the longest-lived mode).  The data layer's contract
(DEVELOPERS.md) gives ``<d, u> = sum_j w[j] * irfft(rfft(u) H)[j]`` with
``w`` the whitened data and ``H`` its filter response, so on a grid of L
samples

* the whitened basis spectra are ``V_j = rfft(u_j) H`` and the Gram matrix
  ``G_jk = <u_j, u_k> = (1/L) sum' Re V_j conj(V_k)`` (Parseval, independent of
  the start time);
* with ``G = C C^T`` (Cholesky) the orthonormal spectra are ``E = C^{-1} V``,
  the projection coordinates ``y = C^{-1} z`` of the correlations ``z`` and
  ``rho^2 = |y|^2 = z^T G^{-1} z``;
* the maximum-likelihood amplitudes are ``a = C^{-T} y``; for mode n the complex
  amplitude is ``A_n = a_{2n} + i a_{2n+1}`` (strain units), so the fitted signal
  is ``sum_n Re[A_n e^{-i 2 pi f_n (t - t0)}] e^{-(t - t0)/tau_n}``.

Every template's Gram matrix for a detector's data comes from
:func:`template_grams` (the Toeplitz quadratic form of the whitening's
autocorrelation), shared by the full-series correlation
(:mod:`ringsearch.search.correlate`) and the evaluation at given start times
(:mod:`ringsearch.search.probe`); the veto (:mod:`ringsearch.search.veto`)
computes its covariances on a short grid of the template's own
(:func:`local_grid`), and the one-template references of
:mod:`~ringsearch.search.correlate` whiten spectra on their grid
(:func:`prepare_templates`).  Templates
whose normalised Gram matrix has a condition number above :data:`MAX_COND`
are refused with a reason: their modes cannot be separated by the data.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.fft

from ringsearch.errors import InputError
from ringsearch.physics.basis import damped_basis
from ringsearch.search.bank import DECAY_TIMES

#: Templates whose normalised Gram matrix (correlation matrix of the basis) has a
#: condition number above this are refused: their modes cannot be separated.
MAX_COND: float = 1e8


def template_samples(tau_s: Any, sample_rate: float) -> int:
    """Length in samples of a template (DECAY_TIMES e-folds of its longest-lived mode).

    Examples
    --------
    >>> template_samples([0.004, 0.0013], 4096.0)
    132
    """
    return int(math.ceil(DECAY_TIMES * float(np.max(tau_s)) * sample_rate))


def one_template(f_hz: Any, tau_s: Any) -> tuple[np.ndarray, np.ndarray]:
    """One template's mode frequencies and damping times as (1, K) arrays, checked.

    Examples
    --------
    >>> [a.shape for a in one_template([250.0, 240.0], [0.004, 0.0013])]
    [(1, 2), (1, 2)]
    """
    f = np.atleast_1d(np.asarray(f_hz, float)).reshape(1, -1)
    tau = np.atleast_1d(np.asarray(tau_s, float)).reshape(1, -1)
    if f.shape != tau.shape:
        raise InputError("f_hz and tau_s of a template must have the same length.")
    if not (np.all(np.isfinite(f)) and np.all(np.isfinite(tau)) and np.all(tau > 0)):
        raise InputError("a template's frequencies and damping times must be finite, with "
                         "positive damping times.")
    return f, tau


def basis_waveforms(f_hz: np.ndarray, tau_s: np.ndarray, n_samples: int, sample_rate: float,
                    offset_s: float | np.ndarray = 0.0) -> np.ndarray:
    """Sampled basis of templates, shape (..., 2K, n_samples), cut at DECAY_TIMES e-folds.

    ``f_hz``/``tau_s`` have shape (..., K).  Sample j is at time
    ``j / sample_rate - offset_s`` after the template start.

    Examples
    --------
    >>> u = basis_waveforms(np.array([250.0]), np.array([0.004]), 64, 4096.0)
    >>> u.shape, float(u[0, 0])
    ((2, 64), 1.0)
    """
    f = np.asarray(f_hz, float)
    tau = np.asarray(tau_s, float)
    off = np.asarray(offset_s, float)
    s = np.arange(n_samples) / sample_rate - off[..., None]
    return damped_basis(s, f, tau, duration_s=DECAY_TIMES * tau.max(axis=-1))


def parseval_gram(v: np.ndarray, n_fft: int) -> np.ndarray:
    """Real inner products ``(1/L) sum' Re v_i conj(v_j)`` of rfft spectra, shape (..., m, m).

    ``v`` has shape (..., m, n_freq) on the rfft grid of ``n_fft`` samples (the
    DC and Nyquist bins count once, the others twice), so for real sequences
    ``a``, ``b`` it equals ``sum_t a[t] b[t]``.

    Examples
    --------
    >>> a = np.random.default_rng(0).standard_normal((2, 16))
    >>> bool(np.allclose(parseval_gram(np.fft.rfft(a), 16), a @ a.T))
    True
    """
    vf = np.ascontiguousarray(v).view(np.float64)  # interleaved (re, im)
    gram = 2.0 * np.matmul(vf, np.swapaxes(vf, -1, -2))  # BLAS
    gram -= np.einsum("...i,...j->...ij", v[..., 0], v[..., 0].conj()).real
    if n_fft % 2 == 0:
        gram -= np.einsum("...i,...j->...ij", v[..., -1], v[..., -1].conj()).real
    return gram / n_fft


@dataclass
class PreparedTemplates:
    """Whitened, orthonormalised template spectra on one FFT grid (one detector).

    ``spectra``: (B, 2K, n_freq) conjugated whitened basis spectra ``conj(V)``,
    so ``z = irfft(W * spectra)`` are the correlations ``<d, u_j(. - t0)>``;
    ``chol``: (B, 2K, 2K) Cholesky factors C of G (``cinv`` = C^{-1}, so
    ``y = cinv @ z`` is orthonormal and ``rho^2 = |y|^2``); ``cond``: normalised-Gram
    condition numbers; ``ok``: templates accepted; ``reason``: why refused;
    ``sigma``: (B, 2K) norms ``sqrt(G_jj)`` of the basis functions.
    """

    spectra: np.ndarray
    chol: np.ndarray
    cinv: np.ndarray
    cond: np.ndarray
    ok: np.ndarray
    reason: list[str]
    sigma: np.ndarray


def factor_grams(gram: np.ndarray, max_cond: float = MAX_COND
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, list[str], np.ndarray]:
    """Check and factor a stack of Gram matrices (B, 2K, 2K): ``G = C C^T``.

    Returns ``(chol, cinv, cond, ok, reason, sigma)``: Cholesky factors C and
    their inverses (zero where refused), the normalised-Gram condition
    numbers, which are accepted (a mode with power, condition number at most
    ``max_cond``, positive definite), why not, and the basis norms
    ``sqrt(G_jj)``.

    Examples
    --------
    >>> chol, cinv, cond, ok, reason, sig = factor_grams(np.array([np.eye(2), np.ones((2, 2))]))
    >>> ok.tolist(), reason[1][:32]
    ([True, False], 'Gram matrix numerically singular')
    """
    sig = np.sqrt(np.clip(np.einsum("bii->bi", gram), 0, None))
    b, k2 = gram.shape[:2]
    chol = np.zeros_like(gram)
    cinv = np.zeros_like(gram)
    silent = np.any(sig <= 0, axis=1)
    norm = np.where(silent[:, None], 1.0, sig)
    corr = gram / (norm[:, :, None] * norm[:, None, :])
    ev = np.linalg.eigvalsh(corr)  # stacked, one LAPACK call per matrix
    with np.errstate(divide="ignore", invalid="ignore"):
        cond = np.where((ev[:, 0] > 0) & ~silent, ev[:, -1] / ev[:, 0], np.inf)
    ok = ~silent & (cond <= max_cond)
    reason = ["a mode has no power inside [f_low, f_high]" if silent[i] else
              "" if ok[i] else
              (f"Gram matrix numerically singular (condition number {cond[i]:.3g} "
               f"> {max_cond:.0e}): its modes cannot be separated by the data")
              for i in range(b)]
    good = np.flatnonzero(ok)
    try:
        chol[good] = np.linalg.cholesky(gram[good])
    except np.linalg.LinAlgError:  # find the ones that are not positive definite
        for i in good:
            try:
                chol[i] = np.linalg.cholesky(gram[i])
            except np.linalg.LinAlgError:
                reason[i], ok[i] = "Gram matrix not positive definite", False
        good = np.flatnonzero(ok)
    cinv[good] = np.linalg.solve(chol[good], np.broadcast_to(np.eye(k2), (good.size, k2, k2)))
    return chol, cinv, cond, ok, reason, sig


def prepare_templates(f_hz: np.ndarray, tau_s: np.ndarray, response: np.ndarray,
                      n_fft: int, sample_rate: float, max_cond: float = MAX_COND,
                      offset_s: float | np.ndarray = 0.0) -> PreparedTemplates:
    """Whiten with ``response`` (H on the rfft grid of n_fft), Gram, Cholesky, orthonormalise.

    Examples
    --------
    >>> H = np.ones(4096 // 2 + 1)
    >>> p = prepare_templates(np.array([[250.0]]), np.array([[0.004]]), H, 4096, 4096.0)
    >>> bool(p.ok[0]), p.spectra.shape
    (True, (1, 2, 2049))
    """
    f = np.atleast_2d(np.asarray(f_hz, float))
    tau = np.atleast_2d(np.asarray(tau_s, float))
    # sample only the template's support; rfft zero-pads it to n_fft
    n_sup = min(n_fft, template_samples(tau, sample_rate) + 2)
    u = basis_waveforms(f, tau, n_sup, sample_rate, offset_s)
    v = scipy.fft.rfft(u, n=n_fft, axis=-1) * response
    gram = parseval_gram(v, n_fft)
    chol, cinv, cond, ok, reason, sig = factor_grams(gram, max_cond)
    # conj(V) in place (flip the imaginary parts of the interleaved view).  The
    # orthonormalisation C^{-1} is applied to the correlations in the time domain, on
    # the valid start times only, which is cheaper than forming C^{-1} V here.
    v.view(np.float64)[..., 1::2] *= -1.0
    return PreparedTemplates(v, chol, cinv, cond, ok, reason, sig)


def local_grid(tau_s: Any, sample_rate: float, pad: int) -> int:
    """FFT length holding a template (longest decay ``max(tau_s)``) plus the whitening filter.

    Examples
    --------
    >>> local_grid([0.004], 4096.0, 100) >= 8 * 0.004 * 4096 + 200
    True
    """
    return scipy.fft.next_fast_len(template_samples(tau_s, sample_rate) + 2 * pad + 2,
                                   real=True)


@dataclass
class Grams:
    """Every template's Gram matrix, factored, for one detector's data.

    ``cinv``: (T, 2K, 2K) inverse Cholesky factors C^{-1} of G (zero for
    refused templates); ``cond``: normalised-Gram condition numbers; ``ok``:
    templates accepted; ``reason``: why a template was refused ("" if not).
    """

    cinv: np.ndarray
    cond: np.ndarray
    ok: np.ndarray
    reason: list[str]


def template_grams(f_hz: np.ndarray, tau_s: np.ndarray, response: Any, sample_rate: float,
                   pad: int, max_cond: float = MAX_COND, bucket: int = 32) -> Grams:
    """Gram matrices of all templates, factored, from the whitening's autocorrelation.

    ``response(n)`` gives the data's filter response H on the rfft grid of n
    samples.  With ``R = irfft(H^2)`` on one grid holding the longest
    template plus 16 ``pad`` (eight whitening-filter lengths each side; what
    wraps around was 8e-7 of G for the target campaign's bank on design noise,
    6e-6 on a template's own :func:`local_grid`), the
    Gram matrix of a template's raw sampled basis u (2K x L) is the Toeplitz
    quadratic form ``G = u T(R) u^T``, ``T(R)_mn = R[m - n]``: the circular
    Gram on that grid, exactly, at the cost of a small matrix product per
    template instead of FFTs.  Templates are grouped by their length rounded
    up to ``bucket`` samples (zero samples add nothing).  The full-series
    filter and the probe both use these, so their on-grid SNRs agree to
    rounding.

    Examples
    --------
    >>> g = template_grams(np.array([[250.0]]), np.array([[0.004]]),
    ...                    lambda n: np.ones(n // 2 + 1), 4096.0, 100)
    >>> bool(g.ok[0]), g.cinv.shape
    (True, (1, 2, 2))
    """
    from scipy.linalg import toeplitz

    f = np.atleast_2d(np.asarray(f_hz, float))
    tau = np.atleast_2d(np.asarray(tau_s, float))
    nt, k = f.shape
    lengths = np.array([template_samples(tau[i], sample_rate) + 2 for i in range(nt)])
    # the longest template with 8 whitening-filter lengths each side: R wraps around much
    # less than on the templates' own local grids
    n_acf = local_grid(tau.max(), sample_rate, 8 * pad)
    acf = scipy.fft.irfft(np.asarray(response(n_acf), float) ** 2, n_acf)
    groups = -(-lengths // bucket) * bucket
    gram = np.zeros((nt, 2 * k, 2 * k))
    for n in np.unique(groups):
        members = np.flatnonzero(groups == n)
        length = int(min(n, n_acf))
        u = basis_waveforms(f[members], tau[members], length, sample_rate)  # (B, 2K, L)
        ut = (u.reshape(-1, length) @ toeplitz(acf[:length])).reshape(u.shape)
        gram[members] = np.matmul(ut, np.swapaxes(u, -1, -2))
    gram = 0.5 * (gram + np.swapaxes(gram, -1, -2))
    _, cinv, cond, ok, reason, _ = factor_grams(gram, max_cond)
    return Grams(cinv, cond, ok, reason)
