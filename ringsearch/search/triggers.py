"""Triggers of one detector: refined peaks above threshold, clustered into one row per signal.

Trigger table columns (one row per clustered trigger):

``trigger_id`` (unique within a search, stable: candidates and time-slide
events refer to triggers by it), ``gps`` (refined template start time t0,
GPS s), ``detector``, ``snr`` (projection SNR at t0), ``snr_reweighted``
(the ranking SNR after the signal-consistency veto; equal to ``snr`` when the
veto is off), ``chisq`` (NaN when off), ``chisq_dof`` (0 when off),
``template_id``, ``template_index`` (row of the bank), ``mass_msun``,
``spin``, ``n_overtones``, ``on_box_edge`` (the template touches the edge of
the bank's box: mass and spin are a boundary value, not an estimate),
``cond_gram`` (condition number of the template's normalised Gram matrix),
and for each mode n = 0..N ``f22{n}_hz``, ``tau22{n}_s``, ``amp22{n}_re``,
``amp22{n}_im`` (the maximum-likelihood complex amplitude ``A_n`` at t0, strain
units: the fitted signal is ``Re[A_n e^{-i 2 pi f_n (t-t0)}] e^{-(t-t0)/tau_n}``)
and ``amp22{n}_abs``.
"""

from __future__ import annotations

import bisect
import math
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from ringsearch.search.bank import Bank
from ringsearch.search.probe import Peak, Probe

#: Peaks found on the sample grid are refined when their on-grid SNR is at least
#: this fraction of the threshold.  A signal's peak gains a few per cent between
#: samples (the rms bandwidth of a whitened damped sinusoid of a few ms with its
#: abrupt start, up to 0.8 x Nyquist); noise peaks, which carry the whole band,
#: can gain more (measured on white noise with an N = 1 bank: median 0.7 %,
#: 90 % below 3.9 %, 99 % below 8.7 %, at most 19 %), so about one in a hundred
#: noise peaks that would reach the threshold between samples is not refined.
#: This is part of what a trigger is, in every mode of the search.
GRID_MARGIN: float = 0.95


def cluster_triggers(cand: pd.DataFrame, window_s: float, column: str = "snr",
                     time_column: str = "gps") -> pd.DataFrame:
    """Keep the loudest candidate in every time window, across all templates.

    Greedy: candidates are taken loudest first (by ``column``) and kept unless
    a kept one lies within ``window_s`` of it (in ``time_column``), so one
    signal makes one trigger.  The result is sorted by time.

    Examples
    --------
    >>> c = pd.DataFrame({"gps": [0.0, 0.01, 1.0], "snr": [6.0, 8.0, 7.0]})
    >>> cluster_triggers(c, 0.1).snr.tolist()
    [8.0, 7.0]
    """
    if len(cand) == 0:
        return cand.copy()
    order = np.argsort(-cand[column].to_numpy(), kind="stable")
    t = cand[time_column].to_numpy()[order]
    kept_t: list[float] = []
    kept: list[int] = []
    # kept times stay sorted so each check is a bisection
    for i, ti in zip(order, t, strict=True):
        j = bisect.bisect_left(kept_t, ti)
        if (j < len(kept_t) and kept_t[j] - ti < window_s) or (j > 0 and ti - kept_t[j - 1]
                                                               < window_s):
            continue
        kept_t.insert(j, ti)
        kept.append(i)
    return cand.iloc[kept].sort_values(time_column, kind="stable").reset_index(drop=True)


def stable_segments(zones: Any, times: Any, lower: Any, upper: Any, window_s: float) -> Any:
    """Where a greedy clustering of a partial set of candidates equals that of the whole set.

    Parameters
    ----------
    zones : SegmentList
        Times where the partial set is complete: every candidate the whole set
        has there is present, at the same time.
    times, lower, upper : array_like
        The partial set's candidates: time and bounds of the clustering key
        (equal when it is known; ``lower = -inf`` when only an upper bound is).
    window_s : float
        The clustering window of :func:`cluster_triggers`.

    Returns
    -------
    SegmentList
        The parts of the zones where the kept candidates are those of
        clustering the whole set, whatever it holds outside the zones.

    Notes
    -----
    Greedy clustering suppresses only within the window, so two kinds of
    *firewall* cut the influence of what lies beyond a zone's edge: a gap of
    at least the window with no candidate, and a candidate louder (``lower``)
    than every other within the window on both sides (``upper``), which is
    kept whatever else exists and suppresses all of them.  A zone is stable
    from its first firewall to its last; one without two firewalls inside it
    contributes nothing.

    Examples
    --------
    >>> from gwpy.segments import Segment, SegmentList
    >>> z = SegmentList([Segment(0.0, 3.0)])
    >>> t, snr = [0.2, 0.4, 1.0, 1.3, 2.4], [6.0, 8.0, 9.0, 7.0, 6.5]
    >>> [(round(a, 6), round(b, 6)) for a, b in stable_segments(z, t, snr, snr, 0.5)]
    [(0.9, 2.5)]
    """
    from gwpy.segments import Segment, SegmentList

    w = float(window_s) * (1 + 1e-9) + 1e-12
    t = np.asarray(times, float)
    lo = np.asarray(lower, float)
    hi = np.asarray(upper, float)
    order = np.argsort(t, kind="stable")
    t, lo, hi = t[order], lo[order], hi[order]
    out = SegmentList()
    for seg in SegmentList(zones).coalesce():
        a, b = float(seg[0]), float(seg[1])
        i, j = np.searchsorted(t, a, "left"), np.searchsorted(t, b, "right")
        ts, los, his = t[i:j], lo[i:j], hi[i:j]
        pts = np.concatenate(([a], ts, [b]))
        gap = np.flatnonzero(np.diff(pts) >= w)
        left = [float(pts[g] + w) for g in gap]  # stable from one window after a gap opens ...
        right = [float(pts[g + 1] - w) for g in gap]  # ... to one window before it closes
        # candidates louder than all others within the window, the window inside the zone
        first = np.searchsorted(ts, ts - w, "right")
        last = np.searchsorted(ts, ts + w, "left")
        for m in np.flatnonzero((ts - w >= a) & (ts + w <= b)):
            near = np.concatenate((his[first[m]:m], his[m + 1:last[m]]))
            if not near.size or los[m] > near.max():
                left.append(float(ts[m]))
                right.append(float(ts[m]))
        if left and min(left) < max(right):
            out.append(Segment(min(left), max(right)))
    return out.coalesce()


def peak_table(peaks: Sequence[Peak], bank: Bank, detector: str,
               cond_gram: np.ndarray | None = None,
               edge: np.ndarray | None = None) -> pd.DataFrame:
    """Rows for refined peaks: time, SNRs, veto, template parameters and mode amplitudes.

    Examples
    --------
    >>> peak_table([probe.refine(3, 65536)], bank, "H1")  # doctest: +SKIP
    """
    k = bank.n_modes
    ti = np.array([p.template_index for p in peaks], int)
    row = bank.table.iloc[ti]
    amp = (np.array([p.amplitudes for p in peaks], float) if peaks
           else np.empty((0, 2 * k)))
    out = pd.DataFrame({
        "gps": np.array([p.gps for p in peaks], float),
        "detector": detector,
        "snr": np.array([p.snr for p in peaks], float),
        "snr_reweighted": np.array([p.snr_reweighted for p in peaks], float),
        "chisq": np.array([p.chisq for p in peaks], float),
        "chisq_dof": np.array([p.chisq_dof for p in peaks], int),
        "template_id": row["template_id"].to_numpy(),
        "template_index": ti,
        "mass_msun": row["mass_msun"].to_numpy(float),
        "spin": row["spin"].to_numpy(float),
        "n_overtones": np.full(len(ti), bank.n_overtones, dtype=int),
        "on_box_edge": (np.asarray(edge, bool)[ti] if edge is not None
                        else np.zeros(len(ti), bool)),
        "cond_gram": (np.asarray(cond_gram, float)[ti] if cond_gram is not None
                      else np.full(len(ti), np.nan)),
        "sample": np.array([p.sample for p in peaks], np.int64),
        "offset": np.array([p.offset for p in peaks], float),
    })
    for n in range(k):
        out[f"f22{n}_hz"] = row[f"f22{n}_hz"].to_numpy(float)
        out[f"tau22{n}_s"] = row[f"tau22{n}_s"].to_numpy(float)
        out[f"amp22{n}_re"] = amp[:, 2 * n]
        out[f"amp22{n}_im"] = amp[:, 2 * n + 1]
        out[f"amp22{n}_abs"] = np.hypot(amp[:, 2 * n], amp[:, 2 * n + 1])
    out["detector"] = out["detector"].astype(str)
    return out


def detector_triggers(probe: Probe, peaks: pd.DataFrame, bank: Bank, snr_threshold: float,
                      cluster_window_s: float, cond_gram: np.ndarray | None = None,
                      edge: np.ndarray | None = None, return_contenders: bool = False
                      ) -> pd.DataFrame | tuple[pd.DataFrame, pd.DataFrame]:
    """Refine on-grid peaks, keep those above threshold, cluster them on the ranking SNR.

    ``peaks`` holds per-template on-grid maxima (``template_index``, ``sample``,
    ``snr_grid``) from :func:`ringsearch.search.correlate.filter_peaks`, found
    with the threshold times :data:`GRID_MARGIN`.  Every peak is refined
    (start time between samples, SNR and amplitudes; vectorised over peaks of
    all templates, :meth:`~ringsearch.search.probe.Probe.refine_batch`), those whose refined
    SNR reaches ``snr_threshold`` are kept and clustered greedily on
    ``snr_reweighted`` within ``cluster_window_s``.  The chi-squared is
    computed lazily: candidates are taken in the order of their raw SNR (an
    upper bound of the re-weighted one), and a candidate within the window of
    a kept trigger is dropped without a veto, since clustering would drop it
    whatever its chi-squared.  The result equals vetoing every peak first.
    Returns the trigger table without ``trigger_id`` (ids are given across
    detectors by the engine), sorted by time.  With ``return_contenders``
    also every refined peak that reached the threshold (the candidates of the
    clustering): ``gps`` and bounds of its ranking SNR, ``lower`` (the
    re-weighted SNR when its veto was computed, else -inf) and ``upper`` (it,
    or the raw SNR), as :func:`stable_segments` takes them.

    Examples
    --------
    >>> trig = detector_triggers(probe, peaks, bank, 5.0, 0.05)  # doctest: +SKIP
    """
    import heapq

    w = float(cluster_window_s)
    thr = float(snr_threshold)
    ti = peaks["template_index"].to_numpy(int)
    samp = peaks["sample"].to_numpy(np.int64)
    heap: list = []
    refined: dict[int, Peak] = {}
    for i, pk in enumerate(probe.refine_batch(ti, samp, veto_from=math.inf)):
        if pk.snr >= thr:
            refined[i] = pk
            heap.append((-pk.snr, i, 0))
    heapq.heapify(heap)
    kept_t: list[float] = []
    kept: list[Peak] = []

    def near_kept(t: float) -> bool:
        j = bisect.bisect_left(kept_t, t)
        return (j < len(kept_t) and kept_t[j] - t < w) or (j > 0 and t - kept_t[j - 1] < w)

    # states: 0 refined without the veto (key: raw SNR, an upper bound of the re-weighted
    # one), 1 with the veto (key: exact)
    while heap:
        _, i, state = heapq.heappop(heap)
        pk = refined[i]
        if near_kept(pk.gps):
            continue
        if state == 0 and probe.veto_bins is not None:
            refined[i] = pk = probe.with_veto(pk)
            heapq.heappush(heap, (-pk.snr_reweighted, i, 1))
            continue
        kept_t.insert(bisect.bisect_left(kept_t, pk.gps), pk.gps)
        kept.append(pk)
    table = peak_table(kept, bank, probe.detector, cond_gram, edge)
    table = table.sort_values("gps", kind="stable").reset_index(drop=True)
    if not return_contenders:
        return table
    pks = list(refined.values())
    vetoed = np.array([probe.veto_bins is None or pk.chisq_dof > 0 for pk in pks], bool)
    rw = np.array([pk.snr_reweighted for pk in pks], float)
    contenders = pd.DataFrame({"gps": np.array([pk.gps for pk in pks], float),
                               "lower": np.where(vetoed, rw, -np.inf),
                               "upper": np.where(vetoed, rw,
                                                 np.array([pk.snr for pk in pks], float))})
    return table, contenders


def loudest(triggers: pd.DataFrame, column: str = "snr_reweighted") -> dict | None:
    """The loudest trigger (largest ``column``) as a plain dict with the summary keys of DESIGN.md.

    Keys: ``gps, snr, mass, spin, f_hz, tau_s, n_overtones`` (f/tau of (2,2,0))
    plus ``trigger_id``, ``template_id``, ``detector``, ``snr_reweighted``,
    ``chisq``, ``chisq_dof`` and ``on_box_edge``.

    Examples
    --------
    >>> loudest(triggers)["gps"]  # doctest: +SKIP
    """
    if triggers is None or len(triggers) == 0:
        return None
    r = triggers.loc[triggers[column].idxmax()]
    out = {"gps": float(r.gps), "snr": float(r.snr), "mass": float(r.mass_msun),
           "spin": float(r.spin), "f_hz": float(r.f220_hz), "tau_s": float(r.tau220_s),
           "n_overtones": int(r.n_overtones), "template_id": int(r.template_id),
           "detector": str(r.detector), "snr_reweighted": float(r.snr_reweighted),
           "chisq": float(r.chisq), "chisq_dof": int(r.chisq_dof),
           "on_box_edge": bool(r.on_box_edge)}
    if "trigger_id" in triggers.columns:
        out["trigger_id"] = int(r.trigger_id)
    return out
