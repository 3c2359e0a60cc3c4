"""Matched filter: FFT correlations of whitened data with ringdown templates, projection SNR.

For a template with K = N+1 modes the real basis is
``u_{2n}(t) = e^{-t/tau_n} cos(2 pi f_n t)``, ``u_{2n+1}(t) = e^{-t/tau_n} sin(2 pi f_n t)``
for t >= 0 (zero before the start time t0).  The data layer's contract
(DEVELOPERS.md) gives ``<d, u> = sum_j w[j] * irfft(rfft(u) H)[j]`` with ``w``
the whitened data and ``H`` its filter response, so on each chunk of L samples

* the whitened basis spectra are ``V_j = rfft(u_j) H``, the Gram matrix
  ``G_jk = <u_j, u_k> = (1/L) sum' Re V_j conj(V_k)`` (Parseval, independent of t0);
* with ``G = C C^T`` (Cholesky) the orthonormal spectra are ``E = C^{-1} V``;
* ``y(t0) = irfft(W conj(E))`` (one inverse FFT per basis function per chunk,
  the chunk's FFT W reused by every template) and ``rho^2 = |y|^2 = z^T G^{-1} z``;
* the maximum-likelihood amplitudes are ``a = C^{-T} y``.  For mode n the
  complex amplitude is ``A_n = a_{2n} + i a_{2n+1}``, so that the fitted signal is
  ``sum_n Re[A_n e^{-i 2 pi f_n (t - t0)}] e^{-(t - t0)/tau_n}`` (the
  ``exp(-i omega t)`` convention of DESIGN.md), in the units of the raw strain.

Chunks overlap by the longest template plus twice the whitening filter's
length, and only start times whose correlation does not wrap around the chunk
are kept, so the result equals a linear correlation and memory stays bounded
for any duration.  Only start times inside analysable time (with the whole
template inside the same analysable segment) produce triggers.
"""

from __future__ import annotations

import math
import weakref
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import scipy.fft

from ringsearch.errors import InputError
from ringsearch.search.bank import DECAY_TIMES, Bank

#: Templates whose normalised Gram matrix (correlation matrix of the basis) has a
#: condition number above this are refused: their modes cannot be separated.
MAX_COND: float = 1e8


# --------------------------------------------------------------------------- templates
def basis_waveforms(f_hz: np.ndarray, tau_s: np.ndarray, n_samples: int, sample_rate: float,
                    offset_s: float | np.ndarray = 0.0,
                    duration_s: float | np.ndarray | None = None) -> np.ndarray:
    """Sampled real basis ``[cos_0, sin_0, cos_1, ...]`` of templates, shape (..., 2K, n_samples).

    ``f_hz``/``tau_s`` have shape (..., K).  Sample j is at time
    ``j / sample_rate - offset_s`` after the template start; samples before the
    start or after ``duration_s`` (default DECAY_TIMES * max tau) are zero.

    Examples
    --------
    >>> u = basis_waveforms(np.array([250.0]), np.array([0.004]), 64, 4096.0)
    >>> u.shape, float(u[0, 0])
    ((2, 64), 1.0)
    """
    f0 = np.asarray(f_hz, float)
    tau0 = np.asarray(tau_s, float)
    dur = DECAY_TIMES * tau0.max(axis=-1) if duration_s is None else np.asarray(duration_s, float)
    off = np.asarray(offset_s, float)
    t = np.arange(n_samples) / sample_rate - off[..., None]  # (batch..., n)
    t = t[..., None, :]  # (batch..., 1, n)
    on = (t >= 0) & (t < dur[..., None, None])
    f, tau = f0[..., None], tau0[..., None]  # (batch..., K, 1)
    env = np.where(on, np.exp(-np.where(on, t, 0.0) / tau), 0.0)
    ph = 2 * np.pi * f * t
    out = np.empty(np.broadcast_shapes(env.shape, ph.shape)[:-2] + (2 * f.shape[-2], n_samples))
    out[..., 0::2, :] = env * np.cos(ph)
    out[..., 1::2, :] = env * np.sin(ph)
    return out


@dataclass
class PreparedTemplates:
    """Whitened, orthonormalised template spectra on one FFT grid (one detector).

    ``spectra``: (B, 2K, n_freq) conjugated whitened basis spectra ``conj(V)``,
    so ``z = irfft(W * spectra)`` are the correlations ``<d, u_j(. - t0)>``;
    ``chol``: (B, 2K, 2K) Cholesky factors C of G (``cinv`` = C^{-1}, so
    ``y = cinv @ z`` is orthonormal and ``rho^2 = |y|^2``); ``cond``: normalised-Gram
    condition numbers; ``ok``: templates accepted; ``reason``: why refused.
    """

    spectra: np.ndarray
    chol: np.ndarray
    cinv: np.ndarray
    cond: np.ndarray
    ok: np.ndarray
    reason: list[str]
    sigma: np.ndarray  # (B, 2K) norms sqrt(G_jj) of the basis functions


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
    n_sup = min(n_fft, int(math.ceil(DECAY_TIMES * tau.max() * sample_rate)) + 2)
    u = basis_waveforms(f, tau, n_sup, sample_rate, offset_s)
    v = scipy.fft.rfft(u, n=n_fft, axis=-1) * response
    # Parseval with rfft weights (1 for DC and Nyquist, 2 otherwise), as one batched
    # complex matrix product (BLAS) plus the two edge corrections
    vf = v.view(np.float64)  # interleaved (re, im): Re(a conj b) is a real dot product
    gram = np.empty(v.shape[:2] + (v.shape[1],))
    for i in range(v.shape[0]):
        gram[i] = 2.0 * (vf[i] @ vf[i].T)
    gram -= np.einsum("bi,bj->bij", v[..., 0], v[..., 0].conj()).real
    if n_fft % 2 == 0:
        gram -= np.einsum("bi,bj->bij", v[..., -1], v[..., -1].conj()).real
    gram /= n_fft
    sig = np.sqrt(np.clip(np.einsum("bii->bi", gram), 0, None))
    b, k2 = gram.shape[:2]
    cond = np.full(b, np.inf)
    ok = np.zeros(b, bool)
    reason = [""] * b
    chol = np.zeros_like(gram)
    eye = np.eye(k2)
    for i in range(b):
        if np.any(sig[i] <= 0):
            reason[i] = "a mode has no power inside [f_low, f_high]"
            continue
        corr = gram[i] / np.outer(sig[i], sig[i])
        ev = np.linalg.eigvalsh(corr)
        cond[i] = ev[-1] / ev[0] if ev[0] > 0 else np.inf
        if not cond[i] <= max_cond:
            reason[i] = (f"Gram matrix numerically singular (condition number {cond[i]:.3g} "
                         f"> {max_cond:.0e}): its modes cannot be separated by the data")
            continue
        try:
            chol[i] = np.linalg.cholesky(gram[i])
        except np.linalg.LinAlgError:
            reason[i] = "Gram matrix not positive definite"
            continue
        ok[i] = True
    cinv = np.zeros_like(chol)
    for i in np.flatnonzero(ok):
        cinv[i] = np.linalg.solve(chol[i], eye)
    # conj(V) in place (flip the imaginary parts of the interleaved view).  The
    # orthonormalisation C^{-1} is applied to the correlations in the time domain, on
    # the valid start times only, which is cheaper than forming C^{-1} V here.
    vf[..., 1::2] *= -1.0
    return PreparedTemplates(v, chol, cinv, cond, ok, reason, sig)


# --------------------------------------------------------------------------- data access
def _data_arrays(cond: Any) -> tuple[np.ndarray, float, float]:
    w = cond.whitened
    vals = np.asarray(getattr(w, "value", w), float)
    fs = float(cond.sample_rate.value if hasattr(cond.sample_rate, "value") else cond.sample_rate)
    t0 = float(w.t0.value if hasattr(w.t0, "value") else w.t0)
    if not np.all(np.isfinite(vals)):
        raise InputError(f"whitened data of {getattr(cond, 'detector', '?')} contains NaN or "
                         "infinite samples; condition the data first.")
    return vals, fs, t0


def _response(cond: Any, n_fft: int, fs: float) -> np.ndarray:
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
    vals, fs, _ = _data_arrays(cond)
    n = n_fft or scipy.fft.next_fast_len(min(vals.size, int(16 * fs)))
    h = scipy.fft.irfft(_response(cond, n, fs), n)
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


def _analysable_mask(cond: Any, n: int, fs: float, t0: float, tail: int) -> np.ndarray:
    """True at start samples whose template (``tail`` samples) lies in one analysable segment."""
    mask = np.zeros(n, bool)
    for seg in cond.analysable:
        a = int(math.ceil((float(seg[0]) - t0) * fs - 1e-6))
        b = int(math.floor((float(seg[1]) - t0) * fs + 1e-6)) - tail
        a, b = max(a, 0), min(b, n)
        if b > a:
            mask[a:b] = True
    return mask


def _window_mask(n: int, fs: float, t0: float, window: tuple[float, float]) -> np.ndarray:
    """True at samples whose time lies in [window[0], window[1])."""
    t = t0 + np.arange(n) / fs
    return (t >= float(window[0])) & (t < float(window[1]))


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


def filter_candidates(cond: Any, f_hz: np.ndarray, tau_s: np.ndarray, snr_threshold: float,
                      bin_s: float, *, chunk_s: float | None = None, batch: int | None = None,
                      max_cond: float = MAX_COND, progress: bool = False,
                      block_chunks: int = 32, gps_window: tuple[float, float] | None = None
                      ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Per-template maxima of the projection SNR above threshold (before clustering).

    Returns ``(candidates, templates)``: one row per (template, time bin of
    width ``bin_s``) whose maximum exceeds the threshold, with columns
    ``template_index, sample, gps, snr, a0..a{2K-1}`` (ML real amplitudes), and
    one row per template with ``cond_gram``, ``refused`` (reason or "").
    """
    vals, fs, t0 = _data_arrays(cond)
    f = np.atleast_2d(np.asarray(f_hz, float))
    tau = np.atleast_2d(np.asarray(tau_s, float))
    nt, k = f.shape
    k2 = 2 * k
    longest = float(DECAY_TIMES * tau.max())
    pad = filter_length(cond)
    plan = plan_chunks(vals.size, fs, longest, pad, chunk_s)
    ok_t0 = _analysable_mask(cond, vals.size, fs, t0, plan.tail)
    if gps_window is not None:
        ok_t0 &= _window_mask(vals.size, fs, t0, gps_window)
    if not ok_t0.any():
        raise InputError(f"no analysable time of {getattr(cond, 'detector', '?')} is long "
                         "enough for the longest template (inside the GPS window).")
    # only chunks holding valid start times are filtered (e.g. a short GPS window)
    valid = np.flatnonzero(ok_t0)
    first_c, last_c = valid[0] // plan.step, valid[-1] // plan.step
    if plan.n_chunks == 1 and valid[-1] - valid[0] + plan.tail + 2 * plan.pad + 1 < \
            0.5 * plan.n_fft:
        # one FFT over the whole data would be mostly wasted: re-plan on the valid span
        sub = plan_chunks(valid[-1] - valid[0] + 1, fs, longest, pad, chunk_s)
        offset = valid[0]
        plan = FilterPlan(sub.n_fft, sub.step, pad, sub.tail, sub.n_chunks)
        first_c, last_c = 0, sub.n_chunks - 1
    else:
        offset = 0
    resp = _response(cond, plan.n_fft, fs)
    if batch is None:
        # keep the (batch, 2K, n_fft) float64 correlation block near 32 MB
        batch = int(max(1, min(256, 4_000_000 // (k2 * plan.n_fft))))
    wbin = max(1, int(round(bin_s * fs)))
    thr2 = float(snr_threshold) ** 2
    out: list[np.ndarray] = []
    cond_g = np.full(nt, np.inf)
    refused = [""] * nt
    from tqdm import tqdm

    starts = [offset + c * plan.step for c in range(first_c, last_c + 1)]
    blocks = [starts[i:i + block_chunks] for i in range(0, len(starts), block_chunks)]
    bar = tqdm(total=len(blocks) * nt, desc=f"filtering {getattr(cond, 'detector', '')}",
               unit=" templates", disable=not progress, leave=False)
    for bstarts in blocks:
        # FFT each data chunk of this block once; every template reuses it
        chunks = np.stack([_load_chunk(vals, s - plan.pad, plan.n_fft) for s in bstarts])
        wspec = scipy.fft.rfft(chunks, axis=-1)
        for idx in _iter_batches(nt, batch):
            prep = prepare_templates(f[idx], tau[idx], resp, plan.n_fft, fs, max_cond)
            cond_g[idx] = prep.cond
            for j, i in enumerate(idx):
                refused[i] = prep.reason[j]
            good = np.flatnonzero(prep.ok)
            if good.size == 0:
                bar.update(len(idx))
                continue
            spec = prep.spectra[good]
            cinv = prep.cinv[good]
            cinv_t = np.swapaxes(cinv, -1, -2)  # C^{-T}: amplitudes a = C^{-T} y
            for c, v in enumerate(bstarts):
                # valid starts of this chunk: global [v, v + step) = relative [pad, pad + step)
                s = v - plan.pad  # global sample of the chunk's first element
                a_rel = plan.pad
                b_rel = min(plan.pad + plan.step, vals.size - s)
                if b_rel <= a_rel:
                    continue
                g0 = s + a_rel
                mask = ok_t0[g0:s + b_rel]
                if not mask.any():
                    continue
                z = scipy.fft.irfft(spec * wspec[c], plan.n_fft, axis=-1)  # (b, 2K, n_fft)
                y = np.einsum("bij,bjt->bit", cinv, z[:, :, a_rel:b_rel])
                rho2 = np.einsum("bij,bij->bj", y, y)
                rho2[:, ~mask] = -1.0
                # maxima per time bin aligned on global sample numbers
                first = (g0 // wbin) * wbin
                lead = g0 - first
                nb = math.ceil((lead + rho2.shape[1]) / wbin)
                padded = np.full((rho2.shape[0], nb * wbin), -1.0)
                padded[:, lead:lead + rho2.shape[1]] = rho2
                binned = padded.reshape(rho2.shape[0], nb, wbin)
                arg = binned.argmax(axis=-1)
                peak = np.take_along_axis(binned, arg[..., None], -1)[..., 0]
                ti, bi = np.nonzero(peak > thr2)
                if ti.size == 0:
                    continue
                rel = bi * wbin + arg[ti, bi] - lead  # index into y (from a_rel)
                yv = y[ti, :, rel]  # (m, 2K)
                amp = np.einsum("mij,mj->mi", cinv_t[ti], yv)
                gsamp = s + a_rel + rel
                out.append(np.column_stack([idx[good[ti]], gsamp, peak[ti, bi], amp]))
            bar.update(len(idx))
    bar.close()
    cols = ["template_index", "sample", "rho2"] + [f"a{j}" for j in range(k2)]
    arr = np.concatenate(out) if out else np.empty((0, len(cols)))
    cand = pd.DataFrame(arr, columns=cols)
    cand["template_index"] = cand["template_index"].astype(int)
    cand["sample"] = cand["sample"].astype(np.int64)
    cand["gps"] = t0 + cand["sample"].to_numpy() / fs
    cand["snr"] = np.sqrt(cand.pop("rho2"))
    templates = pd.DataFrame({"cond_gram": cond_g, "refused": refused})
    analysed = float(ok_t0.sum()) / fs
    templates.attrs["analysed_s"] = analysed
    return cand, templates


def matched_filter(cond: Any, bank: Bank, snr_threshold: float = 5.0, *,
                   cluster_window_s: float | None = None, chunk_s: float | None = None,
                   max_cond: float = MAX_COND, progress: bool = False,
                   gps_window: tuple[float, float] | None = None,
                   return_maxima: bool = False, veto_bins: int | None = None,
                   veto_domain: str = "time"
                   ) -> pd.DataFrame | tuple[pd.DataFrame, pd.DataFrame]:
    """Filter one detector's conditioned data with a bank; return clustered triggers.

    Parameters
    ----------
    cond : ConditionedData
        Output of :func:`ringsearch.data.condition.condition` (or anything with
        ``detector, sample_rate, whitened, analysable, filter_response``).
    bank : Bank
        Templates to correlate.
    snr_threshold : float
        Keep maxima with projection SNR above this.
    cluster_window_s : float, optional
        Time window of the clustering (default: the bank's longest template,
        clipped to [0.05, 1] s); one trigger per window across the bank.
    chunk_s : float, optional
        Target FFT chunk length in seconds (default 4 s, at least four times
        the longest template plus filter).
    gps_window : (start, end), optional
        Only start times in this window make triggers (the data around it is
        still used).
    return_maxima : bool
        Also return the unclustered per-template maxima (``gps``,
        ``template_index``, ``snr``; one per template and half cluster window),
        which the network statistic uses to find one template for all detectors.
        With the veto on they also carry ``snr_reweighted``.
    veto_bins : int, optional
        Number p of frequency bands of the signal-consistency chi-squared
        (:mod:`ringsearch.search.veto`).  When given, the chi-squared is
        computed at every per-template maximum above threshold (not at every
        sample) and the clustering keeps the largest *re-weighted* SNR.  None
        (default here; :func:`~ringsearch.search.pipeline.run_search` turns it
        on) clusters on the raw SNR and leaves ``chisq`` NaN.
    veto_domain : {"time", "frequency"}
        Split of the template for the chi-squared: time slices or frequency bands.

    Returns
    -------
    DataFrame
        One row per clustered trigger; columns documented in
        :mod:`ringsearch.search.triggers`.  ``attrs`` hold ``analysed_s``,
        ``refused`` (list of ``{template_id, cond_gram, refused}`` records),
        ``veto_bins`` and ``veto_cpu_s`` (CPU time of the chi-squared).

    Examples
    --------
    >>> trig = matched_filter(cond, bank, snr_threshold=6.0)  # doctest: +SKIP
    >>> trig.sort_values("snr").iloc[-1][["gps", "snr", "mass_msun"]]  # doctest: +SKIP
    """
    from ringsearch.search.triggers import cluster_triggers, trigger_table

    if not snr_threshold > 0:
        raise InputError(f"SNR threshold must be positive, got {snr_threshold}.")
    window = default_cluster_window(bank) if cluster_window_s is None else float(cluster_window_s)
    if not window > 0:
        raise InputError(f"cluster window must be positive, got {cluster_window_s}.")
    if veto_bins is not None:
        from ringsearch.search.veto import check_bins, check_domain

        veto_bins = check_bins(veto_bins)
        veto_domain = check_domain(veto_domain)
    cand, templates = filter_candidates(cond, bank.f_hz, bank.tau_s, snr_threshold,
                                        window / 2, chunk_s=chunk_s, max_cond=max_cond,
                                        progress=progress, gps_window=gps_window)
    veto_cpu = 0.0
    if veto_bins is not None:
        import time

        from ringsearch.search.veto import candidate_chisq, reweighted_snr

        c0 = time.process_time()
        chi2, dof = candidate_chisq(cond, bank.f_hz, bank.tau_s,
                                    cand["template_index"].to_numpy(int),
                                    cand["sample"].to_numpy(np.int64), veto_bins, veto_domain)
        veto_cpu = time.process_time() - c0
        cand["chisq"] = chi2
        cand["chisq_dof"] = dof
        cand["snr_reweighted"] = reweighted_snr(cand["snr"].to_numpy(float), chi2, dof)
        kept = cluster_triggers(cand, window, column="snr_reweighted")
    else:
        kept = cluster_triggers(cand, window)
    trig = trigger_table(kept, bank, templates, getattr(cond, "detector", ""))
    refused = templates[templates.refused != ""].copy()
    refused.insert(0, "template_id", bank.table.template_id.to_numpy()[refused.index])
    trig.attrs["analysed_s"] = templates.attrs["analysed_s"]
    trig.attrs["refused"] = refused.to_dict("records")
    trig.attrs["cluster_window_s"] = window
    trig.attrs["veto_bins"] = None if veto_bins is None else int(veto_bins)
    trig.attrs["veto_domain"] = None if veto_bins is None else veto_domain
    trig.attrs["veto_cpu_s"] = veto_cpu
    if return_maxima:
        cols = ["gps", "template_index", "snr"] + (["snr_reweighted"] if veto_bins is not None
                                                   else [])
        return trig, cand[cols].copy()
    return trig


def default_cluster_window(bank: Bank) -> float:
    """Longest template of the bank, clipped to [0.05, 1] s."""
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
    vals, fs, t0 = _data_arrays(cond)
    f = np.atleast_1d(np.asarray(f_hz, float))[None]
    tau = np.atleast_1d(np.asarray(tau_s, float))[None]
    if f.shape != tau.shape:
        raise InputError("f_hz and tau_s of a template must have the same length.")
    pad = filter_length(cond)
    plan = plan_chunks(vals.size, fs, float(DECAY_TIMES * tau.max()), pad)
    ok_t0 = _analysable_mask(cond, vals.size, fs, t0, plan.tail)
    prep = prepare_templates(f, tau, _response(cond, plan.n_fft, fs), plan.n_fft, fs, max_cond)
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
    vals, fs, t0 = _data_arrays(cond)
    f = np.atleast_1d(np.asarray(f_hz, float))[None]
    tau = np.atleast_1d(np.asarray(tau_s, float))[None]
    if f.shape != tau.shape:
        raise InputError("f_hz and tau_s of a template must have the same length.")
    pad = filter_length(cond)
    tail = int(math.ceil(DECAY_TIMES * tau.max() * fs))
    x = (float(gps) - t0) * fs
    k = int(math.ceil(x - 1e-9))
    offset = (x - k) / fs  # sample k is (k - x)/fs after the start
    n_fft = scipy.fft.next_fast_len(tail + 2 * pad + 2)
    a = k - pad
    if k < 0 or k + tail > vals.size:
        raise InputError(f"start time {gps} is outside the data or too close to its end.")
    ok = _analysable_mask(cond, vals.size, fs, t0, tail)
    if not ok[k]:
        raise InputError(f"start time {gps} is not in analysable time.")
    prep = prepare_templates(f, tau, _response(cond, n_fft, fs), n_fft, fs, max_cond, offset)
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
