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
(``x = H w``, one FFT of the whole series, or overlap-save blocks for long
data).  Because H is real and
symmetric, ``<d, u> = sum_j w[j] (h * u)[j] = sum_j x[j] u[j]``: the inner
product with a template is a dot product of x with the *raw* sampled
template over the template's own support (a few to a few hundred samples),
with no whitening filter to carry along.  Only the template's Gram matrix
(:func:`ringsearch.search.templates.template_grams`, for every template at
once) and the veto's covariances (once per template, on a short FFT grid,
:func:`ringsearch.search.templates.local_grid`) need whitened inner products.

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
    return k - KERNEL_HALF + 1, delay_taps(np.array([x - k]))[0]


def delay_taps(frac: np.ndarray) -> np.ndarray:
    """Taps (P, 2M) of :func:`fractional_delay_taps` for fractions ``frac`` in [0, 1).

    Row p interpolates at ``frac[p]`` from the 2M samples at offsets
    ``-M + 1 .. M``; a fraction of 0 gives exactly one tap of 1.

    Examples
    --------
    >>> h = delay_taps(np.array([0.0, 0.5]))
    >>> h.shape, float(h[0, KERNEL_HALF - 1]), float(h[1].sum().round(4))
    ((2, 32), 1.0, 1.0)
    """
    frac = np.asarray(frac, float)
    u = frac[:, None] - _TAP_POSITIONS
    w = i0(KAISER_BETA * np.sqrt(np.maximum(1.0 - (u / KERNEL_HALF) ** 2, 0.0)))
    out = np.sinc(u) * w
    out *= _KAISER_NORM
    on_sample = frac == 0.0
    if on_sample.any():  # sin(pi n) is not exactly 0 in floating point
        out[on_sample] = 0.0
        out[on_sample, KERNEL_HALF - 1] = 1.0
    return out


_TAP_POSITIONS = np.arange(-KERNEL_HALF + 1, KERNEL_HALF + 1)
_KAISER_NORM = 1.0 / float(i0(KAISER_BETA))
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
    __slots__ = ("index", "basis", "cinv", "to_amplitude", "veto", "cond", "nbytes", "spectra")

    def __init__(self, index: int, basis: np.ndarray, cinv: np.ndarray,
                 veto: VetoBasis | None, cond: float):
        self.index = int(index)
        self.basis = np.ascontiguousarray(basis)  # (2K, L) raw sampled basis
        self.cinv = cinv  # C^{-1}: y = cinv @ z
        self.to_amplitude = np.ascontiguousarray(cinv.T @ cinv)  # G^{-1}: a = G^{-1} z
        self.veto = veto
        self.cond = cond
        self.nbytes = self.basis.nbytes + (veto.weights.nbytes if veto is not None else 0)
        self.spectra: dict[int, np.ndarray] = {}  # conj(rfft(basis, n)) by n


def doubly_whitened(cond: Any, block: int = 1 << 21) -> np.ndarray:
    """The whitened data filtered once more by the whitening response: ``x = H w``.

    Then ``<d, u> = sum_j x[j] u[j]`` for a template u sampled on the data's
    samples (H is real and symmetric).  FFT filtering with a margin of the
    length holding all but 1e-10 of the filter's impulse-response energy, so
    its ringing does not wrap around: in one FFT for data up to ``block``
    samples, else block by block (overlap-save), so the transient memory does
    not grow with the data's length.

    Examples
    --------
    >>> x = doubly_whitened(cond)  # doctest: +SKIP
    """
    from ringsearch.search.correlate import _load_chunk, filter_length

    vals, fs, _ = data_arrays(cond)
    pad = filter_length(cond, tol=1e-10)
    if vals.size <= block:
        n = scipy.fft.next_fast_len(vals.size + 2 * pad, real=True)
        spec = scipy.fft.rfft(vals, n)
        spec *= response_on(cond, n, fs)
        return scipy.fft.irfft(spec, n)[:vals.size]
    n = scipy.fft.next_fast_len(block + 2 * pad, real=True)
    step = n - 2 * pad
    resp = response_on(cond, n, fs)
    out = np.empty(vals.size)
    for start in range(0, vals.size, step):
        spec = scipy.fft.rfft(_load_chunk(vals, start - pad, n))
        spec *= resp
        keep = min(step, vals.size - start)
        out[start:start + keep] = scipy.fft.irfft(spec, n)[pad:pad + keep]
    return out


#: Gram matrices and template groups of recent (templates, filter response) pairs.
_SHARED: OrderedDict[str, dict] = OrderedDict()
_SHARED_ENTRIES = 4


def _shared_key(f: np.ndarray, tau: np.ndarray, response: Any, fs: float, pad: int,
                max_cond: float) -> str:
    """A digest of everything the Gram matrices and the groups depend on."""
    import hashlib

    from ringsearch.search.templates import local_grid

    n_acf = local_grid(tau.max(), fs, 8 * pad)
    h = hashlib.blake2b(digest_size=16)
    for part in (f, tau, np.asarray(response(n_acf), float),
                 np.array([fs, pad, max_cond, n_acf], float)):
        h.update(np.ascontiguousarray(part).tobytes())
    return h.hexdigest()


def _remember(key: str, name: str, value: Any) -> None:
    _SHARED.setdefault(key, {})[name] = value
    _SHARED.move_to_end(key)
    while len(_SHARED) > _SHARED_ENTRIES:
        _SHARED.popitem(last=False)


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
        # every template's Gram matrix for these data (shared with the filter), and the
        # template groups: both depend only on the templates and the filter response, so
        # data whitened alike (campaign chunks of one PSD) share them
        self._key = _shared_key(self._f, self._tau, self._response, self.sample_rate,
                                self.pad, self.max_cond)
        shared = _SHARED.get(self._key, {})
        self.grams = grams if grams is not None else shared.get("grams")
        if self.grams is None:
            self.grams = template_grams(self._f, self._tau, self._response, self.sample_rate,
                                        self.pad, self.max_cond)
            _remember(self._key, "grams", self.grams)
        self._groups = None
        self._cache: OrderedDict[int, _Prepared] = OrderedDict()
        self._cache_bytes = int(cache_bytes)
        self._used = 0

    @property
    def groups(self) -> Any:
        """The templates in groups with their principal bases for these data (built once).

        See :mod:`ringsearch.search.subspace`; the full-series filter uses them.
        """
        if self._groups is None:
            from ringsearch.search.subspace import template_groups

            shared = _SHARED.get(self._key, {})
            mine = shared.get("grams") is self.grams  # not given Gram matrices of its own
            self._groups = shared.get("groups") if mine else None
            if self._groups is None:
                self._groups = template_groups(self._f, self._tau, self.grams,
                                               self._response, self.sample_rate, self.pad)
                if mine:
                    _remember(self._key, "groups", self._groups)
        return self._groups

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
        out = _Prepared(index, basis, self.grams.cinv[index], None, float(self.grams.cond[index]))
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

    def _shifted(self, starts: np.ndarray, length: int, fracs: np.ndarray,
                 taps: np.ndarray | None = None) -> np.ndarray:
        """(P, length) doubly whitened samples from each ``starts[p]``, delayed by ``fracs[p]``
        of a sample (Kaiser-windowed sinc, :func:`delay_taps`; ``taps`` if already made)."""
        moving = fracs > 0.0
        if not moving.any():
            return self._segments(starts, length)
        taps = delay_taps(fracs) if taps is None else taps
        seg = self._segments(starts - KERNEL_HALF + 1, length + 2 * KERNEL_HALF - 1)
        if starts.size == 1:
            return np.correlate(seg[0], taps[0], mode="valid")[None]
        win = np.lib.stride_tricks.sliding_window_view(seg, 2 * KERNEL_HALF, axis=-1)
        return np.einsum("pli,pi->pl", win, taps)

    # ------------------------------------------------------------------ data access
    def _segments(self, starts: np.ndarray, length: int) -> np.ndarray:
        """(P, length) doubly whitened samples from each ``starts[p]``, zero outside the data
        (read-only: may be a view of the data)."""
        starts = np.asarray(starts, np.int64)
        x, n = self.weighted, self.weighted.size
        if starts.size == 1 and 0 <= starts[0] and starts[0] + length <= n:
            return x[int(starts[0]):int(starts[0]) + length][None]
        idx = starts[:, None] + np.arange(length)
        if starts.size and starts.min() >= 0 and starts.max() + length <= n:
            return x[idx]
        inside = (idx >= 0) & (idx < n)
        return np.where(inside, x[np.clip(idx, 0, n - 1)], 0.0)

    def _correlations(self, prep: _Prepared, starts: np.ndarray, n_pos: int) -> np.ndarray:
        """Correlations z (P, 2K, n_pos) of the raw basis at on-grid starts ``starts[p] + i``.

        One short FFT correlation per start (exact: the grid holds the
        positions and the template without wrapping around); the projection
        coordinates are ``y = C^{-1} z``.
        """
        length = prep.basis.shape[1]
        n = scipy.fft.next_fast_len(n_pos + length, real=True)
        seg = self._segments(starts, n_pos + length - 1)
        spec = scipy.fft.rfft(seg, n, axis=-1)[:, None, :] * self._spectrum(prep, n)
        return scipy.fft.irfft(spec, n, axis=-1)[..., :n_pos]

    def _spectrum(self, prep: _Prepared, n: int) -> np.ndarray:
        """conj(rfft(basis, n)) of a prepared template, kept with it (counted in the cache
        while the template is in it: a batch may hold templates the cache has let go)."""
        basis_spec = prep.spectra.get(n)
        if basis_spec is None:
            basis_spec = prep.spectra[n] = np.conj(scipy.fft.rfft(prep.basis, n, axis=-1))
            prep.nbytes += basis_spec.nbytes
            if self._cache.get(prep.index) is prep:
                self._used += basis_spec.nbytes
        return basis_spec

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
        return self._evaluate(index, np.array([k]), np.array([max(x - k, 0.0)]))[0]

    def at_sample(self, index: int, sample: int) -> Peak:
        """Template ``index`` evaluated with its start on data sample ``sample``.

        Examples
        --------
        >>> probe.at_sample(3, 65536).snr  # doctest: +SKIP
        """
        return self._evaluate(index, np.array([int(sample)]), np.zeros(1))[0]

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
        return self.refine_many(index, [sample], lo_s, hi_s, veto_from)[0]

    def refine_many(self, index: int, samples: Any, lo_s: Any = -1.0, hi_s: Any = 1.0,
                    veto_from: float = 0.0, batch: int = 512) -> list[Peak]:
        """:meth:`refine` of template ``index`` at many on-grid samples, vectorised.

        ``lo_s``/``hi_s`` are scalars or one value per sample.  The numbers
        are those of :meth:`refine` one by one (it calls this).

        Examples
        --------
        >>> peaks = probe.refine_many(3, [65536, 70000], veto_from=float("inf"))  # doctest: +SKIP
        """
        k = np.atleast_1d(np.asarray(samples, np.int64))
        return self.refine_batch(np.full(k.size, int(index)), k, lo_s, hi_s, veto_from, batch)

    def refine_batch(self, indices: Any, samples: Any, lo_s: Any = -1.0, hi_s: Any = 1.0,
                     veto_from: float = 0.0, batch: int = 512) -> list[Peak]:
        """:meth:`refine` of template ``indices[p]`` at on-grid sample ``samples[p]``, for
        peaks of many templates at once (in their order).

        Templates whose short correlations share an FFT length are refined
        together, so there is no Python work per template.
        :meth:`refine_many` (one template) is this call.

        Examples
        --------
        >>> peaks = probe.refine_batch([3, 7], [65536, 65540],
        ...                            veto_from=float("inf"))  # doctest: +SKIP
        """
        idx = np.atleast_1d(np.asarray(indices, np.int64))
        k = np.atleast_1d(np.asarray(samples, np.int64))
        if idx.shape != k.shape:
            raise InputError("indices and samples of the peaks must have the same length.")
        lo = np.broadcast_to(np.asarray(lo_s, float), k.shape)
        hi = np.broadcast_to(np.asarray(hi_s, float), k.shape)
        out: list[Peak | None] = [None] * k.size
        if k.size == 0:
            return []
        m = KERNEL_HALF + 1
        n_pos = 2 * m + 1  # positions k-m .. k+m
        uniq, inverse = np.unique(idx, return_inverse=True)
        preps = [self.prepared(i) for i in uniq]
        lengths = np.array([p.basis.shape[1] for p in preps])
        n_of = np.array([scipy.fft.next_fast_len(n_pos + int(L), real=True) for L in lengths])
        cinv = np.stack([p.cinv for p in preps])
        to_amp = np.stack([p.to_amplitude for p in preps])
        for n in np.unique(n_of):
            tmpl = np.flatnonzero(n_of == n)  # templates (positions in uniq) of this length
            longest = int(lengths[tmpl].max())
            specs = np.stack([self._spectrum(preps[t], int(n)) for t in tmpl])
            local = np.full(uniq.size, -1)
            local[tmpl] = np.arange(tmpl.size)
            rows = np.flatnonzero(local[inverse] >= 0)
            for a in range(0, rows.size, batch):
                r = rows[a:a + batch]
                # segments as long as the bucket's longest template: a shorter one's zero
                # tail keeps its first n_pos correlations exact (no wrap-around)
                seg = self._segments(k[r] - m, n_pos + longest - 1)
                spec = scipy.fft.rfft(seg, int(n), axis=-1)[:, None, :] * specs[local[inverse[r]]]
                z = scipy.fft.irfft(spec, int(n), axis=-1)[..., :n_pos]
                found = self._refined(idx[r], cinv[inverse[r]], to_amp[inverse[r]], k[r], z,
                                      lo[r], hi[r], veto_from)
                for j, pk in zip(r, found, strict=True):
                    out[j] = pk
        return out  # type: ignore[return-value]

    def _refined(self, indices: np.ndarray, cinv: np.ndarray, to_amplitude: np.ndarray,
                 k: np.ndarray, z: np.ndarray, lo: np.ndarray, hi: np.ndarray,
                 veto_from: float) -> list[Peak]:
        """Refine around on-grid samples ``k`` from their correlations ``z`` (P, 2K, 2m + 1)
        at ``k - m .. k + m`` (m = KERNEL_HALF + 1), within [k + lo, k + hi]; peak p is
        of template ``indices[p]`` with C^{-1} and G^{-1} as in :meth:`_evaluate_peaks`."""
        n = self.values.size
        valid = self.valid
        lo = np.maximum(lo, -1.0)
        hi = np.minimum(hi, 1.0)
        before = k - 1
        after = k + 1
        lo = np.where((before >= 0) & valid[np.maximum(before, 0)], lo, np.maximum(lo, 0.0))
        hi = np.where((after < n) & valid[np.minimum(after, n - 1)], hi, np.minimum(hi, 0.0))
        y = np.matmul(cinv, np.matmul(z, _refine_taps().T))  # (P, 2K, grid)
        x = _grid_maximum(np.einsum("pjg,pjg->pg", y, y), lo, hi, REFINE_GRID)
        floor = np.floor(x)
        shift = floor.astype(np.int64)
        # the start's interpolation taps reach samples base-M+1 .. base+M: columns
        # (base - k) + 2 .. of z, with base - k in {-1, 0, 1}
        first = shift + 2  # m - M + 1 with m = M + 1
        cols = first[:, None] + np.arange(2 * KERNEL_HALF)
        return self._evaluate_peaks(indices, k + shift, x - floor, cinv, to_amplitude,
                                    veto_from, np.take_along_axis(z, cols[:, None], axis=2))

    def peak(self, index: int, gps_lo: float, gps_hi: float) -> Peak | None:
        """The loudest start of template ``index`` in ``[gps_lo, gps_hi]``, refined.

        The on-grid maximum of the raw SNR over valid start samples in the
        window is refined between samples (staying inside the window).  None
        when the window holds no valid start time.

        Examples
        --------
        >>> probe.peak(3, 1000000015.99, 1000000016.01).gps  # doctest: +SKIP
        """
        return self.peaks(index, [gps_lo], [gps_hi])[0]

    def peaks(self, index: int, gps_lo: Any, gps_hi: Any, batch: int = 256
              ) -> list[Peak | None]:
        """:meth:`peak` of template ``index`` in many windows at once (e.g. every time slide).

        Examples
        --------
        >>> probe.peaks(3, [1000000015.99, 1000000020.99], [1000000016.01, 1000000021.01])
        ... # doctest: +SKIP
        """
        fs, n = self.sample_rate, self.values.size
        lo_x = (np.atleast_1d(np.asarray(gps_lo, float)) - self.t0) * fs
        hi_x = (np.atleast_1d(np.asarray(gps_hi, float)) - self.t0) * fs
        first = np.maximum(np.ceil(lo_x - 1e-9).astype(np.int64), 0)
        last = np.minimum(np.floor(hi_x + 1e-9).astype(np.int64), n - 1)
        out: list[Peak | None] = [None] * lo_x.size
        width = last - first + 1
        if width.size == 0 or width.max() < 1:
            return out
        span = int(width.max())
        pos = first[:, None] + np.arange(span)
        ok = (pos <= last[:, None]) & self.valid[np.minimum(np.maximum(pos, 0), n - 1)]
        rows = np.flatnonzero(ok.any(axis=1))
        if rows.size == 0:
            return out
        prep = self.prepared(index)
        m = KERNEL_HALF + 1
        for c in range(0, rows.size, batch):
            r = rows[c:c + batch]
            z = self._correlations(prep, first[r] - m, span + 2 * m)  # first-m .. +span+m
            core = np.matmul(prep.cinv, z[:, :, m:m + span])
            rho2 = np.where(ok[r], np.einsum("pjt,pjt->pt", core, core), -1.0)
            i = np.argmax(rho2, axis=1)
            k = first[r] + i
            cols = i[:, None] + np.arange(2 * m + 1)
            found = self._refined(np.full(k.size, int(index)), prep.cinv, prep.to_amplitude,
                                  k, np.take_along_axis(z, cols[:, None], axis=2),
                                  lo_x[r] - k, hi_x[r] - k, 0.0)
            for row, pk in zip(r, found, strict=True):
                out[row] = pk
        return out

    def with_veto(self, peak: Peak) -> Peak:
        """The same peak with its chi-squared and re-weighted SNR (if it was refined without).

        Examples
        --------
        >>> probe.with_veto(probe.refine(3, 65536, veto_from=float("inf")))  # doctest: +SKIP
        """
        if self.veto_bins is None or peak.chisq_dof > 0:
            return peak
        return self._evaluate(peak.template_index, np.array([peak.sample]),
                              np.array([peak.offset]))[0]

    def _evaluate(self, index: int, ks: np.ndarray, fracs: np.ndarray,
                  prep: _Prepared | None = None, veto_from: float = 0.0,
                  z: np.ndarray | None = None) -> list[Peak]:
        """Template ``index`` at starts ``ks[p] + fracs[p]`` samples: SNR, amplitudes, veto.

        The correlations at a start between samples are those of the 2M
        samples around it interpolated (:func:`delay_taps`), which equals
        correlating the template with the data delayed by the fraction.
        ``z`` (P, 2K, 2M): the correlations at starts ``ks - M + 1 .. ks + M``
        when already computed.
        """
        prep = prep or self.prepared(index)
        if z is None:
            z = self._correlations(prep, ks - KERNEL_HALF + 1, 2 * KERNEL_HALF)
        return self._evaluate_peaks(np.full(ks.size, int(index)), ks, fracs, prep.cinv,
                                    prep.to_amplitude, veto_from, z)

    def _evaluate_peaks(self, indices: np.ndarray, ks: np.ndarray, fracs: np.ndarray,
                        cinv: np.ndarray, to_amplitude: np.ndarray, veto_from: float,
                        z: np.ndarray) -> list[Peak]:
        """:meth:`_evaluate` of peak p of template ``indices[p]``, with its C^{-1} and G^{-1}
        (``cinv``, ``to_amplitude``: (2K, 2K) for all peaks, or (P, 2K, 2K))."""
        taps = delay_taps(fracs)
        z = np.einsum("pjt,pt->pj", z, taps)  # (P, 2K)
        y = np.matmul(cinv, z[..., None])[..., 0]
        snrs = np.sqrt(np.einsum("pj,pj->p", y, y))
        amps = np.matmul(to_amplitude, z[..., None])[..., 0]
        gps = self.t0 + (ks + fracs) / self.sample_rate
        out = []
        for p in range(ks.size):
            snr = float(snrs[p])
            index = int(indices[p])
            if self.veto_bins is not None and snr >= veto_from:
                veto = self._veto_of(index, self.prepared(index))
                r = veto.weights @ self._shifted(ks[p:p + 1] + veto.offset,
                                                 veto.weights.shape[1], fracs[p:p + 1],
                                                 taps[p:p + 1])[0]
                chisq, dof = float(r @ r), int(veto.dof)
                rw = float(reweighted_snr(snr, chisq, dof, self.mismatch))
            else:
                chisq, dof, rw = float("nan"), 0, snr
            out.append(Peak(index, int(ks[p]), float(fracs[p]), float(gps[p]), snr,
                            chisq, dof, rw, amps[p]))
        return out


def _grid_maximum(rho2: np.ndarray, lo: np.ndarray, hi: np.ndarray, grid: np.ndarray
                  ) -> np.ndarray:
    """Per row, the offset in [lo, hi] maximising rho2 sampled on ``grid`` (then a parabola).

    The best grid point, moved to the vertex of the parabola through it and
    its two neighbours when both lie inside the window and it is concave.
    """
    inside = (grid >= lo[:, None] - 1e-12) & (grid <= hi[:, None] + 1e-12)
    r = np.where(inside, rho2, -1.0)  # rho2 >= 0: a finite mark for points outside
    i = np.argmax(r, axis=1)
    x = grid[i]
    rows = np.arange(r.shape[0])
    j = np.minimum(np.maximum(i, 1), grid.size - 2)
    a, b, c = r[rows, j - 1], r[rows, j], r[rows, j + 1]
    den = a - 2 * b + c
    vertex = ((i > 0) & (i < grid.size - 1) & inside[rows, j - 1] & inside[rows, j + 1]
              & (den < 0))
    step = 0.5 * (a - c) / np.where(vertex, den, -1.0)
    x = np.where(vertex, x + np.minimum(np.maximum(step, -0.5), 0.5) * (grid[1] - grid[0]), x)
    x = np.minimum(np.maximum(x, lo), hi)
    empty = ~inside.any(axis=1)
    return np.where(empty, np.minimum(np.maximum(0.0, lo), hi), x)
