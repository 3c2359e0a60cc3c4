"""Full-series correlations: FFT matched filter of whitened data with a bank, peak finding.

The projection SNR of each template (see :mod:`ringsearch.search.templates`)
is computed at every start time of the data by FFT correlation: on each
chunk of L samples ``y(t0) = C^{-1} irfft(W conj(V))`` (one inverse FFT per
basis function per chunk, the chunk's FFT W reused by every template) and
``rho^2 = |y|^2``.  Chunks overlap by the longest template plus twice the
whitening filter's length, and only start times whose correlation does not
wrap around the chunk are kept, so the result equals a linear correlation
and memory stays bounded for any duration.  Only start times inside
analysable time (with the whole template inside the same analysable
segment) count.

This module *finds* peaks: per template, the largest on-grid SNR in each time
bin (:func:`filter_peaks`), computed on the doubly whitened data with the raw
templates, as the probe computes it.  Most templates are not correlated one
by one: groups of neighbours are correlated with the principal basis of their
span, and their members evaluated exactly only where a bound says one might
reach the threshold (:mod:`ringsearch.search.subspace`).  Every number the
search reports about a peak -- its sub-sample start time, SNR, amplitudes and
chi-squared -- is then computed by :class:`ringsearch.search.probe.Probe` on
the template's own short grid, so the same numbers come out whether a peak
was found here or asked for at a given time.
"""

from __future__ import annotations

import math
import weakref
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import scipy.fft

from ringsearch.data.segments import mask_from_segments, shorten_ends
from ringsearch.errors import InputError
from ringsearch.search.bank import DECAY_TIMES
from ringsearch.search.templates import (
    MAX_COND,
    basis_waveforms,
    one_template,
    prepare_templates,
    template_samples,
)

#: Energy fraction of the whitening filter's impulse response left outside the
#: short grids on which single templates are evaluated (:func:`local_pad`):
#: amplitude errors of sqrt(1e-5) ~ 0.3 % of the noise level, far below the
#: statistic's noise, on a grid several times shorter than a 1e-6 cut.
LOCAL_PAD_TOL: float = 1e-5

#: Bytes of data spectra held at once by the full-series filter (a block of
#: chunks whose FFTs every template reuses; at least ``block_chunks`` chunks).
BLOCK_BYTES: float = 64e6


# --------------------------------------------------------------------------- data access
def data_arrays(cond: Any) -> tuple[np.ndarray, float, float]:
    w = cond.whitened
    vals = np.asarray(getattr(w, "value", w), float)
    fs = float(cond.sample_rate.value if hasattr(cond.sample_rate, "value") else cond.sample_rate)
    t0 = float(w.t0.value if hasattr(w.t0, "value") else w.t0)
    if not np.all(np.isfinite(vals)):
        raise InputError(f"whitened data of {getattr(cond, 'detector', '?')} contains NaN or "
                         "infinite samples; condition the data first.")
    return vals, fs, t0


def response_on(cond: Any, n_fft: int, fs: float) -> np.ndarray:
    """The data's filter response H on the rfft grid of ``n_fft`` samples.

    Examples
    --------
    >>> response_on(cond, 4096, 4096.0).shape  # doctest: +SKIP
    (2049,)
    """
    freqs = scipy.fft.rfftfreq(n_fft, 1 / fs)
    return np.asarray(cond.filter_response(freqs), float)


def filter_length(cond: Any, n_fft: int | None = None, tol: float = 1e-6) -> int:
    """Half-length in samples of the whitening filter's impulse response.

    The smallest F such that taps with |j| <= F hold a fraction 1 - tol of the
    response's energy; correlations within F of a chunk edge wrap around.  The
    energy left outside adds wrapped noise of relative variance ``tol`` (1e-6:
    a 0.1 % change of the noise standard deviation), which is negligible.

    Examples
    --------
    >>> filter_length(cond)  # doctest: +SKIP
    512
    """
    key = (id(cond), n_fft, tol)
    if key in _FILTER_LENGTHS:
        return _FILTER_LENGTHS[key]
    vals, fs, _ = data_arrays(cond)
    n = n_fft or scipy.fft.next_fast_len(min(vals.size, int(16 * fs)))
    h = scipy.fft.irfft(response_on(cond, n, fs), n)
    e = h * h
    tot = e.sum()
    if tot <= 0:
        raise InputError(f"filter response of {cond.detector} is zero at every frequency.")
    half = n // 2
    sym = np.concatenate([[e[0]], e[1:half] + e[n - 1:n - half:-1]])
    cum = np.cumsum(sym) / tot
    out = int(min(np.searchsorted(cum, 1 - tol) + 1, half))
    try:  # remember it while the conditioned data lives (campaigns filter one by one)
        weakref.finalize(cond, _FILTER_LENGTHS.pop, key, None)
        _FILTER_LENGTHS[key] = out
    except TypeError:  # objects without weak references are not cached
        pass
    return out


_FILTER_LENGTHS: dict = {}


def local_pad(cond: Any) -> int:
    """Half-length of the whitening filter on single-template grids (:data:`LOCAL_PAD_TOL`).

    Examples
    --------
    >>> local_pad(cond)  # doctest: +SKIP
    6391
    """
    return filter_length(cond, tol=LOCAL_PAD_TOL)


def valid_starts(cond: Any, longest_s: float) -> Any:
    """Start times (SegmentList) whose template of ``longest_s`` lies in one analysable segment.

    Examples
    --------
    >>> valid_starts(cond, 0.1)  # doctest: +SKIP
    [Segment(1000000002.5, 1000000029.4)]
    """
    return shorten_ends(cond.analysable, float(longest_s))


def start_mask(cond: Any, longest_s: float, gps_window: tuple[float, float] | None = None
               ) -> np.ndarray:
    """True at the samples of ``cond`` that are valid start times (inside ``gps_window``).

    Examples
    --------
    >>> start_mask(cond, 0.1).sum()  # doctest: +SKIP
    110182
    """
    vals, fs, t0 = data_arrays(cond)
    segs = valid_starts(cond, longest_s)
    if gps_window is not None:
        from gwpy.segments import Segment, SegmentList

        segs = segs & SegmentList([Segment(*gps_window)])
    return mask_from_segments(segs, t0, fs, vals.size)


# --------------------------------------------------------------------------- filtering
@dataclass
class FilterPlan:
    """Chunking of one detector's data for a bank."""

    n_fft: int
    step: int
    pad: int  # whitening filter half-length F
    tail: int  # longest template in samples
    n_chunks: int


def plan_chunks(n_data: int, fs: float, longest_s: float, pad: int,
                chunk_s: float | None = None, max_single_s: float = 256.0) -> FilterPlan:
    """Choose the FFT length and chunk step.

    Chunk c loads data samples ``[c*step - pad, c*step - pad + n_fft)`` (zeros
    outside the data) and keeps start times ``[c*step, (c+1)*step)``: each
    correlation then only touches samples loaded in the chunk, so the
    circular correlation equals the linear one and consecutive chunks tile.
    Data shorter than ``max_single_s`` go in a single zero-padded FFT.
    """
    tail = int(math.ceil(longest_s * fs))
    need = tail + 2 * pad + 1
    if n_data < tail + 1:
        raise InputError(f"data of {n_data / fs:.3g} s is shorter than the longest template "
                         f"({tail / fs:.3g} s); give more data or a lighter mass range.")
    if n_data + need <= max_single_s * fs:
        n_fft = scipy.fft.next_fast_len(n_data + need, real=True)
        return FilterPlan(n_fft, n_fft - need + 1, pad, tail, 1)
    target = int((chunk_s or 4.0) * fs)
    n_fft = scipy.fft.next_fast_len(max(target, 4 * need), real=True)
    step = n_fft - need + 1
    return FilterPlan(n_fft, step, pad, tail, max(1, math.ceil(n_data / step)))


def _load_chunk(vals: np.ndarray, start: int, n: int) -> np.ndarray:
    """Samples [start, start + n) of ``vals``, zero outside the data."""
    out = np.zeros(n)
    a, b = max(start, 0), min(start + n, vals.size)
    if b > a:
        out[a - start:b - start] = vals[a:b]
    return out


def _iter_batches(n: int, size: int):
    for s in range(0, n, size):
        yield np.arange(s, min(n, s + size))


def filter_peaks(cond: Any, f_hz: np.ndarray, tau_s: np.ndarray, snr_threshold: float,
                 bin_s: float, *, weighted: np.ndarray, grams: Any,
                 chunk_s: float | None = None, batch: int | None = None,
                 progress: bool = False, block_chunks: int = 32,
                 gps_window: tuple[float, float] | None = None,
                 regions: Any = None,
                 precision: str = "single",
                 groups: Any = None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Per-template maxima of the on-grid projection SNR above threshold.

    With ``groups`` (:class:`ringsearch.search.subspace.TemplateGroups` of
    these templates and data) the data are correlated with each group's
    principal functions instead of every template's basis, and every member
    is evaluated exactly wherever the group's bound reaches the threshold
    (:mod:`ringsearch.search.subspace`): the same peaks, from a ninth of the
    correlations on the target bank.  Groups whose bound would be reached
    too often at this threshold (:func:`~ringsearch.search.subspace.worth_grouping`)
    are filtered template by template, as is everything without ``groups``:
    one correlation per basis function.

    With ``regions`` (a SegmentList of GPS start times) only start times in
    them are filtered, each region widened to whole time bins and correlated
    in short chunks of its own: the maxima of a bin are those of the whole
    series (the same correlations, of the same data), at a cost that follows
    the regions' length instead of the data's.

    ``weighted`` is the doubly whitened series ``x = H w`` of
    :func:`ringsearch.search.probe.doubly_whitened` and ``grams`` the
    templates' factored Gram matrices (:func:`ringsearch.search.templates.template_grams`).
    The correlations are ``z_j(t0) = sum_m x[t0 + m] u_j[m]`` with the raw
    sampled basis u, computed by FFT over chunks that overlap by the longest
    template only (the whitening is already in x), and ``rho^2 = |C^{-1} z|^2``.

    Returns ``(peaks, templates)``: one row per (template, time bin of width
    ``bin_s`` aligned on global sample numbers) whose maximum exceeds
    ``snr_threshold``, with columns ``template_index, sample, gps, snr_grid``;
    and one row per template with ``cond_gram`` and ``refused`` (reason, or "").
    ``templates.attrs["analysed_s"]`` is the number of seconds of valid start
    times filtered.  The correlations run in single precision by default
    (``precision="double"`` for checking): the peaks are only *found* here,
    and every reported number is computed again by the probe in double
    precision.

    Examples
    --------
    >>> peaks, tmpl = filter_peaks(cond, bank.f_hz, bank.tau_s, 5.0, 0.05,
    ...                            weighted=x, grams=grams)  # doctest: +SKIP
    """
    vals, fs, t0 = data_arrays(cond)
    x = np.asarray(weighted, float)
    f = np.atleast_2d(np.asarray(f_hz, float))
    tau = np.atleast_2d(np.asarray(tau_s, float))
    nt, k = f.shape
    k2 = 2 * k
    longest = float(DECAY_TIMES * tau.max())
    plan = plan_chunks(vals.size, fs, longest, 0, chunk_s)
    ok_t0 = start_mask(cond, longest, gps_window)
    wbin = max(1, int(round(bin_s * fs)))
    spans: list[tuple[int, int]] = []
    if regions is not None:
        from ringsearch.data.segments import sample_range

        inside = np.zeros(vals.size, bool)
        for seg in regions:
            a, b = sample_range(seg, t0, fs)
            a, b = max((a // wbin) * wbin, 0), min(-(-b // wbin) * wbin, vals.size)
            if b > a:
                inside[a:b] = True
        ok_t0 &= inside
        edges = np.flatnonzero(np.diff(np.concatenate(([0], inside.view(np.int8), [0]))))
        spans = list(zip(edges[::2].tolist(), edges[1::2].tolist(), strict=True))
        if not ok_t0.any():
            empty = pd.DataFrame({"template_index": pd.Series(dtype=int),
                                  "sample": pd.Series(dtype=np.int64),
                                  "gps": pd.Series(dtype=float),
                                  "snr_grid": pd.Series(dtype=float)})
            templates = pd.DataFrame({"cond_gram": grams.cond, "refused": grams.reason})
            templates.attrs["analysed_s"] = 0.0
            return empty, templates
    if not ok_t0.any():
        raise InputError(f"no analysable time of {getattr(cond, 'detector', '?')} is long "
                         "enough for the longest template (inside the GPS window).")
    if precision not in ("single", "double"):
        raise InputError(f"precision must be 'single' or 'double', got {precision!r}.")
    real = np.float32 if precision == "single" else np.float64
    cplx = np.complex64 if precision == "single" else np.complex128
    # chunks start on bin boundaries and hold whole bins, so no bin is split between two
    # chunks and a bin's maximum is the same however the data are chunked
    if spans:
        # short chunks of one length per call (templates' spectra are shared), covering
        # each region; a chunk holds at most 8 s of start times
        widest = min(max(b - a for a, b in spans), int(8 * fs))
        n_fft = scipy.fft.next_fast_len(-(-widest // wbin) * wbin + plan.tail, real=True)
        plan = FilterPlan(n_fft, n_fft - plan.tail, 0, plan.tail, 0)
    else:
        valid = np.flatnonzero(ok_t0)
        spans = [((valid[0] // wbin) * wbin, valid[-1] + 1)]
        if plan.n_chunks == 1 and spans[0][1] - spans[0][0] + plan.tail + wbin < \
                0.5 * plan.n_fft:
            # one FFT over the whole data would be mostly wasted: re-plan on the valid span
            plan = plan_chunks(spans[0][1] - spans[0][0] + wbin, fs, longest, 0, chunk_s)
    step = max(wbin, (plan.step // wbin) * wbin)
    plan = FilterPlan(plan.n_fft, step, 0, plan.tail, 0)
    starts = [st for a, b in spans for st in range(a, b, step)]
    if batch is None:
        # keep the (batch, 2K, n_fft) correlation block near 32 MB
        batch = int(max(1, min(256, (8 // np.dtype(real).itemsize) * 4_000_000
                               // (k2 * plan.n_fft))))
    thr2 = float(snr_threshold) ** 2
    singles = np.arange(nt)  # templates filtered one by one, the rest in their groups
    if groups is not None:
        from ringsearch.search.subspace import worth_grouping

        use = worth_grouping(groups, k2, float(snr_threshold))
        grouped = np.flatnonzero(use).tolist()
        singles = np.sort(np.concatenate([np.flatnonzero(~grams.ok)]
                                         + [groups.members[g] for g in np.flatnonzero(~use)]))
    reach = filter_length(cond) if groups is not None else 0
    out: list[np.ndarray] = []
    from tqdm import tqdm

    # chunks whose FFTs share one pass over the templates: at least block_chunks, more
    # while the block's spectra stay near 64 MB (short chunks of regions)
    per_block = max(block_chunks, int(BLOCK_BYTES // (plan.n_fft * np.dtype(cplx).itemsize)))
    blocks = [starts[i:i + per_block] for i in range(0, len(starts), per_block)]
    bar = tqdm(total=len(blocks) * nt, desc=f"filtering {getattr(cond, 'detector', '')}",
               unit=" templates", disable=not progress, leave=False)
    n_sup = min(plan.n_fft, plan.tail + 2)
    run = _Pass(x=x, vals=vals, plan=plan, ok_t0=ok_t0, wbin=wbin, thr2=thr2, real=real,
                n_sup=n_sup, fs=fs)
    for bstarts in blocks:
        # FFT each data chunk of this block once; every template reuses it
        chunks = np.stack([_load_chunk(x, s, plan.n_fft) for s in bstarts])
        wspec = scipy.fft.rfft(chunks, axis=-1).astype(cplx)
        for idx in _iter_batches(singles.size, batch):
            out += run.templates(singles[idx], f, tau, grams, bstarts, wspec)
            bar.update(len(idx))
        if groups is not None:
            # start times flagged in this block, evaluated exactly before the next one (a
            # bin lies in one chunk, so in one block; memory follows the block, not the data)
            flagged: dict[int, list[np.ndarray]] = {}
            for gidx in _group_batches(groups, grouped, 2 * batch * k2):
                for g, samples in run.groups(gidx, groups, bstarts, wspec, reach):
                    flagged.setdefault(g, []).append(samples)
                bar.update(sum(len(groups.members[g]) for g in gidx))
            out += run.exact(groups, grams, f, tau, flagged)
    bar.close()
    arr = _bin_maxima(np.concatenate(out) if out else np.empty((0, 3)), wbin)
    peaks = pd.DataFrame({"template_index": arr[:, 0].astype(int),
                          "sample": arr[:, 1].astype(np.int64)})
    peaks["gps"] = t0 + peaks["sample"].to_numpy() / fs
    peaks["snr_grid"] = np.sqrt(arr[:, 2])
    peaks = peaks.sort_values(["sample", "template_index"], kind="stable").reset_index(drop=True)
    templates = pd.DataFrame({"cond_gram": grams.cond, "refused": grams.reason})
    templates.attrs["analysed_s"] = float(ok_t0.sum()) / fs
    return peaks, templates


def _group_batches(groups: Any, which: list[int], rows: int):
    """Consecutive groups of ``which`` whose principal functions total about ``rows``."""
    batch, n = [], 0
    for g in which:
        batch.append(g)
        n += groups.basis[g].shape[0]
        if n >= rows:
            yield batch
            batch, n = [], 0
    if batch:
        yield batch


def _bin_maxima(arr: np.ndarray, wbin: int) -> np.ndarray:
    """Rows (template, sample, rho^2) reduced to the largest per template and time bin."""
    if arr.shape[0] == 0:
        return arr
    tmpl, bins = arr[:, 0].astype(np.int64), arr[:, 1].astype(np.int64) // wbin
    order = np.lexsort((-arr[:, 2], bins, tmpl))
    t, b = tmpl[order], bins[order]
    first = np.ones(order.size, bool)
    first[1:] = (t[1:] != t[:-1]) | (b[1:] != b[:-1])
    return arr[order[first]]


@dataclass
class _Pass:
    """One call's data and plan, shared by the per-template and the grouped correlations."""

    x: np.ndarray
    vals: np.ndarray
    plan: Any
    ok_t0: np.ndarray
    wbin: int
    thr2: float
    real: Any
    n_sup: int
    fs: float

    def _chunk_mask(self, s: int) -> np.ndarray | None:
        b_rel = min(self.plan.step, self.vals.size - s)
        if b_rel <= 0:
            return None
        mask = self.ok_t0[s:s + b_rel]
        return mask if mask.any() else None

    def templates(self, idx: np.ndarray, f: np.ndarray, tau: np.ndarray, grams: Any,
                  bstarts: list[int], wspec: np.ndarray) -> list[np.ndarray]:
        """Bin maxima above threshold of a batch of templates, one correlation per function."""
        good = idx[grams.ok[idx]]
        if good.size == 0:
            return []
        n_fft, wbin = self.plan.n_fft, self.wbin
        # the orthonormal basis C^{-1} u (raw u from sample 0), so the correlations are
        # the projection coordinates y themselves; C^{-1} is real, so it is applied to
        # the short waveforms before their FFT rather than to the spectra
        u = np.matmul(grams.cinv[good], basis_waveforms(f[good], tau[good], self.n_sup, self.fs))
        spec = np.conj(scipy.fft.rfft(u.astype(self.real), n_fft, axis=-1))
        out = []
        for c, s in enumerate(bstarts):
            # valid starts of this chunk: global [s, s + step) = relative [0, step)
            mask = self._chunk_mask(s)
            if mask is None:
                continue
            y = scipy.fft.irfft(spec * wspec[c], n_fft, axis=-1)[:, :, :mask.size]
            rho2 = np.einsum("bij,bij->bj", y, y)
            rho2[:, ~mask] = -1.0
            # maxima per time bin aligned on global sample numbers (chunks start on
            # bin boundaries: only a last, partial bin needs padding)
            lead = s - (s // wbin) * wbin
            nb = math.ceil((lead + rho2.shape[1]) / wbin)
            if lead or nb * wbin != rho2.shape[1]:
                padded = np.full((rho2.shape[0], nb * wbin), -1.0, rho2.dtype)
                padded[:, lead:lead + rho2.shape[1]] = rho2
                rho2 = padded
            binned = rho2.reshape(rho2.shape[0], nb, wbin)
            arg = binned.argmax(axis=-1)
            peak = np.take_along_axis(binned, arg[..., None], -1)[..., 0]
            ti, bi = np.nonzero(peak > self.thr2)
            if ti.size:
                rel = bi * wbin + arg[ti, bi] - lead  # index from the chunk's start
                out.append(np.column_stack([good[ti], s + rel,
                                            peak[ti, bi].astype(np.float64)]))
        return out

    def groups(self, gidx: list[int], groups: Any, bstarts: list[int], wspec: np.ndarray,
               reach: int):
        """(group, global start samples) where a group's bound reaches the threshold."""
        from ringsearch.search.subspace import energy_sums, member_bound, reach_quantiles

        n_fft = self.plan.n_fft
        basis = np.zeros((sum(groups.basis[g].shape[0] for g in gidx), self.n_sup), self.real)
        rows = np.cumsum([0] + [groups.basis[g].shape[0] for g in gidx])
        for i, g in enumerate(gidx):
            b = groups.basis[g]  # no longer than the longest template (n_sup samples)
            basis[rows[i]:rows[i + 1], :b.shape[1]] = b
        spec = np.conj(scipy.fft.rfft(basis, n_fft, axis=-1))
        thr = math.sqrt(self.thr2)
        spans = np.array([int(groups.length[g]) + 2 * reach for g in gidx])
        quant = np.array([reach_quantiles(int(groups.residual_dof[g]), int(span))
                          for g, span in zip(gidx, spans, strict=True)])  # (G, 2)
        eps = groups.eps[gidx][:, None]
        longest = int(max(groups.length[g] for g in gidx))
        for c, s in enumerate(bstarts):
            mask = self._chunk_mask(s)
            if mask is None:
                continue
            n = mask.size
            b2 = scipy.fft.irfft(spec * wspec[c], n_fft, axis=-1)[:, :n]
            b2 = np.add.reduceat(b2 * b2, rows[:-1], axis=0).astype(np.float64)  # (G, n)
            cs = energy_sums(self.vals, s, n, longest, reach)
            energy = cs[spans[:, None] + np.arange(n)] - cs[:n]  # (G, n)
            reach_g = quant[:, :1] + np.sqrt(np.maximum(energy - quant[:, 1:], 0.0))
            bound = member_bound(b2, reach_g, eps)  # every group at once
            gi, ti = np.nonzero((bound >= thr) & mask)
            if gi.size:
                cuts = np.flatnonzero(np.diff(gi)) + 1
                for part_g, part_t in zip(np.split(gi, cuts), np.split(ti, cuts), strict=True):
                    yield gidx[int(part_g[0])], s + part_t

    def exact(self, groups: Any, grams: Any, f: np.ndarray, tau: np.ndarray,
              flagged: dict[int, list[np.ndarray]]) -> list[np.ndarray]:
        """Rows (template, sample, rho^2) above threshold at the flagged start samples."""
        from ringsearch.search.subspace import exact_rho2

        out = []
        for g, parts in flagged.items():
            samples = np.unique(np.concatenate(parts))
            members = groups.members[g]
            length = int(groups.length[g])
            basis = basis_waveforms(f[members], tau[members], length, self.fs)
            rho2 = exact_rho2(self.x, samples, basis, grams.cinv[members])
            si, mi = np.nonzero(rho2 > self.thr2)
            if si.size:
                out.append(np.column_stack([members[mi], samples[si], rho2[si, mi]]))
        return out


def default_cluster_window(bank: Any) -> float:
    """Longest template of the bank, clipped to [0.05, 1] s.

    Examples
    --------
    >>> default_cluster_window(bank)  # doctest: +SKIP
    0.05
    """
    return float(np.clip(bank.duration_s.max(), 0.05, 1.0))


# --------------------------------------------------------------------------- one template
@dataclass
class SnrSeries:
    """Projection SNR of one template against start time.

    ``gps``: start times t0; ``snr``: projection SNR; ``amplitudes``: complex
    ML amplitude per mode (n_times, K); ``cond_gram``: condition number.
    """

    gps: np.ndarray
    snr: np.ndarray
    amplitudes: np.ndarray
    cond_gram: float


def snr_series(cond: Any, f_hz: Any, tau_s: Any, *, gps_start: float | None = None,
               gps_end: float | None = None, max_cond: float = MAX_COND) -> SnrSeries:
    """Projection SNR of one template (modes ``f_hz``, ``tau_s``) at every valid start time.

    Start times outside analysable time or too close to the data edges are
    left out (they are not NaN-filled).

    Examples
    --------
    >>> s = snr_series(cond, [251.0, 242.0], [0.0041, 0.0013])  # doctest: +SKIP
    >>> s.gps[s.snr.argmax()]  # doctest: +SKIP
    """
    vals, fs, t0 = data_arrays(cond)
    f, tau = one_template(f_hz, tau_s)
    pad = filter_length(cond)
    longest = float(DECAY_TIMES * tau.max())
    plan = plan_chunks(vals.size, fs, longest, pad)
    ok_t0 = start_mask(cond, longest)
    prep = prepare_templates(f, tau, response_on(cond, plan.n_fft, fs), plan.n_fft, fs, max_cond)
    if not prep.ok[0]:
        raise InputError(f"template refused: {prep.reason[0]}.")
    cinv = prep.cinv[0]
    cinv_t = cinv.T
    lo = 0 if gps_start is None else int(math.floor((gps_start - t0) * fs))
    hi = vals.size if gps_end is None else int(math.ceil((gps_end - t0) * fs))
    gps, snr, amps = [], [], []
    for c in range(plan.n_chunks):
        s = c * plan.step - plan.pad
        a_rel, b_rel = plan.pad, min(plan.pad + plan.step, vals.size - s)
        a_rel, b_rel = max(a_rel, lo - s), min(b_rel, hi - s)
        if b_rel <= a_rel:
            continue
        seg = _load_chunk(vals, s, plan.n_fft)
        z = scipy.fft.irfft(prep.spectra[0] * scipy.fft.rfft(seg), plan.n_fft, axis=-1)
        keep = ok_t0[s + a_rel:s + b_rel]
        yy = cinv @ z[:, a_rel:b_rel][:, keep]
        gps.append(t0 + (s + np.arange(a_rel, b_rel)[keep]) / fs)
        snr.append(np.sqrt((yy * yy).sum(axis=0)))
        a = cinv_t @ yy
        amps.append((a[0::2] + 1j * a[1::2]).T)
    if not gps:
        raise InputError("no valid start time of the template lies in the requested window.")
    return SnrSeries(np.concatenate(gps), np.concatenate(snr), np.concatenate(amps),
                     float(prep.cond[0]))


def projection_snr(cond: Any, f_hz: Any, tau_s: Any, gps: float, *,
                   max_cond: float = MAX_COND) -> dict:
    """Projection SNR and ML mode amplitudes of one template starting exactly at ``gps``.

    The start time need not fall on a sample: the template is sampled with
    the sub-sample offset.  Returns ``{"snr", "amplitudes" (complex, one per
    mode), "cond_gram", "gps", "gram"}``; ``gram`` is G (2K x 2K, basis order
    cos_0, sin_0, cos_1, ...), so in Gaussian noise the real amplitude vector
    ``(Re A_0, Im A_0, ...)`` has covariance ``G^{-1}``.  In Gaussian noise
    ``snr**2`` is chi-squared with 2K degrees of freedom (non-central with
    ``rho_opt**2`` with a signal).

    Examples
    --------
    >>> r = projection_snr(cond, [251.0], [0.004], 1126259462.423)  # doctest: +SKIP
    >>> r["snr"]  # doctest: +SKIP
    """
    vals, fs, t0 = data_arrays(cond)
    f, tau = one_template(f_hz, tau_s)
    pad = filter_length(cond)
    tail = template_samples(tau, fs)
    x = (float(gps) - t0) * fs
    k = int(math.ceil(x - 1e-9))
    offset = (x - k) / fs  # sample k is (k - x)/fs after the start
    n_fft = scipy.fft.next_fast_len(tail + 2 * pad + 2)
    a = k - pad
    if k < 0 or k + tail > vals.size:
        raise InputError(f"start time {gps} is outside the data or too close to its end.")
    ok = start_mask(cond, float(DECAY_TIMES * tau.max()))
    if not ok[k]:
        raise InputError(f"start time {gps} is not in analysable time.")
    prep = prepare_templates(f, tau, response_on(cond, n_fft, fs), n_fft, fs, max_cond, offset)
    if not prep.ok[0]:
        raise InputError(f"template refused: {prep.reason[0]}.")
    # the whitened template, shifted to sample k inside the segment
    e = scipy.fft.irfft(np.conj(prep.spectra[0]), n_fft, axis=-1)
    e = np.roll(e, pad, axis=-1)
    z = e @ _load_chunk(vals, a, n_fft)
    y = prep.cinv[0] @ z
    amp = np.linalg.solve(prep.chol[0].T, y)
    return {"snr": float(np.sqrt(y @ y)), "amplitudes": amp[0::2] + 1j * amp[1::2],
            "cond_gram": float(prep.cond[0]), "gps": float(gps),
            "gram": prep.chol[0] @ prep.chol[0].T}
