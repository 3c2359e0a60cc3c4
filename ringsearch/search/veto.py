"""Signal-consistency veto: a chi-squared test for the multi-mode projection statistic.

Allen's test (Allen 2005, PRD 71, 062001) splits a template into p pieces that
each carry an equal share of its expected SNR and checks that the data's SNR
is shared among the pieces as a signal's would be.  Here it is adapted to the
projection statistic of :mod:`ringsearch.search.filter` (K = N+1 complex
amplitudes), with pieces that are either *time slices* of the whitened
template (default) or *frequency bands* (Allen's choice for chirps).

Let ``e_j`` (j = 0..2K-1) be the template's whitened, orthonormalised basis
(``<e_j, e_k> = delta_jk``) and ``e_j^b`` its piece b (``sum_b e_j^b = e_j``).
With the data coordinates ``Y^b_j = <d, e_j^b>``, ``y = sum_b Y^b`` (the
projection coordinates, ``rho^2 = |y|^2``) and ``M^b_jk = <e_j^b, e_k^b>``
(``sum_b M^b = I``), the residuals are ``R^b = Y^b - M^b y``.

* A signal in the template's span, ``d = n + sum_k c_k e_k``, adds ``M^b c`` to
  ``Y^b`` and ``c`` to ``y``: it cancels from every residual whatever its
  amplitudes, so exact templates are never vetoed.  Signal power outside the
  span (a chirp fitted by a damped sinusoid) leaves residuals growing as SNR^2.
* In Gaussian noise ``R = L Y`` is Gaussian with covariance ``L Sigma L^T``,
  ``Sigma`` the noise covariance of the stacked ``Y``.  The statistic is
  ``chi^2 = R^T (L Sigma L^T)^+ R``, chi-squared with ``rank(L Sigma L^T)``
  degrees of freedom and independent of ``rho^2``.  ``L`` removes the 2K
  directions of ``y``, so the rank is at most ``2Kp - 2K = 2K(p - 1)`` (for
  K = 1 Allen's 2p - 2).  For frequency bands ``Sigma`` is block diagonal
  (``M^b``: disjoint bands are independent) and the rank is exactly 2K(p-1);
  for time slices ``Sigma`` is taken through the band projector (the whitened
  noise is white only inside [f_low, f_high], and a sharp slice leaks out of
  it).  Directions of ``L Sigma L^T`` with eigenvalue below :data:`RANK_TOL` of
  the largest (e.g. a slice of a few samples, where the cosine and sine pieces
  are nearly parallel) are dropped from the inverse *and* from the dof, which
  each trigger reports as ``chisq_dof``.

The inner products are dot products of the whitened data with the pieces on an
FFT grid holding the template and the whitening filter, as in
:func:`ringsearch.search.filter.projection_snr`; by Parseval on that grid the
pieces sum exactly to the template, so the cancellation holds for the computed
numbers.  The statistic is evaluated only at given (template, sample) pairs --
the per-template maxima above threshold -- never for the whole series: one
piece basis per template with candidates, then one small matrix product.

The re-weighted SNR that ranks triggers is the form used by the LIGO S6
compact-binary searches (Babak et al. 2013, PRD 87, 024033)::

    rho_hat = rho                                  if chi2_r <= 1
    rho_hat = rho / [(1 + chi2_r^3) / 2]^(1/6)     if chi2_r > 1

with ``chi2_r = chi^2 / dof``.

Why time slices by default: a damped sinusoid is one spectral line of width
~1/(pi tau); what distinguishes it from the merger that precedes a ringdown is
its exponential decay from t0, which time slices test directly (too much SNR in
late slices when the template starts before the peak).  Both splits are
offered; the tests show each catching chirp-like bursts (tests/test_search_veto.py).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.fft

from ringsearch.errors import InputError
from ringsearch.search.bank import DECAY_TIMES

#: Default number of frequency bands p.  Allen (2005) and the LIGO S5/S6 searches
#: use p = 16 for long chirps; a damped sinusoid of quality factor a few spans a
#: narrow band, so fewer bands keep each one meaningful.  # common practice
DEFAULT_BINS: int = 8

#: Band directions with eigenvalue below this fraction of the band's mean
#: eigenvalue are dropped from the inverse (and from the dof).
RANK_TOL: float = 1e-3

#: The split: ``"time"`` slices of the whitened template (default) or
#: ``"frequency"`` bands (Allen's original choice for chirps).
DOMAINS: tuple[str, ...] = ("time", "frequency")
DEFAULT_DOMAIN: str = "time"

#: Energy fraction of the whitening filter left outside the veto's grid: amplitude
#: errors of sqrt(1e-5) ~ 0.3 %, far below the statistic's noise, on a grid ~3x
#: shorter than the filter's 1e-6 (which the SNR itself uses).
PAD_TOL: float = 1e-5


@dataclass
class BandBasis:
    """The veto of one template on an FFT grid of ``n`` samples.

    ``basis``: (2K, n) whitened orthonormal basis ``e_j`` rolled so the template
    starts at sample ``pad`` (``y = basis @ segment``); ``pieces``: (p * 2K, n)
    its parts ``e_j^b`` (row ``b * 2K + j``); ``weights``: (dof, n) rows whose
    dot products with a data segment are the whitened residuals, so
    ``chi^2 = |weights @ segment|^2``; ``dof``: degrees of freedom; ``edges``:
    band edges in Hz (``domain="frequency"``) or slice edges in s after the
    grid start (``"time"``).
    """

    basis: np.ndarray
    pieces: np.ndarray
    weights: np.ndarray
    dof: int
    edges: np.ndarray
    pad: int


def check_bins(bins: Any) -> int:
    """Validate the number of chi-squared bands (an integer >= 2).

    Examples
    --------
    >>> check_bins(8)
    8
    """
    try:
        p = int(bins)
    except (TypeError, ValueError):
        raise InputError(f"number of veto bands must be an integer, got {bins!r}.") from None
    if p != bins or p < 2:
        raise InputError(f"number of veto bands must be an integer >= 2, got {bins!r}.")
    return p


def check_domain(domain: Any) -> str:
    """Validate the veto's split: ``"time"`` slices or ``"frequency"`` bands.

    Examples
    --------
    >>> check_domain("time")
    'time'
    """
    if domain not in DOMAINS:
        raise InputError(f"veto domain must be one of {', '.join(DOMAINS)}, got {domain!r}.")
    return str(domain)


def _equal_shares(power: np.ndarray, p: int) -> np.ndarray:
    """Cuts [0, c_1, ..., n] splitting ``power`` into p contiguous runs of equal sum."""
    cum = np.cumsum(power)
    cum /= cum[-1]
    return np.concatenate([[0], np.searchsorted(cum, np.arange(1, p) / p, "right"),
                           [power.size]])


def band_basis(f_hz: np.ndarray, tau_s: np.ndarray, response: np.ndarray, n_fft: int,
               sample_rate: float, pad: int, bins: int = DEFAULT_BINS,
               domain: str = DEFAULT_DOMAIN) -> BandBasis:
    """Split one template's whitened orthonormal basis into ``bins`` equal-share pieces.

    ``response`` is the data's filter response H on the rfft grid of ``n_fft``;
    ``pad`` the whitening filter's half-length (the template starts at sample
    ``pad`` of the grid); ``domain`` chooses time slices or frequency bands.

    Examples
    --------
    >>> H = np.ones(4096 // 2 + 1)
    >>> bb = band_basis(np.array([250.0]), np.array([0.004]), H, 4096, 4096.0, 100, 4)
    >>> bb.dof, bb.pieces.shape
    (6, (8, 4096))
    """
    from ringsearch.search.filter import prepare_templates

    p = check_bins(bins)
    domain = check_domain(domain)
    f = np.atleast_2d(np.asarray(f_hz, float))
    tau = np.atleast_2d(np.asarray(tau_s, float))
    prep = prepare_templates(f, tau, response, n_fft, sample_rate)
    if not prep.ok[0]:
        raise InputError(f"template refused: {prep.reason[0]}.")
    # orthonormal whitened spectra E = C^{-1} V (prep.spectra holds conj(V))
    e_spec = prep.cinv[0] @ np.conj(prep.spectra[0])  # (2K, n_freq)
    k2 = e_spec.shape[0]
    wts = np.full(e_spec.shape[1], 2.0)  # rfft Parseval weights
    wts[0] = 1.0
    if n_fft % 2 == 0:
        wts[-1] = 1.0
    basis = np.roll(scipy.fft.irfft(e_spec, n_fft, axis=-1), pad, axis=-1)
    pieces = np.zeros((p, k2, n_fft))
    if domain == "frequency":
        cut = _equal_shares(wts * np.sum(np.abs(e_spec) ** 2, axis=0), p)
        for b in range(p):
            spec = np.zeros_like(e_spec)
            spec[:, cut[b]:cut[b + 1]] = e_spec[:, cut[b]:cut[b + 1]]
            pieces[b] = np.roll(scipy.fft.irfft(spec, n_fft, axis=-1), pad, axis=-1)
        freqs = scipy.fft.rfftfreq(n_fft, 1 / sample_rate)
        edges = np.append(freqs[np.minimum(cut[:-1], freqs.size - 1)], freqs[-1])
        # in-band pieces on disjoint bands: the noise covariance is block diagonal
        cov = np.zeros((p * k2, p * k2))
        for b in range(p):
            cov[b * k2:(b + 1) * k2, b * k2:(b + 1) * k2] = pieces[b] @ pieces[b].T
    else:
        cut = _equal_shares(np.sum(basis ** 2, axis=0), p)
        for b in range(p):
            pieces[b, :, cut[b]:cut[b + 1]] = basis[:, cut[b]:cut[b + 1]]
        edges = cut / sample_rate
        # the whitened noise is white only inside the band (where H > 0): time slices
        # leak out of it, so take their covariance through the band projector
        spec = scipy.fft.rfft(pieces.reshape(p * k2, n_fft), axis=-1) * (response > 0)
        sf = spec.view(np.float64)
        cov = 2.0 * (sf @ sf.T)
        cov -= np.outer(spec[:, 0], spec[:, 0].conj()).real
        if n_fft % 2 == 0:
            cov -= np.outer(spec[:, -1], spec[:, -1].conj()).real
        cov /= n_fft
    flat = pieces.reshape(p * k2, n_fft)
    # band Gram matrices M^b = <e^b, e^b>; a signal c in the span adds M^b c to y^b
    gram = np.einsum("bjt,bkt->bjk", pieces, pieces)
    # residuals r = y^b - M^b y = L Y with Y the stacked band coordinates
    lin = np.eye(p * k2) - np.tile(gram.reshape(p * k2, k2), (1, p))
    rcov = lin @ cov @ lin.T
    ev, vec = np.linalg.eigh(rcov)
    keep = ev > RANK_TOL * ev.max()
    white = (vec[:, keep] / np.sqrt(ev[keep])).T  # (dof, p*2K)
    return BandBasis(basis, flat, white @ lin @ flat, int(keep.sum()), edges, pad)


def reweighted_snr(snr: Any, chisq: Any, dof: Any) -> np.ndarray:
    """Re-weighted SNR ``rho / [(1 + chi2_r^3)/2]^(1/6)`` for ``chi2_r = chisq/dof > 1``.

    The form of Babak et al. 2013 (PRD 87, 024033); unchanged for ``chi2_r <= 1``.

    Examples
    --------
    >>> reweighted_snr([10.0, 10.0], [8.0, 80.0], [8, 8]).round(3).tolist()
    [10.0, 3.549]
    """
    snr = np.asarray(snr, float)
    r = np.asarray(chisq, float) / np.maximum(np.asarray(dof, float), 1.0)
    fac = np.where(r > 1.0, ((1.0 + r ** 3) / 2.0) ** (1.0 / 6.0), 1.0)
    return snr / fac


def grid_length(tau_max: float, sample_rate: float, pad: int) -> int:
    """FFT length holding a template of decay ``tau_max`` plus the whitening filter.

    Examples
    --------
    >>> grid_length(0.004, 4096.0, 100) >= 8 * 0.004 * 4096 + 200
    True
    """
    tail = int(math.ceil(DECAY_TIMES * tau_max * sample_rate))
    return scipy.fft.next_fast_len(tail + 2 * pad + 2, real=True)


def chisq_at(cond: Any, f_hz: Any, tau_s: Any, samples: Any, bins: int = DEFAULT_BINS,
             domain: str = DEFAULT_DOMAIN) -> tuple[np.ndarray, np.ndarray, int]:
    """Band chi-squared of one template starting at whitened-data ``samples``.

    Returns ``(chisq, snr, dof)``; ``snr`` is the projection SNR at the same
    samples (the band coordinates sum to it), useful as a check.

    Examples
    --------
    >>> chi2, snr, dof = chisq_at(cond, [250.0], [0.004], [8192, 16384])  # doctest: +SKIP
    """
    from ringsearch.search.filter import _data_arrays, _response, filter_length

    vals, fs, _ = _data_arrays(cond)
    f = np.atleast_1d(np.asarray(f_hz, float))
    tau = np.atleast_1d(np.asarray(tau_s, float))
    if f.shape != tau.shape:
        raise InputError("f_hz and tau_s of a template must have the same length.")
    pad = filter_length(cond, tol=PAD_TOL)
    n = grid_length(float(tau.max()), fs, pad)
    bb = band_basis(f, tau, _response(cond, n, fs), n, fs, pad, bins, domain)
    segs = data_segments(vals, np.asarray(samples, np.int64), pad, n)
    x = segs @ bb.weights.T
    y = segs @ bb.basis.T
    return np.sum(x * x, axis=1), np.sqrt(np.sum(y * y, axis=1)), bb.dof


def data_segments(vals: np.ndarray, samples: np.ndarray, pad: int, n: int) -> np.ndarray:
    """Rows ``vals[s - pad : s - pad + n]`` for each start sample s (zeros outside the data).

    Examples
    --------
    >>> data_segments(np.arange(5.0), np.array([0, 4]), 1, 3).tolist()
    [[0.0, 0.0, 1.0], [3.0, 4.0, 0.0]]
    """
    padded = np.concatenate([np.zeros(n), vals, np.zeros(n)])
    win = np.lib.stride_tricks.sliding_window_view(padded, n)
    return win[samples - pad + n]


def candidate_chisq(cond: Any, f_hz: np.ndarray, tau_s: np.ndarray, template_index: np.ndarray,
                    samples: np.ndarray, bins: int = DEFAULT_BINS,
                    domain: str = DEFAULT_DOMAIN) -> tuple[np.ndarray, np.ndarray]:
    """Chi-squared and dof at each (template, start sample) candidate of a bank.

    ``f_hz``/``tau_s``: (n_templates, K) of the bank; ``template_index`` and
    ``samples``: one entry per candidate.  One band basis is built per template
    that has candidates (the grid length follows the bank's longest template).

    Examples
    --------
    >>> chi2, dof = candidate_chisq(cond, bank.f_hz, bank.tau_s, ti, samp)  # doctest: +SKIP
    """
    from ringsearch.search.filter import _data_arrays, _response, filter_length

    vals, fs, _ = _data_arrays(cond)
    f = np.atleast_2d(np.asarray(f_hz, float))
    tau = np.atleast_2d(np.asarray(tau_s, float))
    ti = np.asarray(template_index, int)
    samp = np.asarray(samples, np.int64)
    chi2 = np.full(ti.size, np.nan)
    dof = np.zeros(ti.size, int)
    if ti.size == 0:
        return chi2, dof
    pad = filter_length(cond, tol=PAD_TOL)
    n = grid_length(float(tau[np.unique(ti)].max()), fs, pad)
    resp = _response(cond, n, fs)
    padded = np.concatenate([np.zeros(n), vals, np.zeros(n)])
    win = np.lib.stride_tricks.sliding_window_view(padded, n)
    order = np.argsort(ti, kind="stable")
    bounds = np.flatnonzero(np.diff(ti[order])) + 1
    for rows in np.split(order, bounds):
        i = ti[rows[0]]
        bb = band_basis(f[i], tau[i], resp, n, fs, pad, bins, domain)
        x = win[samp[rows] - pad + n] @ bb.weights.T
        chi2[rows] = np.sum(x * x, axis=1)
        dof[rows] = bb.dof
    return chi2, dof
