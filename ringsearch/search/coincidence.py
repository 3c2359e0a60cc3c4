"""Coincidence: triggers of two or more detectors that agree in time, with a network statistic.

Two triggers are coincident when their start times differ by at most the
light-travel time between the detectors plus a timing tolerance.  The network
ranking statistic is the quadrature sum of the detectors' projection SNRs
(the network SNR of a signal whose templates match in every detector).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Mapping

import numpy as np
import pandas as pd

from ringsearch.errors import InputError
from ringsearch.physics.units import C_SI

#: Default timing tolerance added to the light-travel time (s): the start time of
#: the best template jitters by a few ms between detectors.  # common practice
TIMING_TOLERANCE_S: float = 0.01

#: Fallback light-travel bound for detectors without known sites: Earth's
#: diameter over c (2 * 6371 km / c = 42.5 ms).  # from memory (mean Earth radius)
_EARTH_DIAMETER_S = 2 * 6.371e6 / C_SI


def light_travel_time(det_a: str, det_b: str) -> float:
    """Light-travel time (s) between two detector sites, from their geocentric positions.

    Examples
    --------
    >>> round(light_travel_time("H1", "L1") * 1e3, 1)  # about 10 ms
    10.0
    """
    try:
        from ringsearch.physics.detectors import get_detector

        a, b = get_detector(det_a), get_detector(det_b)
    except (ImportError, InputError, KeyError):
        return _EARTH_DIAMETER_S
    return float(np.linalg.norm(np.asarray(a.location) - np.asarray(b.location)) / C_SI)


def check_tolerance(tolerance_s: float) -> float:
    """Validate a timing tolerance (s): finite and non-negative.

    Examples
    --------
    >>> check_tolerance(0.01)
    0.01
    """
    try:
        tol = float(tolerance_s)
    except (TypeError, ValueError):
        tol = math.nan
    if not (math.isfinite(tol) and tol >= 0.0):
        raise InputError(f"timing tolerance must be a finite number of seconds >= 0, "
                         f"got {tolerance_s!r}.")
    return tol


def coincident_candidates(triggers: Mapping[str, pd.DataFrame], *,
                          tolerance_s: float = TIMING_TOLERANCE_S,
                          shifts: Mapping[str, float] | None = None,
                          span: tuple[float, float] | None = None,
                          cluster_window_s: float = 0.1,
                          maxima: Mapping[str, pd.DataFrame] | None = None,
                          snr_column: str = "snr") -> pd.DataFrame:
    """Coincident candidates among the detectors' clustered triggers.

    Parameters
    ----------
    triggers : mapping detector -> trigger DataFrame (``gps``, ``snr``, ...)
    tolerance_s : float
        Timing tolerance added to each pair's light-travel time.
    shifts : mapping detector -> seconds, optional
        Time slide applied to each detector's triggers (for background).  With
        ``span = (start, end)`` shifted times wrap around inside the span.
    cluster_window_s : float
        Candidates closer than this keep only the loudest.
    maxima : mapping detector -> DataFrame (``gps``, ``template_index``, ``snr``), optional
        Unclustered per-template maxima (from ``matched_filter(...,
        return_maxima=True)``).  When given, the network statistic is that of
        the single template best in all detectors together: ``sqrt(max_T sum_d
        rho_{d,T}^2)`` with each detector's maximum of template T within half a
        cluster window of its trigger (a template below threshold in a
        detector contributes 0).  A real source has one remnant, so this
        statistic (never above the quadrature sum) penalises noise
        coincidences of unrelated templates; the chosen template is reported
        as ``network_template_index``.
    snr_column : str
        Per-detector statistic that ranks and combines: ``"snr"`` (raw
        projection SNR) or ``"snr_reweighted"`` (after the signal-consistency
        veto); ``maxima`` must carry the same column.

    Returns
    -------
    DataFrame
        One row per candidate: ``gps`` (start time of its loudest trigger),
        ``network_snr`` (ranking statistic), ``network_snr_quadrature``,
        ``network_template_index``, ``n_detectors`` and per detector ``{det}_gps``,
        ``{det}_snr`` (raw SNR), ``{det}_rank_snr`` (the ``snr_column`` value),
        ``{det}_row`` (row in that detector's table, -1 if absent),
        ``{det}_mass_msun``, ``{det}_spin``, ``{det}_f220_hz``.

    Examples
    --------
    >>> h = pd.DataFrame({"gps": [10.0], "snr": [8.0]})
    >>> l = pd.DataFrame({"gps": [10.007], "snr": [6.0]})
    >>> c = coincident_candidates({"H1": h, "L1": l})
    >>> round(float(c.network_snr[0]), 2)
    10.0
    """
    dets = list(triggers)
    if len(dets) < 2:
        raise InputError("coincidence needs triggers from at least two detectors.")
    tolerance_s = check_tolerance(tolerance_s)
    shifts = dict(shifts or {})
    times: dict[str, np.ndarray] = {}
    for d in dets:
        t = triggers[d]["gps"].to_numpy(float) + float(shifts.get(d, 0.0))
        if span is not None and shifts.get(d, 0.0):
            a, b = span
            t = a + np.mod(t - a, b - a)
        times[d] = t
    snrs = {d: triggers[d][snr_column].to_numpy(float) for d in dets}
    raw = {d: triggers[d]["snr"].to_numpy(float) for d in dets}
    order = {d: np.argsort(times[d], kind="stable") for d in dets}
    win = {(a, b): light_travel_time(a, b) + tolerance_s for a, b in
           itertools.permutations(dets, 2)}
    rows = []
    for anchor in dets:
        others = [d for d in dets if d != anchor]
        for i in range(len(times[anchor])):
            t_a = times[anchor][i]
            picks = {anchor: i}
            for d in others:
                ts = times[d][order[d]]
                lo = np.searchsorted(ts, t_a - win[(anchor, d)], "left")
                hi = np.searchsorted(ts, t_a + win[(anchor, d)], "right")
                if hi > lo:
                    idx = order[d][lo:hi]
                    picks[d] = int(idx[np.argmax(snrs[d][idx])])
            if len(picks) < 2:
                continue
            # the anchor must be the loudest member, so each set is built once
            loud = max(picks, key=lambda d: snrs[d][picks[d]])
            if loud != anchor:
                continue
            rows.append(picks)
    cols = ["gps", "network_snr", "n_detectors"]
    for d in dets:
        cols += [f"{d}_gps", f"{d}_snr", f"{d}_rank_snr", f"{d}_row", f"{d}_mass_msun",
                 f"{d}_spin", f"{d}_f220_hz"]
    if not rows:
        return pd.DataFrame({c: pd.Series(dtype=float) for c in cols})
    out: dict[str, list] = {c: [] for c in cols}
    for picks in rows:
        loud = max(picks, key=lambda d: snrs[d][picks[d]])
        out["gps"].append(float(triggers[loud]["gps"].iloc[picks[loud]]))
        out["network_snr"].append(math.sqrt(sum(snrs[d][j] ** 2 for d, j in picks.items())))
        out["n_detectors"].append(len(picks))
        for d in dets:
            j = picks.get(d, -1)
            tab = triggers[d]
            out[f"{d}_row"].append(j)
            out[f"{d}_gps"].append(float(tab["gps"].iloc[j]) if j >= 0 else math.nan)
            out[f"{d}_snr"].append(float(raw[d][j]) if j >= 0 else 0.0)
            out[f"{d}_rank_snr"].append(float(snrs[d][j]) if j >= 0 else 0.0)
            for col in ("mass_msun", "spin", "f220_hz"):
                ok = j >= 0 and col in tab.columns
                out[f"{d}_{col}"].append(float(tab[col].iloc[j]) if ok else math.nan)
    cand = pd.DataFrame(out)
    cand["network_snr_quadrature"] = cand["network_snr"]
    cand["network_template_index"] = -1
    if maxima is not None:
        mt = {}
        for d in dets:
            m = maxima[d]
            t = m["gps"].to_numpy(float) + float(shifts.get(d, 0.0))
            if span is not None and shifts.get(d, 0.0):
                t = span[0] + np.mod(t - span[0], span[1] - span[0])
            o = np.argsort(t, kind="stable")
            mt[d] = (t[o], m["template_index"].to_numpy(int)[o],
                     m[snr_column].to_numpy(float)[o])
        half = cluster_window_s / 2
        net, tid = [], []
        for k, picks in enumerate(rows):
            best: dict[int, float] = {}
            for d, j in picks.items():
                tt, ti, ts = mt[d]
                lo = np.searchsorted(tt, times[d][j] - half, "left")
                hi = np.searchsorted(tt, times[d][j] + half, "right")
                per: dict[int, float] = {}
                for a, b in zip(ti[lo:hi], ts[lo:hi], strict=True):
                    if b * b > per.get(a, 0.0):
                        per[a] = b * b
                for a, r2 in per.items():
                    best[a] = best.get(a, 0.0) + r2
            if best:
                a = max(best, key=best.get)
                net.append(math.sqrt(best[a]))
                tid.append(a)
            else:
                net.append(cand["network_snr"].iloc[k])
                tid.append(-1)
        cand["network_snr"] = net
        cand["network_template_index"] = tid
    # cluster: one candidate per window (loudest first), measured in slid time of the anchor
    cand = cand.sort_values("network_snr", ascending=False, kind="stable")
    key_t = np.array([
        next(times[d][int(r[f"{d}_row"])] for d in dets if r[f"{d}_row"] >= 0
             and r[f"{d}_rank_snr"] == max(r[f"{e}_rank_snr"] for e in dets))
        for _, r in cand.iterrows()])
    keep, kept_t = [], []
    for i, t in enumerate(key_t):
        if all(abs(t - u) >= cluster_window_s for u in kept_t):
            keep.append(i)
            kept_t.append(t)
    cand = cand.iloc[keep].sort_values("gps").reset_index(drop=True)
    for d in dets:
        cand[f"{d}_row"] = cand[f"{d}_row"].astype(int)
    cand["n_detectors"] = cand["n_detectors"].astype(int)
    return cand
