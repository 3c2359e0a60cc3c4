"""Templates evaluated at requested start times: sub-sample refinement, amplitudes and the veto.

A :class:`Probe` holds one detector's conditioned data and a bank's modes.
Given a template and a start sample (or a window of start times) it returns
a :class:`Peak`: the refined start time between samples, the projection SNR
there, the maximum-likelihood mode amplitudes, the signal-consistency
chi-squared and the re-weighted SNR.  Every number the search reports about
a trigger, a coincident candidate or a time-slide event comes from here, so
the full-series search (which only *finds* peaks,
:mod:`ringsearch.search.correlate`) and an evaluation at given times agree.

Doubly whitened data
--------------------
The probe filters the whitened data once more with the whitening response H
(``x = H w``, one FFT of the whole series).  Because H is real and
symmetric, ``<d, u> = sum_j w[j] (h * u)[j] = sum_j x[j] u[j]``: the inner
product with a template is a dot product of x with the *raw* sampled
template over the template's own support (a few to a few hundred samples),
with no whitening filter to carry along.  Only the template's Gram matrix
and the veto's covariances need whitened inner products, computed once per
template on a short FFT grid (:func:`ringsearch.search.templates.local_grid`).

Sub-sample start times
----------------------
The whitened data are band-limited to ``[f_low, f_high]`` with ``f_high``
below the Nyquist frequency, so each projection coordinate ``y_j(t0)`` is a
band-limited function of the start time and is fixed between samples by its
samples (Shannon).  A Kaiser-windowed sinc of :data:`KERNEL_HALF` taps on each
side (:func:`fractional_delay_taps`) interpolates it; for data band-limited
to 0.8 x Nyquist (the default ``f_high``) its error is below 1e-5 of the
noise level (measured in ``tests/test_search_probe.py``).  The refined start
maximises ``rho^2`` within one sample of the on-grid peak (a grid of 1/32
sample, then a parabola through the best three points).
At the refined time the data segment itself is shifted by the same
fractional delay, and the SNR, amplitudes and chi-squared are evaluated on
it: a signal that starts between samples is matched as well as one on a
sample, and its chi-squared keeps the noise law (the residual of a signal in
the template's span cancels at the true start only).
"""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.fft
from scipy.special import i0

from ringsearch.errors import InputError
from ringsearch.search.correlate import data_arrays, local_pad, response_on, start_mask
from ringsearch.search.templates import (
    MAX_COND,
    Grams,
    basis_waveforms,
    local_grid,
    template_grams,
    template_samples,
)
from ringsearch.search.veto import (
    DEFAULT_BINS,
    DEFAULT_DOMAIN,
    VetoBasis,
    check_bins,
    check_domain,
    reweighted_snr,
    veto_basis,
)

#: Taps of the fractional-delay interpolator on each side of the point.
KERNEL_HALF: int = 16
#: Kaiser window shape of the interpolator: with 16 taps a side it interpolates
#: data band-limited to 0.8 x Nyquist to 6e-6 of their rms (the best beta for that
#: band, found by a scan of beta in steps of 0.5 against exact Fourier shifts).
KAISER_BETA: float = 9.5
#: Offsets (in samples) at which the refinement first evaluates the SNR: 64 steps of
#: 1/32 sample over [-1, 1]; a parabola through the best three then places the
#: maximum (its error, ~ (1/32)^3 of the peak's curvature scale, is far below 1e-4
#: of a sample for peaks a few samples wide).
REFINE_GRID: np.ndarray = np.linspace(-1.0, 1.0, 65)
#: Memory budget of the per-detector cache of prepared templates (bytes).
CACHE_BYTES: int = 128 * 2 ** 20


def fractional_delay_taps(x: float) -> tuple[int, np.ndarray]:
    """Interpolation taps for the real position ``x``: ``value(x) = taps @ y[j0 : j0 + 2M]``.

    Returns ``(j0, taps)`` with ``j0 = floor(x) - M + 1`` and M =
    :data:`KERNEL_HALF`; exact at integer ``x`` (one tap of 1).

    Examples
    --------
    >>> j0, h = fractional_delay_taps(10.0)
    >>> j0, float(h[10 - j0]), float(abs(h).sum() - 1.0) < 1e-12
    (-5, 1.0, True)
    """
    k = int(np.floor(x))
    j = np.arange(k - KERNEL_HALF + 1, k + KERNEL_HALF + 1)
    u = x - j
    w = i0(KAISER_BETA * np.sqrt(np.clip(1.0 - (u / KERNEL_HALF) ** 2, 0.0, None)))
    return k - KERNEL_HALF + 1, np.sinc(u) * w / i0(KAISER_BETA)


_REFINE_TAPS: dict[int, np.ndarray] = {}


def _refine_taps() -> np.ndarray:
    """(len(REFINE_GRID), 2M + 3) taps taking coordinates at offsets -M-1..M+1 of a sample
    to the grid offsets (built once)."""
    m = KERNEL_HALF + 1
    if m not in _REFINE_TAPS:
        out = np.zeros((REFINE_GRID.size, 2 * m + 1))
        for i, d in enumerate(REFINE_GRID):
            j0, h = fractional_delay_taps(m + d)
            out[i, j0:j0 + h.size] = h
        _REFINE_TAPS[m] = out
    return _REFINE_TAPS[m]


@dataclass
class Peak:
    """One template evaluated at one (refined) start time in one detector.

    ``template_index`` (row of the bank), ``sample`` (nearest on-grid start
    sample at or below the start), ``offset`` (fraction of a sample after
    ``sample``, in [0, 1)), ``gps`` (start time, s), ``snr`` (projection SNR),
    ``chisq`` and ``chisq_dof`` (NaN and 0 without the veto),
    ``snr_reweighted`` (ranking SNR; ``snr`` without the veto) and
    ``amplitudes`` (2K real ML amplitudes, strain units, referred to ``gps``).
    """

    template_index: int
    sample: int
    offset: float
    gps: float
    snr: float
    chisq: float
    chisq_dof: int
    snr_reweighted: float
    amplitudes: np.ndarray


class _Prepared:
    __slots__ = ("basis", "cinv", "to_amplitude", "veto", "cond", "nbytes")

    def __init__(self, basis: np.ndarray, cinv: np.ndarray, veto: VetoBasis | None,
                 cond: float):
        self.basis = np.ascontiguousarray(basis)  # (2K, L) raw sampled basis
        self.cinv = cinv  # C^{-1}: y = cinv @ z
        self.to_amplitude = np.ascontiguousarray(cinv.T @ cinv)  # G^{-1}: a = G^{-1} z
        self.veto = veto
        self.cond = cond
        self.nbytes = self.basis.nbytes + (veto.weights.nbytes if veto is not None else 0)


def doubly_whitened(cond: Any) -> np.ndarray:
    """The whitened data filtered once more by the whitening response: ``x = H w``.

    Then ``<d, u> = sum_j x[j] u[j]`` for a template u sampled on the data's
    samples (H is real and symmetric).  One FFT of the data zero-padded by
    twice the length holding all but 1e-10 of the filter's impulse-response
    energy, so its ringing does not wrap around.

    Examples
    --------
    >>> x = doubly_whitened(cond)  # doctest: +SKIP
    """
    from ringsearch.search.correlate import filter_length

    vals, fs, _ = data_arrays(cond)
    n = scipy.fft.next_fast_len(vals.size + 2 * filter_length(cond, tol=1e-10), real=True)
    spec = scipy.fft.rfft(vals, n)
    spec *= response_on(cond, n, fs)
    return scipy.fft.irfft(spec, n)[:vals.size]


class Probe:
    """Evaluate templates at requested start times in one detector's data.

    Parameters
    ----------
    cond : ConditionedData
        One detector's conditioned data (see :mod:`ringsearch.data.condition`).
    f_hz, tau_s : array (n_templates, K)
        The templates' mode frequencies (Hz) and damping times (s), e.g. a
        bank's ``f_hz``/``tau_s``; templates are referred to by row index.
    longest_s : float, optional
        Longest template the valid start times must hold (default: the
        longest of these templates).
    veto_bins : int or None
        Pieces of the chi-squared (None: no veto, ``snr_reweighted = snr``).
    veto_domain : {"time", "frequency"}
        Split of the veto.
    mismatch : float
        The veto's mismatch allowance (see :func:`ringsearch.search.veto.reweighted_snr`).
    grams : Grams, optional
        The templates' factored Gram matrices for this data (computed when
        not given); the full-series filter uses the same ones.

    Examples
    --------
    >>> probe = Probe(cond, bank.f_hz, bank.tau_s, veto_bins=8)  # doctest: +SKIP
    >>> pk = probe.peak(12, 1126259462.40, 1126259462.44)  # doctest: +SKIP
    >>> pk.gps, pk.snr, pk.snr_reweighted  # doctest: +SKIP
    """

    def __init__(self, cond: Any, f_hz: Any, tau_s: Any, *, longest_s: float | None = None,
                 veto_bins: int | None = DEFAULT_BINS, veto_domain: str = DEFAULT_DOMAIN,
                 mismatch: float = 0.0, max_cond: float = MAX_COND,
                 grams: Grams | None = None, cache_bytes: int = CACHE_BYTES):
        self.cond = cond
        self.detector = str(getattr(cond, "detector", ""))
        self.values, self.sample_rate, self.t0 = data_arrays(cond)
        self._f = np.atleast_2d(np.asarray(f_hz, float))
        self._tau = np.atleast_2d(np.asarray(tau_s, float))
        if self._f.shape != self._tau.shape:
            raise InputError("f_hz and tau_s of the templates must have the same shape.")
        self.veto_bins = None if veto_bins is None else check_bins(veto_bins)
        self.veto_domain = check_domain(veto_domain)
        self.mismatch = float(mismatch)
        self.max_cond = float(max_cond)
        self.pad = local_pad(cond)
        if longest_s is None:
            from ringsearch.search.bank import DECAY_TIMES

            longest_s = float(DECAY_TIMES * self._tau.max())
        self.valid = start_mask(cond, float(longest_s))
        self.weighted = doubly_whitened(cond)
        self._responses: dict[int, np.ndarray] = {}
        # every template's Gram matrix, on its own short grid (shared with the filter)
        self.grams = grams if grams is not None else template_grams(
            self._f, self._tau, self._response, self.sample_rate, self.pad, self.max_cond)
        self._cache: OrderedDict[int, _Prepared] = OrderedDict()
        self._cache_bytes = int(cache_bytes)
        self._used = 0

    # ------------------------------------------------------------------ templates
    def _response(self, n: int) -> np.ndarray:
        if n not in self._responses:
            self._responses[n] = response_on(self.cond, n, self.sample_rate)
        return self._responses[n]

    def prepared(self, index: int) -> _Prepared:
        """The cached preparation of template ``index`` (built on first use)."""
        index = int(index)
        hit = self._cache.get(index)
        if hit is not None:
            self._cache.move_to_end(index)
            return hit
        f, tau = self._f[index], self._tau[index]
        fs = self.sample_rate
        if not self.grams.ok[index]:
            raise InputError(f"template {index} refused: {self.grams.reason[index]}.")
        basis = basis_waveforms(f, tau, template_samples(tau, fs) + 2, fs)
        out = _Prepared(basis, self.grams.cinv[index], None, float(self.grams.cond[index]))
        self._cache[index] = out
        self._used += out.nbytes
        while self._used > self._cache_bytes and len(self._cache) > 1:
            _, old = self._cache.popitem(last=False)
            self._used -= old.nbytes
        return out

    def _veto_of(self, index: int, prep: _Prepared) -> VetoBasis:
        """The template's veto, built on first use (many templates never need one)."""
        if prep.veto is None:
            fs = self.sample_rate
            n = local_grid(self._tau[index], fs, self.pad)
            prep.veto = veto_basis(prep.basis, self._response(n), n, fs, self.pad,
                                   self.veto_bins, self.veto_domain)
            prep.nbytes += prep.veto.weights.nbytes
            self._used += prep.veto.weights.nbytes
        return prep.veto

    def _shifted(self, start: int, length: int, frac: float) -> np.ndarray:
        """``length`` doubly whitened samples from ``start``, delayed by ``frac`` of a sample."""
        if frac <= 0.0:
            return self._segment(start, length)
        j0, h = fractional_delay_taps(frac)
        return np.correlate(self._segment(start + j0, length + h.size - 1), h, mode="valid")

    # ------------------------------------------------------------------ data access
    def _segment(self, start: int, length: int) -> np.ndarray:
        out = np.zeros(length)
        a, b = max(start, 0), min(start + length, self.weighted.size)
        if b > a:
            out[a - start:b - start] = self.weighted[a:b]
        return out

    def _coords(self, prep: _Prepared, lo: int, hi: int) -> np.ndarray:
        """Projection coordinates y (2K, hi - lo) at the on-grid start samples lo..hi-1."""
        length = prep.basis.shape[1]
        seg = self._segment(lo, hi - lo + length - 1)
        windows = np.lib.stride_tricks.sliding_window_view(seg, length)  # (hi - lo, L)
        return prep.cinv @ (prep.basis @ windows.T)

    # ------------------------------------------------------------------ evaluation
    def at(self, index: int, gps: float) -> Peak:
        """Template ``index`` evaluated with its start exactly at ``gps`` (no maximisation).

        Examples
        --------
        >>> probe.at(3, 1000000016.00012).snr  # doctest: +SKIP
        """
        x = (float(gps) - self.t0) * self.sample_rate
        k = int(np.floor(x + 1e-9))
        if not (0 <= k < self.values.size and self.valid[k]):
            raise InputError(f"start time {gps} is not a valid start time of the "
                             f"{self.detector} data.")
        return self._evaluate(index, k, max(x - k, 0.0))

    def at_sample(self, index: int, sample: int) -> Peak:
        """Template ``index`` evaluated with its start on data sample ``sample``.

        Examples
        --------
        >>> probe.at_sample(3, 65536).snr  # doctest: +SKIP
        """
        return self._evaluate(index, int(sample), 0.0)

    def refine(self, index: int, sample: int, lo_s: float = -1.0, hi_s: float = 1.0,
               veto_from: float = 0.0) -> Peak:
        """The best start of template ``index`` within [sample + lo_s, sample + hi_s] samples.

        ``lo_s`` and ``hi_s`` lie in [-1, 1]; ``sample`` should be an on-grid
        maximum of the SNR (the refinement is a local one).  The chi-squared is
        evaluated only when the refined SNR reaches ``veto_from`` (below it
        ``chisq`` is NaN and ``snr_reweighted`` the raw SNR): a peak below the
        trigger threshold is dropped whatever its chi-squared.

        Examples
        --------
        >>> probe.refine(3, 65536).offset  # doctest: +SKIP
        """
        prep = self.prepared(index)
        k = int(sample)
        m = KERNEL_HALF + 1
        y = self._coords(prep, k - m, k + m + 1)  # positions k-m .. k+m
        return self._refine(index, prep, y, m, k, lo_s, hi_s, veto_from)

    def _refine(self, index: int, prep: _Prepared, y: np.ndarray, pos: int, k: int,
                lo_s: float, hi_s: float, veto_from: float = 0.0) -> Peak:
        """Refine around on-grid sample k, which is column ``pos`` of the coordinates ``y``."""
        lo_s, hi_s = max(float(lo_s), -1.0), min(float(hi_s), 1.0)
        if k - 1 < 0 or not self.valid[k - 1]:
            lo_s = max(lo_s, 0.0)
        if k + 1 >= self.values.size or not self.valid[k + 1]:
            hi_s = min(hi_s, 0.0)
        m = KERNEL_HALF + 1
        v = y[:, pos - m:pos + m + 1] @ _refine_taps().T  # (2K, grid)
        rho2 = (v * v).sum(axis=0)
        inside = (REFINE_GRID >= lo_s - 1e-12) & (REFINE_GRID <= hi_s + 1e-12)
        if not inside.any():
            x = min(max(0.0, lo_s), hi_s)
        else:
            rho2 = np.where(inside, rho2, -np.inf)
            i = int(np.argmax(rho2))
            x = float(REFINE_GRID[i])
            if 0 < i < REFINE_GRID.size - 1 and inside[i - 1] and inside[i + 1]:
                # the vertex of the parabola through the best grid point and its neighbours
                a, b, c = rho2[i - 1], rho2[i], rho2[i + 1]
                den = a - 2 * b + c
                if den < 0:
                    step = REFINE_GRID[1] - REFINE_GRID[0]
                    x += float(np.clip(0.5 * (a - c) / den, -0.5, 0.5)) * step
            x = min(max(x, lo_s), hi_s)
        base = k + int(np.floor(x))
        return self._evaluate(index, base, x - np.floor(x), prep, veto_from)

    def peak(self, index: int, gps_lo: float, gps_hi: float) -> Peak | None:
        """The loudest start of template ``index`` in ``[gps_lo, gps_hi]``, refined.

        The on-grid maximum of the raw SNR over valid start samples in the
        window is refined between samples (staying inside the window).  None
        when the window holds no valid start time.

        Examples
        --------
        >>> probe.peak(3, 1000000015.99, 1000000016.01).gps  # doctest: +SKIP
        """
        fs = self.sample_rate
        a = int(np.ceil((gps_lo - self.t0) * fs - 1e-9))
        b = int(np.floor((gps_hi - self.t0) * fs + 1e-9))
        a, b = max(a, 0), min(b, self.values.size - 1)
        if b < a:
            return None
        ok = self.valid[a:b + 1]
        if not ok.any():
            return None
        prep = self.prepared(index)
        m = KERNEL_HALF + 1
        y = self._coords(prep, a - m, b + m + 1)  # positions a-m .. b+m
        core = y[:, m:m + b - a + 1]
        rho2 = (core * core).sum(axis=0)
        rho2[~ok] = -1.0
        i = int(np.argmax(rho2))
        k = a + i
        x_lo = (gps_lo - self.t0) * fs - k
        x_hi = (gps_hi - self.t0) * fs - k
        return self._refine(index, prep, y, m + i, k, x_lo, x_hi)

    def with_veto(self, peak: Peak) -> Peak:
        """The same peak with its chi-squared and re-weighted SNR (if it was refined without).

        Examples
        --------
        >>> probe.with_veto(probe.refine(3, 65536, veto_from=float("inf")))  # doctest: +SKIP
        """
        if self.veto_bins is None or peak.chisq_dof > 0:
            return peak
        return self._evaluate(peak.template_index, peak.sample, peak.offset)

    def _evaluate(self, index: int, k: int, frac: float, prep: _Prepared | None = None,
                  veto_from: float = 0.0) -> Peak:
        prep = prep or self.prepared(index)
        z = prep.basis @ self._shifted(k, prep.basis.shape[1], frac)
        y = prep.cinv @ z
        snr = float(np.sqrt(y @ y))
        amp = prep.to_amplitude @ z
        if self.veto_bins is not None and snr >= veto_from:
            veto = self._veto_of(index, prep)
            r = veto.weights @ self._shifted(k + veto.offset, veto.weights.shape[1], frac)
            chisq, dof = float(r @ r), int(veto.dof)
            rw = float(reweighted_snr(snr, chisq, dof, self.mismatch))
        else:
            chisq, dof, rw = float("nan"), 0, snr
        gps = self.t0 + (k + frac) / self.sample_rate
        return Peak(int(index), int(k), float(frac), float(gps), snr, chisq, dof, rw, amp)
