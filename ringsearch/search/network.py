"""The network statistic: every detector's peak within the light-travel window, in quadrature.

A network event is *seeded* by one detector's trigger (its anchor): the
trigger's template T at its refined start time t.  Every other detector d
contributes the loudest start of the same template T within
``|t_d - t| <= light_travel(anchor, d) + tolerance`` (one source, one remnant,
one physical arrival-time difference), refined between samples and
re-weighted by the veto exactly as triggers are (:class:`~ringsearch.search.probe.Probe`).
No detector is left out for being below its own trigger threshold: the
statistic is

    network_snr = sqrt( rho_hat_anchor^2 + sum_{d != anchor} rho_hat_d(T)^2 ),

the quadrature sum of the detectors' re-weighted SNRs for the one template.
Every trigger of every detector seeds an event; events closer than the
cluster window keep the loudest.

Time slides use the same function: detector i is shifted by ``k * i * step``
for slide k, circularly on the span of the detectors' common valid start
times, so slid seeds meet the other detectors' data at unrelated times.  The
coincident time of a slide is measured by segment arithmetic, ``|cap_d
wrap(V_d, s_d)|`` with ``V_d`` each detector's valid start times, so gaps
and gates count exactly (:func:`slide_plan`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from ringsearch.data.segments import total_seconds
from ringsearch.errors import InputError
from ringsearch.physics.units import C_SI
from ringsearch.search.probe import Probe
from ringsearch.search.triggers import cluster_triggers

#: Default timing allowance added to the light-travel time (s): the refined start
#: of the best template still jitters by a few ms between detectors at low SNR
#: (a damped sinusoid's start is fixed only to ~ 1 / bandwidth).  # common practice
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


def check_tolerance(tolerance_s: Any) -> float:
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


def coincidence_windows(detectors: Sequence[str], tolerance_s: float) -> dict:
    """Half-width (s) of the arrival-time window for each ordered detector pair.

    Examples
    --------
    >>> w = coincidence_windows(["H1", "L1"], 0.01)
    >>> round(w[("H1", "L1")], 4)
    0.02
    """
    return {(a, b): light_travel_time(a, b) + float(tolerance_s)
            for a in detectors for b in detectors if a != b}


# --------------------------------------------------------------------------- slides
def wrap_segments(segments: Any, shift: float, span: tuple[float, float]) -> Any:
    """Segments inside ``span`` shifted by ``shift``, wrapped around the span.

    Examples
    --------
    >>> list(wrap_segments([(0.0, 4.0), (6.0, 9.0)], 3.0, (0.0, 10.0)))
    [Segment(0.0, 2.0), Segment(3.0, 7.0), Segment(9.0, 10.0)]
    """
    from gwpy.segments import Segment, SegmentList

    s0, s1 = float(span[0]), float(span[1])
    length = s1 - s0
    s = math.fmod(float(shift), length)
    if s < 0:
        s += length
    out = SegmentList()
    for seg in SegmentList(Segment(*x) for x in segments) & SegmentList([Segment(s0, s1)]):
        a, b = float(seg[0]) + s, float(seg[1]) + s
        if b <= s1:
            out.append(Segment(a, b))
        elif a >= s1:
            out.append(Segment(a - length, b - length))
        else:
            out.append(Segment(a, s1))
            out.append(Segment(s0, b - length))
    return out.coalesce()


def unwrap_time(t: float, shift: float, span: tuple[float, float]) -> float:
    """The detector's own time of slid time ``t`` under ``shift`` (inverse of the wrap).

    Examples
    --------
    >>> unwrap_time(1.0, 3.0, (0.0, 10.0))
    8.0
    """
    s0, s1 = float(span[0]), float(span[1])
    return s0 + math.fmod(math.fmod(t - shift - s0, s1 - s0) + (s1 - s0), s1 - s0)


def max_distinct_slides(duration_s: float, step_s: float, n_detectors: int) -> int:
    """Largest number of slides whose shifts stay distinct and non-zero modulo the span.

    Examples
    --------
    >>> max_distinct_slides(32.0, 0.5, 2)
    63
    """
    if n_detectors < 2:
        return 0
    # the largest shift (n_det-1) * k * step must stay a step away from a full wrap
    return max(0, int(math.floor((duration_s - step_s) / (step_s * (n_detectors - 1)))))


@dataclass
class Slide:
    """One time slide: ``index`` (0 is the zero lag), ``shifts`` per detector (s), the
    coincident valid start times ``live`` (SegmentList, in slid time) and ``live_s``."""

    index: int
    shifts: dict
    live: Any
    live_s: float
    span: tuple = field(default=(0.0, 0.0))


def slide_plan(valid: Mapping[str, Any], n_slides: int, step_s: float) -> list[Slide]:
    """The zero lag and ``n_slides`` time slides of the detectors' valid start times.

    ``valid`` maps detector -> SegmentList of valid start times.  The span is
    the hull of their common time; slide k shifts detector i (mapping order)
    by ``k * i * step_s``.  Raises InputError when the span cannot hold that
    many distinct slides.

    Examples
    --------
    >>> gappy = [(0, 40), (60, 100)]
    >>> plan = slide_plan({"H1": gappy, "L1": gappy}, 2, 10.0)
    >>> [round(s.live_s, 1) for s in plan]
    [80.0, 70.0, 60.0]
    """
    from gwpy.segments import Segment, SegmentList

    dets = list(valid)
    segs = {d: SegmentList(Segment(*x) for x in valid[d]).coalesce() for d in dets}
    common = segs[dets[0]]
    for d in dets[1:]:
        common = common & segs[d]
    common = common.coalesce()
    if not common:
        raise InputError("the detectors share no valid start time, so nothing can be "
                         "coincident.")
    span = (float(common[0][0]), float(common[-1][1]))
    plan = [Slide(0, {d: 0.0 for d in dets}, common, total_seconds(common), span)]
    if n_slides:
        most = max_distinct_slides(span[1] - span[0], step_s, len(dets))
        if n_slides > most:
            raise InputError(f"{n_slides} time slides of {step_s:.3g} s do not fit in the "
                             f"{span[1] - span[0]:.3g} s span of coincident data (at most "
                             f"{most}).")
    for k in range(1, int(n_slides) + 1):
        shifts = {d: k * i * float(step_s) for i, d in enumerate(dets)}
        live = None
        for d in dets:
            w = wrap_segments(segs[d], shifts[d], span)
            live = w if live is None else live & w
        live = live.coalesce()
        plan.append(Slide(k, shifts, live, total_seconds(live), span))
    return plan


# --------------------------------------------------------------------------- events
def _columns(detectors: Sequence[str]) -> list[str]:
    cols = ["slide", "gps", "slid_gps", "anchor_detector", "network_snr", "template_index",
            "template_id", "on_box_edge"]
    for d in detectors:
        cols += [f"{d}_gps", f"{d}_snr", f"{d}_snr_reweighted", f"{d}_chisq",
                 f"{d}_chisq_dof", f"{d}_trigger_id"]
    return cols


def empty_events(detectors: Sequence[str]) -> pd.DataFrame:
    """A table of no network events, with the columns of :func:`network_events`.

    Examples
    --------
    >>> len(empty_events(["H1", "L1"])), "L1_trigger_id" in empty_events(["H1", "L1"])
    (0, True)
    """
    return pd.DataFrame({c: pd.Series(dtype=object if c == "anchor_detector" else float)
                         for c in _columns(detectors)})


def _in_segments(t: np.ndarray, segs: Any) -> np.ndarray:
    """True where time t lies in one of the (sorted, coalesced) segments [a, b)."""
    if not len(segs) or not t.size:
        return np.zeros(t.size, bool)
    a = np.array([float(s[0]) for s in segs])
    b = np.array([float(s[1]) for s in segs])
    i = np.searchsorted(a, t, side="right") - 1
    return (i >= 0) & (t < b[np.clip(i, 0, None)])


def network_events(probes: Mapping[str, Probe], triggers: pd.DataFrame,
                   slides: Slide | Sequence[Slide], tolerance_s: float,
                   cluster_window_s: float, bank: Any,
                   edge: np.ndarray | None = None, progress: bool = False,
                   cluster: bool = True) -> pd.DataFrame:
    """Network events of time slides (or the zero lag), seeded by every trigger.

    Parameters
    ----------
    probes : mapping detector -> Probe
    triggers : DataFrame
        All detectors' triggers (``trigger_id``, ``detector``, ``gps``,
        ``template_index``, ``snr``, ``snr_reweighted``, ``chisq``, ``chisq_dof``).
    slides : Slide or sequence of Slide
        Shifts and coincident time (from :func:`slide_plan`).  Each seed is
        taken through every slide before the next, so the probes' caches of
        prepared templates serve all slides.
    tolerance_s, cluster_window_s : float
        Timing allowance added to the light-travel time; events of one slide
        closer than the cluster window (in slid time) keep the loudest.
    progress : bool
        A progress bar over the seeds on stderr.
    cluster : bool
        Cluster each slide's events (False: every seed's event, unclustered).

    Returns
    -------
    DataFrame
        One row per clustered event: ``slide``, ``gps`` (the anchor's own start
        time), ``slid_gps``, ``anchor_detector``, ``network_snr``,
        ``template_index``, ``template_id``, ``on_box_edge`` and per detector d
        the network template's refined peak ``{d}_gps, {d}_snr,
        {d}_snr_reweighted, {d}_chisq, {d}_chisq_dof`` and ``{d}_trigger_id``
        (d's own trigger within the window, -1 if none).

    Examples
    --------
    >>> ev = network_events(probes, triggers, plan[0], 0.01, 0.05, bank)  # doctest: +SKIP
    """
    if isinstance(slides, Slide):
        slides = [slides]
    dets = list(probes)
    cols = _columns(dets)
    windows = coincidence_windows(dets, tolerance_s)
    by_det = {d: triggers[triggers["detector"] == d] for d in dets}
    own = {d: (g["gps"].to_numpy(float), g["snr_reweighted"].to_numpy(float),
               g["trigger_id"].to_numpy(np.int64)) for d, g in by_det.items()}
    tid = bank.table["template_id"].to_numpy()
    rows: list[dict] = []
    from tqdm import tqdm

    bar = tqdm(total=len(triggers), desc="network events" if len(slides) == 1 else
               f"time slides ({len(slides)})", unit=" seeds", disable=not progress, leave=False)
    for a in dets:
        g = by_det[a]
        if not len(g):
            continue
        t_own = g["gps"].to_numpy(float)
        slid = {}
        for sl in slides:
            t_slid = t_own if sl.index == 0 else np.array(
                [unwrap_time(t, -sl.shifts[a], sl.span) for t in t_own])
            slid[sl.index] = (t_slid, _in_segments(t_slid, sl.live))
        # seeds in template order: a template's preparation serves all its seeds and slides
        cols_a = {c: g[c].to_numpy() for c in ("template_index", "gps", "snr",
                                                "snr_reweighted", "chisq", "chisq_dof",
                                                "trigger_id")}
        for j in np.argsort(cols_a["template_index"], kind="stable"):
            ti = int(cols_a["template_index"][j])
            gps, snr = float(cols_a["gps"][j]), float(cols_a["snr"][j])
            rw, chisq = float(cols_a["snr_reweighted"][j]), float(cols_a["chisq"][j])
            dof, trig_id = int(cols_a["chisq_dof"][j]), int(cols_a["trigger_id"][j])
            active = [sl for sl in slides if slid[sl.index][1][j]]
            # every other detector's peak of the same template, in every slide at once
            found = {}
            for d in dets:
                if d == a or not active:
                    continue
                centres = np.array([gps if sl.index == 0 else
                                    unwrap_time(float(slid[sl.index][0][j]), sl.shifts[d],
                                                sl.span) for sl in active])
                half = windows[(a, d)]
                found[d] = (centres, half, probes[d].peaks(ti, centres - half, centres + half))
            for s_i, sl in enumerate(active):
                row: dict[str, Any] = {
                    "slide": sl.index, "gps": gps, "slid_gps": float(slid[sl.index][0][j]),
                    "anchor_detector": a, "template_index": ti, "template_id": tid[ti],
                    "on_box_edge": bool(edge[ti]) if edge is not None else False}
                total = rw ** 2
                _fill(row, a, gps, snr, rw, chisq, dof, trig_id)
                ok = True
                for d, (centres, half, pks) in found.items():
                    pk = pks[s_i]
                    if pk is None:
                        ok = False
                        break
                    total += pk.snr_reweighted ** 2
                    _fill(row, d, pk.gps, pk.snr, pk.snr_reweighted, pk.chisq, pk.chisq_dof,
                          _own_trigger(own[d], float(centres[s_i]), half))
                if ok:
                    row["network_snr"] = math.sqrt(total)
                    rows.append(row)
            bar.update(1)
    bar.close()
    if not rows:
        return pd.DataFrame({c: pd.Series(dtype=object if c == "anchor_detector" else float)
                             for c in cols})
    ev = pd.DataFrame(rows)[cols]
    if cluster:
        ev = cluster_events(ev, cluster_window_s)
    for c in ["slide", "template_index"] + [f"{d}_trigger_id" for d in dets] + [
            f"{d}_chisq_dof" for d in dets]:
        ev[c] = ev[c].astype(np.int64)
    ev["on_box_edge"] = ev["on_box_edge"].astype(bool)
    return ev


def cluster_events(events: pd.DataFrame, cluster_window_s: float) -> pd.DataFrame:
    """Each slide's network events closer than the cluster window (slid time), loudest kept.

    Examples
    --------
    >>> kept = cluster_events(network_events(probes, trig, plan, 0.01, 0.05, bank,
    ...                                      cluster=False), 0.05)  # doctest: +SKIP
    """
    if not len(events):
        return events.copy()
    return pd.concat([cluster_triggers(g, cluster_window_s, column="network_snr",
                                       time_column="slid_gps")
                      for _, g in events.groupby("slide", sort=True)], ignore_index=True)


def _fill(row: dict, d: str, gps: float, snr: float, rw: float, chisq: float, dof: int,
          trigger_id: int) -> None:
    row[f"{d}_gps"] = gps
    row[f"{d}_snr"] = snr
    row[f"{d}_snr_reweighted"] = rw
    row[f"{d}_chisq"] = chisq
    row[f"{d}_chisq_dof"] = dof
    row[f"{d}_trigger_id"] = trigger_id


def _own_trigger(own: tuple, centre: float, half: float) -> int:
    """Id of the detector's loudest own trigger within ``half`` of ``centre`` (-1: none)."""
    t, rw, ids = own
    near = np.flatnonzero(np.abs(t - centre) <= half)
    if near.size == 0:
        return -1
    return int(ids[near[np.argmax(rw[near])]])
