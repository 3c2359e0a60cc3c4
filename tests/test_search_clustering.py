"""Greedy clustering on part of the data: where its result is certified to equal the whole's.

The searches at requested times (campaigns) cluster the candidates of short
regions only, and rely on :func:`stable_segments` to say where that equals
clustering everything.  These tests compare against the brute force: cluster
a whole random set, and a partial set that agrees with it only inside some
zones (and holds different candidates outside them).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from gwpy.segments import Segment, SegmentList

from ringsearch.search.triggers import cluster_triggers, stable_segments

TRIALS = 1000


def _kept(times, loud, window):
    table = pd.DataFrame({"gps": times, "snr": loud})
    return set(np.round(cluster_triggers(table, window).gps.to_numpy(), 12))


def _inside(t, segs):
    t = np.asarray(t, float)
    out = np.zeros(t.size, bool)
    for s in segs:
        out |= (t >= float(s[0])) & (t <= float(s[1]))
    return out


def test_stable_segments_hold_the_whole_sets_clustering():
    # 400 random trials: candidates at rate 2-12 per window on [0, 30] s with random keys;
    # the partial set keeps them inside two random zones and replaces the rest by other
    # random candidates.  Inside the stable segments the kept candidates must be the
    # same.  Some keys are known only by an upper bound (as vetoes computed lazily).
    rng = np.random.default_rng(2026)
    w = 0.25
    covered, failures = 0.0, 0
    for _ in range(TRIALS):
        rate = rng.uniform(2, 12) / w
        n = rng.poisson(rate * 30)
        t = np.sort(rng.uniform(0, 30, n))
        loud = rng.exponential(1.0, n) + 5.0
        zones = SegmentList()
        for _ in range(2):
            a = rng.uniform(0, 25)
            zones.append(Segment(a, a + rng.uniform(0.5, 5)))
        zones.coalesce()
        inside = _inside(t, zones)
        m = rng.poisson(rate * 30)
        t_out = rng.uniform(0, 30, m)
        t_out = t_out[~_inside(t_out, zones)]
        part_t = np.concatenate([t[inside], t_out])
        # outside, louder candidates: what lies beyond the zones pushes in as far as it can
        part_l = np.concatenate([loud[inside], rng.exponential(1.0, t_out.size) + 6.0])
        known = rng.random(part_t.size) < 0.7
        lower = np.where(known, part_l, -np.inf)
        upper = np.where(known, part_l, part_l + rng.exponential(0.5, part_t.size))
        stable = stable_segments(zones, part_t, lower, upper, w)
        whole, part = _kept(t, loud, w), _kept(part_t, part_l, w)
        whole_in = {x for x in whole if _inside([x], stable)[0]}
        part_in = {x for x in part if _inside([x], stable)[0]}
        if whole_in != part_in:
            failures += 1
        covered += sum(float(s[1] - s[0]) for s in stable) / sum(
            float(s[1] - s[0]) for s in zones)
    # not vacuous: a fair share of the zones is certified on average
    assert failures == 0, failures
    assert covered / TRIALS > 0.3


def test_a_zone_without_firewalls_is_not_certified():
    # A chain of ever louder candidates, closer than the window, running out of the zone:
    # what is kept inside depends on what lies outside, and nothing is certified.
    w = 0.5
    t = np.arange(0.0, 6.0, 0.3)
    loud = 5.0 + t
    zone = SegmentList([Segment(0.0, 4.0)])
    inside = t <= 4.0
    assert not stable_segments(zone, t[inside], loud[inside], loud[inside], w)
    # two candidates louder than their neighbours make firewalls: certified between them
    loud2 = loud.copy()
    loud2[[3, 9]] = 50.0
    seg = stable_segments(zone, t[inside], loud2[inside], loud2[inside], w)
    assert len(seg) == 1
    assert abs(float(seg[0][0]) - t[3]) < 1e-9 and abs(float(seg[0][1]) - t[9]) < 1e-9
    # a firewall needs its whole window inside the zone
    loud3 = loud.copy()
    loud3[[1, 9]] = 50.0
    seg = stable_segments(zone, t[inside], loud3[inside], loud3[inside], w)
    assert not seg


def test_an_empty_zone_is_stable_one_window_in_from_each_edge():
    seg = stable_segments(SegmentList([Segment(10.0, 12.0)]), [], [], [], 0.5)
    assert len(seg) == 1
    assert abs(float(seg[0][0]) - 10.5) < 1e-6 and abs(float(seg[0][1]) - 11.5) < 1e-6
