"""Signal-consistency veto: a chi-squared test for the multi-mode projection statistic.

Allen's test (Allen 2005, PRD 71, 062001) splits a template into p pieces that
each carry an equal share of its expected SNR and checks that the data's SNR
is shared among the pieces as a signal's would be.  Here it is adapted to the
projection statistic of :mod:`ringsearch.search.templates` (K = N+1 complex
amplitudes), with pieces that are either *time slices* of the template
(default) or its *frequency bands* (Allen's choice for chirps).

Let ``u_j`` (j = 0..2K-1) be the template's basis and ``u_j^b`` its piece b
(``sum_b u_j^b = u_j``).  With the data coordinates ``Z^b_j = <d, u_j^b>``, their
sum ``z = T Z`` (``rho^2 = z^T G^{-1} z``) and the pieces' inner products
``S = <u^b_j, u^{b'}_k>`` (which are also the noise covariance of Z), a signal
in the template's span ``sum_k a_k u_k`` gives ``Z = S T^T a`` and ``z = G a``
with ``G = T S T^T``, so the residuals are ``R = L Z`` with
``L = I - S T^T G^{-1} T``.

* A signal in the template's span cancels from every residual whatever its
  amplitudes, so exact templates are never vetoed.  Signal power outside the
  span (a chirp fitted by a damped sinusoid) leaves residuals growing as SNR^2.
* In Gaussian noise ``R`` is Gaussian with covariance ``L S L^T``.  The
  statistic is ``chi^2 = R^T (L S L^T)^+ R``, chi-squared with
  ``rank(L S L^T)`` degrees of freedom and independent of ``rho^2``.  ``L``
  removes the 2K directions of ``z``, so the rank is at most
  ``2Kp - 2K = 2K(p - 1)`` (for K = 1 Allen's 2p - 2).  Directions of
  ``L S L^T`` with eigenvalue below :data:`RANK_TOL` of the largest (e.g. a
  slice of a few samples, where the cosine and sine pieces are nearly
  parallel) are dropped from the inverse *and* from the dof, which each
  trigger reports as ``chisq_dof``.

The pieces are pieces of the *raw* sampled template (time slices of it, or
its frequency bands), and their data coordinates are dot products with the
doubly whitened data of :mod:`ringsearch.search.probe`; their whitened inner
products (the noise covariance) come from Parseval on the template's own short
FFT grid (:func:`ringsearch.search.templates.local_grid`).  The pieces sum
exactly to the template, so the cancellation holds for the computed numbers.
The statistic is evaluated only at given start times -- the peaks the
search refines -- never for the whole series: one piece basis per template,
then one small matrix product per peak.

The re-weighted SNR that ranks triggers is the form used by the LIGO S6
compact-binary searches (Babak et al. 2013, PRD 87, 024033)::

    rho_hat = rho                                  if chi2_r <= 1
    rho_hat = rho / [(1 + chi2_r^3) / 2]^(1/6)     if chi2_r > 1

with ``chi2_r = chi^2 / (dof + m rho^2)``.  The term ``m rho^2`` is the bank's
mismatch allowance (the chi-squared threshold ``p + delta^2 rho^2`` of template
vetoes, # common practice): a signal s whose best template T has match at
least MM (the bank's minimal match, worst case over mode amplitudes) keeps
``|s - P_T s|^2 <= (1 - MM^2) |s|^2`` outside the template's span, the
chi-squared of a deterministic residual is at most its squared norm (the
statistic is the norm of a projection), and ``rho^2 ~ |P_T s|^2 >= MM^2
|s|^2``; so a signal drawn from the bank's box has ``E[chi^2] <= dof + m rho^2``
with ``m = 1/MM^2 - 1`` (:func:`mismatch_allowance`), and loud signals are not
down-weighted for the bank's discreteness.

The statistic is evaluated at the refined (sub-sample) start time of a peak:
:mod:`ringsearch.search.probe` shifts the data by the fractional delay with
a band-limited interpolator, so a signal starting between two samples is as
well matched as one starting on a sample.

Why time slices by default: a damped sinusoid is one spectral line of width
~1/(pi tau); what distinguishes it from the merger that precedes a ringdown is
its exponential decay from t0, which time slices test directly (too much SNR in
late slices when the template starts before the peak).  Both splits are
offered; the tests show each catching chirp-like bursts (tests/test_search_veto.py).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.fft

from ringsearch.errors import InputError
from ringsearch.search.templates import one_template

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



@dataclass
class VetoBasis:
    """The chi-squared of one template, as weights on the doubly whitened data.

    ``weights``: (dof, n_w) rows whose dot products with the doubly whitened
    data ``H w`` (see :mod:`ringsearch.search.probe`) starting ``offset``
    samples after the template start are the whitened residuals, so
    ``chi^2 = |weights @ segment|^2``; ``dof``: degrees of freedom; ``edges``:
    band edges in Hz (``domain="frequency"``) or slice edges in s after the
    template start (``"time"``).
    """

    weights: np.ndarray
    dof: int
    edges: np.ndarray
    offset: int = 0


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


def veto_basis(basis: np.ndarray, response: np.ndarray, n: int, sample_rate: float,
               pad: int, bins: int = DEFAULT_BINS, domain: str = DEFAULT_DOMAIN) -> VetoBasis:
    """Split a template's sampled basis into ``bins`` pieces and whiten their residuals.

    ``basis`` is the template's raw sampled basis (2K, L), starting at its
    first sample; ``response`` the data's filter response H on the rfft grid
    of ``n`` samples (a grid holding the template and ``pad``, the whitening
    filter's half-length, on each side).  Time slices cut the template where
    its energy reaches each multiple of 1/p; frequency bands split its
    whitened power equally.  In terms of the pieces' data coordinates Z
    (``<d, u^b_j>``) and their whitened Gram matrix S (the noise covariance of
    Z), a signal ``sum_k a_k u_k`` gives ``Z = S T^T a`` and ``z = T Z = G a``
    (T sums the pieces), so the residual ``R = (I - S T^T G^{-1} T) Z``
    cancels any signal in the template's span; it is whitened by its exact
    covariance ``L S L^T`` (pseudo-inverse above :data:`RANK_TOL`).

    Examples
    --------
    >>> from ringsearch.search.templates import basis_waveforms
    >>> u = basis_waveforms(np.array([250.0]), np.array([0.004]), 134, 4096.0)
    >>> vb = veto_basis(u, np.ones(4096 // 2 + 1), 4096, 4096.0, 100, 4)
    >>> vb.dof, vb.weights.shape
    (6, (6, 134))
    """
    from ringsearch.search.templates import parseval_gram

    p = check_bins(bins)
    domain = check_domain(domain)
    k2, length = basis.shape
    spec = scipy.fft.rfft(basis, n, axis=-1)  # raw spectra on the grid, start at sample 0
    if domain == "frequency":
        wts = np.full(spec.shape[1], 2.0)  # rfft Parseval weights
        wts[0] = 1.0
        if n % 2 == 0:
            wts[-1] = 1.0
        cut = _equal_shares(wts * np.sum(np.abs(spec * response) ** 2, axis=0), p)
        pieces_spec = np.zeros((p, k2, spec.shape[1]), complex)
        for b in range(p):
            pieces_spec[b, :, cut[b]:cut[b + 1]] = spec[:, cut[b]:cut[b + 1]]
        # band pieces spread in time: keep them on the grid, from `pad` before the start
        pieces = np.roll(scipy.fft.irfft(pieces_spec, n, axis=-1), pad, axis=-1)
        offset = -pad
        freqs = scipy.fft.rfftfreq(n, 1 / sample_rate)
        edges = np.append(freqs[np.minimum(cut[:-1], freqs.size - 1)], freqs[-1])
    else:
        cut = _equal_shares(np.sum(basis ** 2, axis=0), p)
        pieces = np.zeros((p, k2, length))
        for b in range(p):
            pieces[b, :, cut[b]:cut[b + 1]] = basis[:, cut[b]:cut[b + 1]]
        pieces_spec = scipy.fft.rfft(pieces, n, axis=-1)
        offset = 0
        edges = cut / sample_rate
    flat = pieces.reshape(p * k2, -1)
    # S: whitened inner products of all pieces (the noise covariance of Z)
    cov = parseval_gram(pieces_spec.reshape(p * k2, -1) * response, n)
    tsum = np.tile(np.eye(k2), (1, p))  # T: z = T Z
    gram = tsum @ cov @ tsum.T  # G = <u_j, u_k>
    lin = np.eye(p * k2) - cov @ tsum.T @ np.linalg.solve(gram, tsum)
    rcov = lin @ cov @ lin.T
    rcov = 0.5 * (rcov + rcov.T)
    ev, vec = np.linalg.eigh(rcov)
    keep = ev > RANK_TOL * ev.max()
    white = (vec[:, keep] / np.sqrt(ev[keep])).T  # (dof, p*2K)
    return VetoBasis(np.ascontiguousarray(white @ lin @ flat), int(keep.sum()), edges, offset)


def mismatch_allowance(min_match: float) -> float:
    """The chi-squared allowance m = 1/MM^2 - 1 for a bank of minimal match MM.

    A signal inside the bank's box leaves at most ``m rho^2`` of chi-squared
    beyond its noise expectation (module docstring).

    Examples
    --------
    >>> round(mismatch_allowance(0.97), 4)
    0.0628
    """
    mm = float(min_match)
    if not 0.0 < mm <= 1.0:
        raise InputError(f"minimal match must lie in (0, 1], got {min_match!r}.")
    return 1.0 / (mm * mm) - 1.0


def reweighted_snr(snr: Any, chisq: Any, dof: Any, mismatch: float = 0.0) -> np.ndarray:
    """Re-weighted SNR ``rho / [(1 + chi2_r^3)/2]^(1/6)`` for ``chi2_r > 1``.

    ``chi2_r = chisq / (dof + mismatch * snr^2)``: the form of Babak et al. 2013
    (PRD 87, 024033) with the bank's mismatch allowance (``mismatch`` from
    :func:`mismatch_allowance`; 0 gives the plain reduced chi-squared).
    Unchanged for ``chi2_r <= 1``.

    Examples
    --------
    >>> reweighted_snr([10.0, 10.0], [8.0, 80.0], [8, 8]).round(3).tolist()
    [10.0, 3.549]
    >>> reweighted_snr([50.0], [150.0], [14], mismatch=0.0628).round(2).tolist()
    [50.0]
    """
    snr = np.asarray(snr, float)
    expect = np.maximum(np.asarray(dof, float), 1.0) + float(mismatch) * snr * snr
    r = np.asarray(chisq, float) / expect
    fac = np.where(r > 1.0, ((1.0 + r ** 3) / 2.0) ** (1.0 / 6.0), 1.0)
    return snr / fac


def chisq_at(cond: Any, f_hz: Any, tau_s: Any, samples: Any, bins: int = DEFAULT_BINS,
             domain: str = DEFAULT_DOMAIN) -> tuple[np.ndarray, np.ndarray, int]:
    """Chi-squared of one template starting at whitened-data ``samples`` (on the grid).

    Returns ``(chisq, snr, dof)``; ``snr`` is the projection SNR at the same
    samples.  The search evaluates the statistic at refined, sub-sample start
    times through :class:`ringsearch.search.probe.Probe`; this is the plain
    on-grid version, with the same numbers at grid samples.

    Examples
    --------
    >>> chi2, snr, dof = chisq_at(cond, [250.0], [0.004], [8192, 16384])  # doctest: +SKIP
    """
    from ringsearch.search.probe import Probe

    f, tau = one_template(f_hz, tau_s)
    probe = Probe(cond, f, tau, veto_bins=bins, veto_domain=domain)
    peaks = [probe.at_sample(0, int(k)) for k in np.asarray(samples, np.int64)]
    return (np.array([pk.chisq for pk in peaks]), np.array([pk.snr for pk in peaks]),
            peaks[0].chisq_dof if peaks else 0)


def data_segments(vals: np.ndarray, samples: np.ndarray, pad: int, n: int) -> np.ndarray:
    """Rows ``vals[s - pad : s - pad + n]`` for each start sample s (zeros outside the data).

    Examples
    --------
    >>> data_segments(np.arange(5.0), np.array([0, 4]), 1, 3).tolist()
    [[0.0, 0.0, 1.0], [3.0, 4.0, 0.0]]
    """
    samples = np.asarray(samples, np.int64)
    out = np.zeros((samples.size, n))
    for i, s in enumerate(samples):
        a = s - pad
        lo, hi = max(a, 0), min(a + n, vals.size)
        if hi > lo:
            out[i, lo - a:hi - a] = vals[lo:hi]
    return out
