"""The search at requested times: the whole-series candidates there, from short regions only.

A campaign needs the search's candidates only near its injections.  Filtering
only short regions around those times gives the same on-grid peaks,
refinement and veto there (they depend on the data alone), but the greedy
clustering of triggers and of network events reaches further: what is kept
near a time can depend on a chain of ever louder candidates running out of
the region.  So every region is *certified*: :func:`~ringsearch.search.triggers.stable_segments`
finds where the clustering of the region's candidates equals the whole
series' whatever lies outside (gaps of a cluster window, or candidates
louder than all others within one), first for each detector's triggers,
then for the network events they seed.  Requested times that are not
certified are searched again with wider regions, and, if still not, with the
whole data.  The candidates returned are therefore those of the whole-series
search, not an approximation of them, at a cost that follows the regions.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from ringsearch.search.network import (
    cluster_events,
    coincidence_windows,
    network_events,
    slide_plan,
)
from ringsearch.search.significance import FAR_COLUMNS
from ringsearch.search.triggers import stable_segments

#: Margins tried around the requested times, in cluster windows (beyond the
#: coincidence window), before the whole data.  A detector's triggers need a
#: firewall a window inside each side of its region, and the network events
#: they seed another.  Measured on two chunks of ``injections/target.toml``
#: (52 injections): 2.5 windows certified 45 of them at once, 3 windows 50 and
#: 3.5 windows 51; the chunks cost about the same CPU time (12.4-14.0 s) with
#: each, the fewest second rounds with 3.5.
MARGIN_WINDOWS: tuple[float, ...] = (3.5, 7.0, 14.0)


def _segments(items: Any) -> Any:
    from gwpy.segments import Segment, SegmentList

    return SegmentList(Segment(float(s[0]), float(s[1])) for s in items).coalesce()


def _contract(segs: Any, by: float) -> Any:
    """Segments shrunk by ``by`` at both ends; those shorter than ``2 by`` vanish."""
    from gwpy.segments import Segment, SegmentList

    return SegmentList(Segment(float(s[0]) + by, float(s[1]) - by) for s in segs
                       if float(s[1]) - float(s[0]) > 2 * by)


def _widen(segs: Any, by: float) -> Any:
    from gwpy.segments import Segment, SegmentList

    return SegmentList(Segment(float(s[0]) - by, float(s[1]) + by) for s in segs).coalesce()


def _within(t: np.ndarray, segs: Any) -> np.ndarray:
    """True where t lies in one of the segments, ends included."""
    t = np.asarray(t, float)
    out = np.zeros(t.size, bool)
    for s in segs:
        out |= (t >= float(s[0])) & (t <= float(s[1]))
    return out


def _groups(targets: Mapping[str, Any], reach: float) -> list[dict]:
    """The requested times in groups: pieces of all detectors within ``reach`` of each other."""
    hull = _widen([s for segs in targets.values() for s in segs], reach)
    return [{d: _segments(s for s in segs if float(s[1]) >= float(g[0]) - reach
                          and float(s[0]) <= float(g[1]) + reach)
             for d, segs in targets.items()} for g in hull]


def certify(zones: Mapping[str, Any], contenders: Mapping[str, pd.DataFrame],
            events: pd.DataFrame | None, window_s: float, half_s: float) -> tuple[dict, Any]:
    """Where a partial search's triggers and candidates equal the whole series'.

    Parameters
    ----------
    zones : mapping detector -> SegmentList
        Start times where the partial search saw every refined peak the whole
        series has, with the same values.
    contenders : mapping detector -> DataFrame
        The refined peaks its clustering chose from (``gps``, ``lower``,
        ``upper``: :func:`~ringsearch.search.triggers.detector_triggers`).
    events : DataFrame or None
        Its unclustered zero-lag network events (None: one detector).
    window_s, half_s : float
        Cluster window and the widest coincidence window.

    Returns
    -------
    (dict, SegmentList)
        Per detector the times where its triggers are the whole series'
        (:func:`~ringsearch.search.triggers.stable_segments`), and the times
        where the candidates anchored there are: for one detector its
        triggers', for several the stable part of the network events seeded
        where every detector's triggers, and every own-trigger lookup within
        ``half_s``, are exact.
    """
    stable = {d: stable_segments(zones[d], c["gps"], c["lower"], c["upper"], window_s)
              for d, c in contenders.items()}
    if events is None:
        return stable, next(iter(stable.values()))
    exact = None
    for part in stable.values():
        part = _contract(part, half_s)
        exact = part if exact is None else exact & part
    return stable, stable_segments(exact.coalesce(), events["gps"], events["network_snr"],
                                   events["network_snr"], window_s)


def search_at_times(search: Any, conds: Mapping[str, Any], bank: Any,
                    probes: Mapping[str, Any], at: Mapping[str, Any],
                    valid: Mapping[str, Any], progress: bool = False) -> dict:
    """Triggers and zero-lag candidates of ``search`` at requested anchor times.

    Parameters
    ----------
    search : ringsearch.search.engine.Search
        Gives the triggers of regions (:meth:`~ringsearch.search.engine.Search.triggers`),
        the cluster window and the timing allowance.
    conds, bank, probes, valid
        Conditioned data, bank, probes and valid start times per detector.
    at : mapping detector -> SegmentList
        Requested times per detector: the candidates anchored there (their
        seed trigger's start time) are returned, with the detectors'
        triggers they refer to.

    Returns
    -------
    dict
        ``triggers`` and ``candidates`` (tables as in the whole-series search,
        FAR columns NaN), ``refused``, ``analysed`` (seconds of requested
        valid start time per detector) and ``rounds`` (requested groups
        searched at each margin, the last entry being the whole data).
    """
    dets = list(conds)
    w = search.cluster_window(bank)
    tol = search.config.tolerance_s
    half = max(coincidence_windows(dets, tol).values(), default=0.0)
    targets = {d: _segments(at.get(d, [])) for d in dets}
    pending = _groups(targets, half)
    edge = bank.on_box_edge()
    zero = slide_plan(valid, 0, 1.0)[0] if len(dets) > 1 else None
    trig_parts, cand_parts, rounds = [], [], []
    refused = None
    steps = [*MARGIN_WINDOWS, None]  # None: the whole data
    for r, step in enumerate(steps):
        if not pending and r > 0:
            break
        rounds.append(len(pending))
        if not pending:  # nothing requested: empty tables of the right columns
            regions = {d: [] for d in dets}
        elif step is None:
            regions = None
        else:
            margin = half + step * w
            regions = {d: _widen([s for g in pending for s in g[d]], margin) for d in dets}
        trig, refused_r, _, contenders = search.triggers(conds, bank, probes, progress=progress,
                                                         regions=regions,
                                                         return_contenders=True)
        refused = refused_r if refused is None else refused
        if len(dets) == 1:
            events = trig.copy()
            events.insert(2, "network_snr", events["snr_reweighted"])
        else:
            raw = network_events(probes, trig, zero, tol, w, bank, edge, cluster=False)
            events = cluster_events(raw, w)
        if regions is None:
            certified = None  # the whole series is its own certificate
        else:
            zones = {d: _contract(regions[d], 2.0 / float(c.sample_rate))  # refinement reach
                     for d, c in conds.items()}
            certified = certify(zones, contenders, None if len(dets) == 1 else raw, w, half)[1]
        left = []
        for g in pending:
            if certified is not None and any(abs(g[d] - certified) > 0 for d in dets):
                left.append(g)
                continue
            anchor = (events["anchor_detector"].to_numpy(str) if len(dets) > 1
                      else np.full(len(events), dets[0]))
            keep = np.zeros(len(events), bool)
            for d in dets:
                keep |= (anchor == d) & _within(events["gps"].to_numpy(float), g[d])
            cand_parts.append(events[keep].assign(_round=r))
            near = _widen([s for d in dets for s in g[d]], half)
            trig_parts.append(trig[_within(trig["gps"].to_numpy(float), near)].assign(_round=r))
        pending = left
    if not cand_parts:
        trig_parts, cand_parts = [trig.iloc[:0].assign(_round=0)], [events.iloc[:0].assign(
            _round=0)]
    trig, cands, _ = renumber(trig_parts, cand_parts, dets)
    for col in FAR_COLUMNS:
        cands[col] = pd.Series(np.nan, index=cands.index, dtype=float)
    cands = cands.sort_values("network_snr", ascending=False, kind="stable").reset_index(
        drop=True)
    analysed = {d: float(abs(targets[d] & _segments(valid[d]))) for d in dets}
    return {"triggers": trig, "candidates": cands, "refused": refused, "analysed": analysed,
            "rounds": rounds}


def renumber(trig_parts: list, cand_parts: list, dets: list,
             key: tuple[str, ...] = ("detector", "template_index", "gps")
             ) -> tuple[pd.DataFrame, pd.DataFrame, dict]:
    """One trigger table from parts (each trigger once, ids in time order) and the
    candidates with their trigger ids mapped to it.

    Parts carry a ``_round`` column naming the search that made them; a
    trigger is the same in two parts when its ``key`` columns are, and the
    first part holding it gives its row.  Returns the triggers, the candidates
    and the lookup ``(round, old id) -> new id`` (see :func:`remap_ids`).
    """
    key = list(key)
    trig = pd.concat(trig_parts, ignore_index=True)
    uniq = trig.drop_duplicates(key).sort_values(["gps", "detector"], kind="stable")
    uniq = uniq.drop(columns=["trigger_id", "_round"]).reset_index(drop=True)
    uniq.insert(0, "trigger_id", np.arange(len(uniq), dtype=np.int64))
    ids = trig[["_round", "trigger_id", *key]].merge(
        uniq[["trigger_id", *key]].rename(columns={"trigger_id": "new_id"}), on=key)
    lookup = {(int(r), int(o)): int(n) for r, o, n in
              zip(ids["_round"], ids["trigger_id"], ids["new_id"], strict=True)}
    cands = remap_ids(pd.concat(cand_parts, ignore_index=True), lookup, dets)
    subset = ["anchor_detector", "gps", "template_index"] if len(dets) > 1 else key
    cands = cands.drop_duplicates(subset).drop(columns="_round").reset_index(drop=True)
    return uniq, cands, lookup


def remap_ids(table: pd.DataFrame, lookup: dict, dets: list) -> pd.DataFrame:
    """``table`` (with ``_round``), its trigger-id columns mapped by ``lookup`` (-1 if absent)."""
    table = table.copy()
    id_cols = [f"{d}_trigger_id" for d in dets] if len(dets) > 1 else ["trigger_id"]
    for c in id_cols:
        table[c] = np.array([lookup.get((int(r), int(o)), -1) if o >= 0 else -1 for r, o in
                             zip(table["_round"], table[c], strict=True)], np.int64)
    return table
