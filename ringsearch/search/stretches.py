"""Long strain searched stretch by stretch, so that memory follows the stretch, not the data.

:meth:`ringsearch.search.engine.Search.run` comes here when the strain spans
more than about two stretches of ``SearchConfig.stretch_s`` seconds (default
:data:`STRETCH_S`).  The start times are cut into consecutive *owned*
intervals; each stretch reads its interval and a margin on both sides
(:class:`~ringsearch.data.sources.StrainSource`: HDF5 strain is read from
disk piece by piece), is conditioned, filtered, refined and vetoed with the
engine's own steps, gives up the triggers and candidates it owns, and is let
go before the next.

**The same triggers as the whole series.**  With the same PSDs, a stretch's
whitened data, correlations, refinement and veto equal the whole series'
away from its ends (:func:`complete_zone`): the whitening filter and the
templates are finite.  Not to rounding, though: the conditioning's hard band
mask is applied on each FFT grid, and its ringing differs between a
stretch's grid and the whole series' by about 1e-3 of the whitened samples'
scale, so SNRs agree to about 1e-4 relative and re-weighted SNRs to a few
1e-3 (measured in ``tests/test_search_stretches.py``), which is far inside
the statistic's noise.  The greedy clustering of triggers and of network
events reaches further than the filter, so each stretch is *certified* as the
at-times search is (:func:`ringsearch.search.attimes.certify`): its owned
interval must lie where its clustering equals the whole series' whatever lies
beyond the margin.  A stretch that is not certified is read again with a
wider margin (:data:`MARGIN_WINDOWS`).  A trigger belongs to the stretch that
owns its on-grid sample, so none is lost or counted twice at a boundary.

**What is the stretch's own, by design.**

* *PSD*: unless PSDs are given, each stretch whitens with its own Welch
  median PSD, estimated from the stretch, as non-stationary noise asks; the
  bank is placed with the median of the stretches' PSDs.
* *Time slides*: each stretch slides its own owned interval (shifts wrap
  there).  The background is the pool of all stretches' slides and every
  candidate's FAR comes from it.

The result carries, as ``conditioned`` and ``probes``, the stretch of the
loudest candidate (conditioned again at the end), so its plots work; the
analysable segments and valid start times of all stretches are kept.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from ringsearch.data.segments import mask_from_segments
from ringsearch.errors import InputError
from ringsearch.search.network import coincidence_windows, empty_events
from ringsearch.search.significance import SINGLE_METHOD, SLIDES_METHOD

#: Owned seconds of start time per stretch.  Memory follows it: a two-detector
#: stretch of 512 s at 4096 Hz peaks near 0.5 GB.  It holds over a hundred
#: 4-second PSD segments, enough for a Welch median.
STRETCH_S: float = 512.0

#: Shortest stretch accepted (the margins would dominate below it).
MIN_STRETCH_S: float = 64.0

#: Margins tried beyond the filter's reach, in cluster windows, before a
#: stretch is given up as uncertifiable.  A stretch needs a firewall of its
#: triggers' clustering and one of the network events' within the margin on
#: each side (see :mod:`ringsearch.search.attimes`, which certifies most
#: requests with 3.5 windows).
MARGIN_WINDOWS: tuple[float, ...] = (8.0, 32.0, 128.0)


def _span(sources: Mapping[str, Any]) -> tuple[float, float]:
    return (min(s.span[0] for s in sources.values()), max(s.span[1] for s in sources.values()))


def n_stretches(sources: Mapping[str, Any], stretch_s: float,
                window: tuple[float, float] | None = None) -> int:
    """How many stretches the search of ``sources`` uses (1: the whole series at once).

    Examples
    --------
    >>> from ringsearch.data.sources import StrainSource
    >>> src = {"H1": StrainSource("H1", 0.0, 16.0, 16 * 4096, [])}
    >>> n_stretches(src, 512.0), n_stretches(src, 1024.0)
    (8, 4)
    """
    a, b = _span(sources)
    if window is not None:
        a, b = max(a, window[0]), min(b, window[1])
    return max(1, int(round((b - a) / float(stretch_s))))


@dataclass(frozen=True)
class Stretch:
    """One stretch: the GPS interval whose start times it owns and the margin it reads."""

    index: int
    own: tuple[float, float]
    margin_s: float

    def samples(self, src: Any, align: int) -> tuple[int, int]:
        """Samples of ``src`` it reads: the owned interval and the margin, the first
        sample on a multiple of ``align`` (so time bins fall as in the whole series)."""
        fs = float(src.sample_rate)
        n = int(src.n_samples)
        a = 0 if self.own[0] == -math.inf else max(
            0, math.floor((self.own[0] - self.margin_s - src.t0) * fs))
        b = n if self.own[1] == math.inf else max(
            0, math.ceil((self.own[1] + self.margin_s - src.t0) * fs))
        a = min((a // align) * align, n)
        return a, min(n, max(b, a))

    def owned_samples(self, src: Any) -> tuple[float, float]:
        """Its owned interval in samples of ``src`` (open ends at the data's ends)."""
        fs = float(src.sample_rate)
        lo = -math.inf if self.own[0] == -math.inf else round((self.own[0] - src.t0) * fs)
        hi = math.inf if self.own[1] == math.inf else round((self.own[1] - src.t0) * fs)
        return lo, hi


def plan_stretches(sources: Mapping[str, Any], stretch_s: float, margin_s: float,
                   window: tuple[float, float] | None = None) -> list[Stretch]:
    """Stretches of about ``stretch_s`` owned seconds covering the data (and ``window``).

    The first owns everything before its end and the last everything after its
    start, so the owned intervals tile the time line.

    Examples
    --------
    >>> from ringsearch.data.sources import StrainSource
    >>> src = {"H1": StrainSource("H1", 0.0, 16.0, 16 * 1000, [])}
    >>> [s.own for s in plan_stretches(src, 400.0, 5.0)]
    [(-inf, 500.0), (500.0, inf)]
    """
    a, b = _span(sources)
    if window is not None:
        a, b = max(a, window[0]), min(b, window[1])
    n = n_stretches(sources, stretch_s, window)
    fs = float(next(iter(sources.values())).sample_rate)
    edges = [a + round((b - a) * i / n * fs) / fs for i in range(n + 1)]
    edges[0], edges[-1] = -math.inf, math.inf
    return [Stretch(i, (edges[i], edges[i + 1]), float(margin_s)) for i in range(n)]


def complete_zone(cond: Any, read: tuple[int, int], n_samples: int, longest_s: float) -> Any:
    """Start times at which a stretch's refined peaks equal the whole series'.

    The whitened data are exact one conditioning edge (taper and half filter)
    inside a read boundary, the doubly whitened data half a filter further,
    and a template also needs its own length inside; at the data's own ends
    nothing lies beyond, so the zone is open there.
    """
    from gwpy.segments import Segment, SegmentList

    fs = float(cond.sample_rate)
    reach = float(cond.edge) + float(cond.truncation) / 2 + 2.0 / fs
    t0 = float(cond.t0)  # the stretch's first sample
    lo = -math.inf if read[0] == 0 else t0 + reach
    hi = math.inf if read[1] >= n_samples else t0 + (read[1] - read[0]) / fs - reach - longest_s
    return SegmentList([Segment(lo, hi)]) if lo < hi else SegmentList()


def _median_psd(psds: list) -> Any:
    """Frequency by frequency median of PSDs on one grid."""
    out = psds[0].copy()
    out.value[:] = np.median(np.stack([np.asarray(p.value, float) for p in psds]), axis=0)
    return out


def _stretch_psds(search: Any, sources: Mapping[str, Any], plan: list[Stretch], align: int,
                  progress: bool) -> list[dict]:
    """Each stretch's PSD per detector, as its conditioning would estimate it."""
    from tqdm import tqdm

    from ringsearch.data.condition import conditioning_psd

    out = []
    for st in tqdm(plan, desc="PSD per stretch", unit=" stretch", disable=not progress,
                   leave=False):
        row = {}
        for d, src in sources.items():
            a, b = st.samples(src, align)
            if b <= a:
                continue
            ts, segs = src.read(a, b)
            if abs(segs) < 2 * search.config.psd_seglen_s:
                continue
            row[d] = conditioning_psd(ts, search.config.psd_seglen_s, segs)
        out.append(row)
    return out


def _zero_lag(valid: Mapping[str, Any]) -> Any:
    """The zero lag of the detectors' valid start times, None when they share none."""
    from ringsearch.search.network import slide_plan

    try:
        return slide_plan(valid, 0, 1.0)[0]
    except InputError:
        return None


class _Stretches:
    """The state of one stretch-wise search (the engine, the data, the plan)."""

    def __init__(self, search: Any, sources: Mapping[str, Any], psds: Mapping[str, Any] | None,
                 background_exclude: Mapping[str, Any] | None, progress: bool):
        self.search, self.sources, self.given = search, dict(sources), psds
        self.exclude, self.progress = background_exclude, progress
        self.dets = list(sources)

    # ------------------------------------------------------------------ one stretch
    def condition(self, st: Stretch, psds: Mapping[str, Any]) -> tuple[dict, dict]:
        """Conditioned data of the stretch's detectors with analysable time, and read ranges."""
        conds, reads = {}, {}
        for d, src in self.sources.items():
            a, b = st.samples(src, self.align)
            if b <= a or d not in psds:
                continue
            ts, segs = src.read(a, b)
            if abs(segs) <= 0:
                continue
            cond = self.search.condition_one(ts, segs, psds[d])
            if abs(cond.analysable) > 0:
                conds[d], reads[d] = cond, (a, b)
        return conds, reads

    def one(self, st: Stretch, psds: Mapping[str, Any]) -> dict | None:
        """The owned triggers, candidates and slides of a stretch; None if not certified."""
        from gwpy.segments import Segment, SegmentList

        from ringsearch.search.network import cluster_events, network_events

        search, bank = self.search, self.bank
        w = search.cluster_window(bank)
        conds, reads = self.condition(st, psds)
        out = {"trig": [], "cands": [], "background": None, "plan": [], "valid": {},
               "analysable": {}, "analysed": {}, "zero_live": 0.0}
        if not conds:
            return out
        probes = search.probes(conds, bank)
        valid = {d: search._valid(c, bank) for d, c in conds.items()}
        trig, refused, _, contenders = search.triggers(conds, bank, probes,
                                                       return_contenders=True)
        raw = None
        if len(conds) == len(self.dets) > 1:
            zero = _zero_lag(valid)
            if zero is not None:
                raw = network_events(probes, trig, zero, search.config.tolerance_s, w, bank,
                                     bank.on_box_edge(), cluster=False)
        if not self.certified(st, conds, reads, contenders, raw):
            return None
        # the stretch's triggers on the whole series' sample numbers; those it owns
        first = {d: reads[d][0] for d in conds}
        trig = trig.assign(sample=trig["sample"].to_numpy(np.int64) +
                           trig["detector"].map(first).to_numpy(np.int64))
        out.update(all_trig=trig, trig=trig[self.owned(st, trig["detector"].to_numpy(str),
                                                        trig["sample"].to_numpy(np.int64))],
                   refused=refused)
        own = SegmentList([Segment(*st.own)])
        for d, c in conds.items():
            out["valid"][d] = (valid[d] & own).coalesce()
            out["analysable"][d] = (c.analysable & own).coalesce()
            # valid start samples, counted as the filter counts them
            fs = float(c.sample_rate)
            out["analysed"][d] = float(mask_from_segments(
                out["valid"][d], float(c.t0), fs, c.whitened.size).sum()) / fs
        if raw is None:  # one detector, or not all of them here: no coincidences
            return out
        events = cluster_events(raw, w)
        anchors = events["anchor_detector"].to_numpy(str)
        sample_of = dict(zip(trig["trigger_id"].to_numpy(np.int64),
                             trig["sample"].to_numpy(np.int64), strict=True))
        seeds = np.array([sample_of[int(r[f"{a}_trigger_id"])] for a, (_, r)
                          in zip(anchors, events.iterrows(), strict=True)], np.int64)
        out["cands"] = events[self.owned(st, anchors, seeds)]
        owned_valid = {d: out["valid"][d] for d in conds}
        zero = _zero_lag(owned_valid)
        out["zero_live"] = float(zero.live_s) if zero is not None else 0.0
        try:
            out["plan"], out["background"] = search.time_slides(probes, trig, owned_valid, bank,
                                                                self.exclude)
        except InputError:  # the owned interval holds no coincident time
            pass
        return out

    def certified(self, st: Stretch, conds: Mapping[str, Any], reads: Mapping[str, tuple],
                  contenders: Mapping[str, pd.DataFrame], raw: pd.DataFrame | None) -> bool:
        """Whether the stretch's triggers and candidates in its owned interval are the
        whole series' (:func:`~ringsearch.search.attimes.certify`)."""
        from gwpy.segments import Segment, SegmentList

        from ringsearch.search.attimes import certify

        cfg = self.search.config
        w = self.search.cluster_window(self.bank)
        half = max(coincidence_windows(self.dets, cfg.tolerance_s).values(), default=0.0)
        zones = {d: complete_zone(c, reads[d], self.sources[d].n_samples, self.longest)
                 for d, c in conds.items()}
        stable, network = certify(zones, contenders, raw, w, half)
        span = _span(self.sources)
        pad = 2.0 / float(next(iter(conds.values())).sample_rate)  # refined times move by < 1
        need = SegmentList([Segment(max(st.own[0], span[0]) - pad, min(st.own[1], span[1]) + pad)])
        sure = [*stable.values(), network] if raw is not None else list(stable.values())
        return all(abs(need - s) <= 0 for s in sure)

    def owned(self, st: Stretch, detectors: np.ndarray, samples: np.ndarray) -> np.ndarray:
        """True where a detector's on-grid sample lies in the stretch's owned interval."""
        out = np.zeros(len(samples), bool)
        for d, src in self.sources.items():
            lo, hi = st.owned_samples(src)
            out |= (detectors == d) & (samples >= lo) & (samples < hi)
        return out

    # ------------------------------------------------------------------ the whole search
    def run(self) -> Any:
        from tqdm import tqdm

        search = self.search
        cfg = search.config
        fs = float(next(iter(self.sources.values())).sample_rate)
        seglen = float(cfg.psd_seglen_s)
        window = search._gps_window()
        # the PSDs place the bank, and the bank sets the margins: read the PSDs first
        rough = plan_stretches(self.sources, cfg.stretch_s, seglen + 1.0, window)
        self.align = 1
        if self.given is None:
            psds = _stretch_psds(search, self.sources, rough, self.align, self.progress)
        else:
            psds = [dict(self.given)] * len(rough)
        have = {d: [p[d] for p in psds if d in p] for d in self.dets}
        for d, ps in have.items():
            if not ps:
                raise InputError(f"no stretch of the {d} data holds enough analysable time "
                                 f"to estimate a PSD ({2 * seglen:g} s).")
        f_high = cfg.f_high if cfg.f_high is not None else 0.8 * fs / 2
        self.bank = bank = search.place_bank({d: _median_psd(ps) for d, ps in have.items()},
                                             cfg.f_low, f_high, self.progress)
        self.longest = float(bank.duration_s.max())
        w = search.cluster_window(bank)
        half = max(coincidence_windows(self.dets, cfg.tolerance_s).values(), default=0.0)
        self.align = max(1, int(round(w / 2 * fs)))  # the filter's time bins
        reach = 0.5 + seglen + self.longest + half + 2.0 / fs
        parts, margins, used = [], [], []
        bar = tqdm(total=len(rough), desc="stretches", unit=" stretch", disable=not self.progress)
        for st, ps in zip(rough, psds, strict=True):
            res = None
            for k in MARGIN_WINDOWS:
                wide = Stretch(st.index, st.own, reach + k * w)
                res = self.one(wide, ps)
                if res is not None:
                    break
            if res is None:
                raise InputError(f"stretch {st.index} ({st.own[0]}:{st.own[1]}) could not be "
                                   f"certified with a margin of {MARGIN_WINDOWS[-1]:g} cluster "
                                   "windows; search these data as one whole series "
                                   "(stretch_s=None, --stretch 0).")
            parts.append(res)
            margins.append(k)
            used.append(wide)
            bar.update(1)
        bar.close()
        result = self.assemble(rough, parts, margins)
        # the loudest candidate's stretch (or the first with data) for plots and probes
        table = result["candidates"]
        where = int(table["_stretch"].iloc[0]) if len(table) else next(
            i for i, p in enumerate(parts) if "all_trig" in p)
        result["conditioned"] = self.condition(used[where], psds[where])[0]
        result["probes"] = self.search.probes(result["conditioned"], bank)
        result["candidates"] = table.drop(columns="_stretch")
        result["triggers"] = result["triggers"].drop(columns="_stretch")
        result["extra"]["conditioned_stretch"] = where
        return result

    def assemble(self, plan: list[Stretch], parts: list[dict], margins: list[float]) -> Any:
        """The fields of one search result from the stretches' parts: renumbered
        triggers, pooled background.  Candidates and triggers carry ``_stretch``
        (the stretch that owns them) until the caller has used it."""
        from ringsearch.search.attimes import renumber

        search, bank, dets = self.search, self.bank, self.dets
        span = _span(self.sources)
        key = ["detector", "template_index", "sample"]
        with_data = [p for p in parts if "all_trig" in p]
        if not with_data:
            raise InputError("no stretch of the data holds analysable time.")
        tagged = [p["trig"].assign(_round=i, _stretch=i) for i, p in enumerate(parts)
                  if len(p["trig"])]
        owned = (pd.concat(tagged, ignore_index=True)[key] if tagged
                 else pd.DataFrame(columns=key))
        extras = []
        for i, p in enumerate(parts):  # triggers a candidate refers to beyond its stretch
            if not len(p["cands"]):
                continue
            ids = set()
            for d in dets:
                ids |= set(p["cands"][f"{d}_trigger_id"].to_numpy(np.int64).tolist())
            t = p["all_trig"]
            t = t[t["trigger_id"].isin(ids)]
            t = t.merge(owned.drop_duplicates(), on=key)  # owned by a neighbour
            extras.append(t.assign(_round=i, _stretch=-1))
        trig_parts = tagged + extras or [with_data[0]["all_trig"].iloc[:0].assign(
            _round=0, _stretch=0)]
        cand_parts = [p["cands"].assign(_round=i, _stretch=i) for i, p in enumerate(parts)
                      if len(p["cands"])]
        if len(dets) > 1 and not cand_parts:
            cand_parts = [empty_events(dets).assign(_round=0, _stretch=0)]
        trig, zero, lookup = renumber(trig_parts, cand_parts if len(dets) > 1 else trig_parts,
                                      dets, key=tuple(key))
        valid = {d: _union([p["valid"].get(d) for p in parts]) for d in dets}
        analysed = {d: float(sum(p.get("analysed", {}).get(d, 0.0) for p in parts))
                    for d in dets}
        refused = pd.concat([p["refused"] for p in with_data], ignore_index=True)
        refused = refused.drop_duplicates(["detector", "template_id"]).reset_index(drop=True)
        extra: dict[str, Any] = {
            "analysable": {d: _union([p["analysable"].get(d) for p in parts]) for d in dets},
            "stretch_s": float(search.config.stretch_s),
            "stretches": pd.DataFrame({
                "stretch": [st.index for st in plan],
                "own_start_gps": [max(st.own[0], span[0]) for st in plan],
                "own_end_gps": [min(st.own[1], span[1]) for st in plan],
                "margin_windows": margins})}
        if len(dets) == 1:
            cands, slides = search.single_detector_candidates(trig, dets[0], analysed[dets[0]])
            background = empty_events(dets)
            method = SINGLE_METHOD
        else:
            background, slides = _pooled_slides(parts, dets, lookup)
            extra["slide_step_s"] = search.slide_step(dets, bank)
            cands = search.ranked(zero, background, slides, dets, extra)
            extra["coincident_time_s"] = float(slides["live_s"].iloc[0])
            method = SLIDES_METHOD
        return {"bank": bank, "triggers": trig, "candidates": cands, "background": background,
                "slides": slides, "refused": refused, "analysed_s": analysed, "method": method,
                "extra": extra, "valid": valid}


def _pooled_slides(parts: list[dict], dets: list[str], lookup: dict
                   ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """All stretches' time-slide events (trigger ids renumbered) and the slides table:
    each slide's coincident time summed over the stretches that hold it."""
    from ringsearch.search.attimes import remap_ids

    events, rows = [], {}
    for i, p in enumerate(parts):
        if p["background"] is not None and len(p["background"]):
            events.append(remap_ids(p["background"].assign(_round=i), lookup, dets)
                          .drop(columns="_round"))
        for sl in p["plan"]:
            row = rows.setdefault(sl.index, {"slide": sl.index,
                                             **{f"shift_{x}_s": float(sl.shifts[x])
                                                for x in dets}, "live_s": 0.0})
            row["live_s"] += float(sl.live_s)
    zero = {"slide": 0, **{f"shift_{x}_s": 0.0 for x in dets},
            "live_s": float(sum(p["zero_live"] for p in parts))}
    background = pd.concat(events, ignore_index=True) if events else empty_events(dets)
    return background, pd.DataFrame([zero] + [rows[k] for k in sorted(rows)])


def _union(segs: list) -> Any:
    from gwpy.segments import SegmentList

    out = SegmentList()
    for s in segs:
        if s is not None:
            out |= s
    return out.coalesce()


def search_stretches(search: Any, sources: Mapping[str, Any], *,
                     psds: Mapping[str, Any] | None = None,
                     background_exclude: Mapping[str, Any] | None = None,
                     progress: bool = False) -> Any:
    """The search of long strain, stretch by stretch (see the module's notes).

    Parameters
    ----------
    search : ringsearch.search.engine.Search
        The engine whose steps every stretch runs (its conditioning,
        probes, triggers, time slides and ranking).
    sources : mapping detector -> StrainSource
    psds : mapping detector -> FrequencySeries, optional
        Whiten every stretch with these (default: each stretch's own).
    background_exclude : mapping detector -> SegmentList, optional
        Times kept out of the time slides.
    progress : bool
        Progress bars over the stretches on stderr.

    Returns
    -------
    dict
        The fields of a :class:`~ringsearch.search.engine.SearchResult`
        (``bank, conditioned, triggers, candidates, background, slides,
        refused, analysed_s, method, probes, extra, valid``), which the engine
        builds.

    Examples
    --------
    >>> res = Search(stretch_s=512).run(long_files)  # doctest: +SKIP
    >>> res.extra["stretches"]  # doctest: +SKIP
    """
    return _Stretches(search, sources, psds, background_exclude, progress).run()
