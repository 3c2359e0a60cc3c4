"""The search engine end to end: network statistic, ids, gaps and gates, livetime and FAR."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from test_search_support import damped_sinusoids, use_reference_qnm, white_data

from ringsearch.physics.units import C_SI, YEAR_S
from ringsearch.search.bank import Bank
from ringsearch.search.engine import Search
from ringsearch.search.network import (
    light_travel_time,
    max_distinct_slides,
    slide_plan,
    wrap_segments,
)
from ringsearch.search.significance import assign_far, single_detector_far

FS = 1024.0


@pytest.fixture(autouse=True)
def _qnm(monkeypatch):
    use_reference_qnm(monkeypatch)


def _scaled(h, snr, f_high=400.0):
    f = np.fft.rfftfreq(h.size, 1 / FS)
    hw = np.fft.irfft(np.fft.rfft(h) * ((f >= 20) & (f <= f_high)), h.size)
    return h * snr / np.sqrt(np.sum(hw * hw))


def _pair(duration, seed, signals=(), f_high=400.0):
    """Two detectors of unit white stand-in noise; signals: (start_H1 s, dt_L1 s, f, tau,
    snr_H1, snr_L1)."""
    rng = np.random.default_rng(seed)
    n = int(duration * FS)
    sig = {"H1": np.zeros(n), "L1": np.zeros(n)}
    for start, dt, f, tau, snr_h, snr_l in signals:
        ph = np.exp(1j * rng.uniform(0, 2 * np.pi))
        sig["H1"] += _scaled(damped_sinusoids(n, FS, start, [f], [tau], ph), snr_h, f_high)
        sig["L1"] += _scaled(damped_sinusoids(n, FS, start + dt, [f], [tau], -ph), snr_l, f_high)
    return {d: white_data(duration, FS, rng, f_high=f_high, detector=d, signal=sig[d])
            for d in ("H1", "L1")}


def _small_bank():
    return Bank.from_box((60.0, 75.0), (0.6, 0.75), 0, 0.9, f_high=400.0, seed=0)


def test_light_travel_time_h1_l1():
    # H1-L1 separation ~3002 km -> 10.0 ms (Abbott et al. 2016, PRL 116, 061102: "up to
    # 10 ms") # from memory
    assert light_travel_time("H1", "L1") == pytest.approx(3.002e6 / C_SI, rel=2e-3)


def test_network_snr_is_the_quadrature_sum_and_keeps_detectors_below_threshold():
    # The trial: a noise candidate's network SNR (5.49) equalled H1 alone while L1
    # had 5.18 for the same template.  Here every injection's L1 contribution is counted,
    # even below L1's threshold: network_snr^2 = sum of the detectors' re-weighted SNR^2
    # exactly, and on average it is the injected network SNR^2 plus the noise's 2K per
    # detector (E[rho^2] = rho_opt^2 + 2K for a projection onto 2K dimensions, DESIGN.md);
    # the mean over 10 injections must lie within 4.5 standard errors (false failure ~1e-5).
    f, tau = 170.0, 0.006
    sigs = [(4.0 + 3.0 * i, 0.0071, f, tau, 10.0, 3.5) for i in range(10)]
    data = _pair(36.0, 3, sigs)
    bank = Bank.from_points([1.0], [0.5])
    bank.table["f220_hz"], bank.table["tau220_s"] = f, tau
    res = Search(bank=bank, snr_threshold=6.0, n_slides=0).run(data)
    c = res.candidates.sort_values("gps").reset_index(drop=True)
    assert len(c) == 10
    quad = np.sqrt(c.H1_snr_reweighted ** 2 + c.L1_snr_reweighted ** 2)
    np.testing.assert_allclose(c.network_snr, quad, rtol=1e-12)
    assert (c.L1_trigger_id == -1).all()          # L1 is below its threshold ...
    assert (c.L1_snr > 0).all()                   # ... and still counted
    # light travel enforced: the L1 peak lies within 10 ms + tolerance of the anchor
    assert (np.abs(c.L1_gps - c.gps) <= light_travel_time("H1", "L1") + 0.01 + 1e-9).all()
    net2 = c.H1_snr ** 2 + c.L1_snr ** 2
    expect = 10.0 ** 2 + 3.5 ** 2 + 2 * 2
    se = np.sqrt(np.sum(2 * 4 + 4 * (100.0 + 12.25))) / 10
    assert abs(net2.mean() - expect) < 4.5 * se


def test_noise_without_candidates_finishes_and_says_so(tmp_path):
    # The crash: a search with no coincident candidate ended in a KeyError.
    data = _pair(24.0, 1)
    res = Search(bank=_small_bank(), snr_threshold=12.0, n_slides=5).run(data)
    assert len(res.triggers) == 0 and len(res.candidates) == 0
    assert res.summary["candidates"] == [] and "no candidate" in res.summary["note"]
    out = res.write(tmp_path / "out", plots=True)
    assert json.loads((out / "summary.json").read_text())["loudest_candidate"] is None
    for name in ("triggers", "candidates", "background", "slides", "refused", "bank"):
        assert (out / f"{name}.parquet").exists()


def test_triggers_outside_common_time_and_ids_resolve(tmp_path):
    # The fault: candidates kept row positions of a filtered table and the summary
    # read them from the unfiltered one, so any trigger outside the common time made the
    # summary show another trigger.  Here L1 has a gap holding loud H1 signals, H1 has
    # a glitch-like burst that the gate removes, and every candidate's detectors must be
    # resolved by trigger id to the very rows of triggers.parquet.
    from gwpy.timeseries import TimeSeries

    from ringsearch.data.condition import condition
    from ringsearch.data.noise import gaussian_noise

    gps = 1_000_000_000.0
    rate = 2048.0
    out = {}
    for i, det in enumerate(("H1", "L1")):
        ts = gaussian_noise("design", 64.0, rate, 10 + i, gps_start=gps, detector=det)
        x = ts.value.copy()
        t = ts.times.value - gps
        for s in (12.0, 30.0, 46.0):  # ringdowns in both detectors (L1 7 ms later)
            d = s + (0.007 if det == "L1" else 0.0)
            on = t >= d
            x[on] += 4e-22 * np.exp(-(t[on] - d) / 0.005) * np.cos(2 * np.pi * 200 * (t[on] - d))
        if det == "L1":
            x[int(20 * rate):int(28 * rate)] = np.nan  # a gap; H1 keeps a signal in it ...
        else:
            on = (t >= 23.0) & (t < 23.05)
            x[on] += 1e-21 * np.exp(-(t[on] - 23.0) / 0.005) * np.cos(2 * np.pi * 180 *
                                                                       (t[on] - 23.0))
            burst = np.abs(t - 40.0) < 0.02  # ... and a loud burst the gate removes
            x[burst] += 5e-19 * np.sin(2 * np.pi * 300 * t[burst])
        out[det] = condition(TimeSeries(x, t0=gps, sample_rate=rate, name=det))
    assert len(out["H1"].gates) >= 1
    res = Search(mass=(40.0, 120.0), spin=(0.3, 0.9), min_match=0.9, n_slides=10).run(out)
    trig = res.triggers
    assert trig.trigger_id.is_unique
    common = res.conditioned["L1"].analysable & res.conditioned["H1"].analysable
    outside = [not any(float(s[0]) <= g < float(s[1]) for s in common) for g in trig.gps]
    assert any(outside)  # the case that broke the old summary
    folder = res.write(tmp_path / "s", plots=False)
    summary = json.loads((folder / "summary.json").read_text())
    table = pd.read_parquet(folder / "triggers.parquet").set_index("trigger_id")
    cands = pd.read_parquet(folder / "candidates.parquet")
    assert len(summary["candidates"]) == min(50, len(cands)) > 0
    for row in summary["candidates"]:
        for det, v in row["detectors"].items():
            if v["trigger"] is None:
                continue
            t = table.loc[v["trigger"]["trigger_id"]]
            assert t.detector == det
            assert v["trigger"]["gps"] == t.gps and v["trigger"]["snr"] == t.snr
            assert v["trigger"]["mass"] == t.mass_msun
    bg = pd.read_parquet(folder / "background.parquet")
    slides = pd.read_parquet(folder / "slides.parquet")
    for frame in (cands, bg):
        for det in ("H1", "L1"):
            ids = frame[f"{det}_trigger_id"]
            assert ids[ids >= 0].isin(table.index).all()
    assert set(bg.slide) <= set(slides.slide)
    refused = pd.read_parquet(folder / "refused.parquet")
    assert set(refused.columns) >= {"detector", "template_id", "reason"}


def test_slide_livetime_is_segment_arithmetic():
    # Brute force on a 1 ms grid: the coincident time of each slide is the measure of the
    # times that are valid in H1 and, shifted circularly in the common span, in L1.
    valid = {"H1": [(0.0, 30.0), (41.5, 100.0)], "L1": [(2.0, 60.0), (64.0, 97.0)]}
    plan = slide_plan(valid, 12, 7.3)
    grid = np.arange(0.0, 100.0, 1e-3) + 5e-4
    span = plan[0].span
    length = span[1] - span[0]

    def inside(t, segs):
        return np.any([(t >= a) & (t < b) for a, b in segs], axis=0)

    for s in plan:
        own_l = span[0] + np.mod(grid - s.shifts["L1"] - span[0], length)
        ok = inside(grid, valid["H1"]) & inside(own_l, valid["L1"]) & (grid >= span[0]) & (
            grid < span[1]) & inside(own_l, [span])
        assert s.live_s == pytest.approx(ok.sum() * 1e-3, abs=4e-3)
    assert plan[0].live_s == pytest.approx(28.0 + 18.5 + 33.0)
    assert list(wrap_segments([(0.0, 4.0)], 8.0, (0.0, 10.0))) == [(0.0, 2.0), (8.0, 10.0)]
    assert max_distinct_slides(32.0, 0.6, 2) == 52
    from ringsearch.errors import InputError

    with pytest.raises(InputError, match="do not fit"):
        slide_plan(valid, 500, 7.3)


def test_far_on_gapped_noise_follows_the_real_coincident_time():
    # Stationary noise: background events of every slide occur at one rate per second of
    # coincident time, so with gaps that make the slides' coincident time differ by ~2x,
    # the counts above a statistic must split between the shorter and the longer slides in
    # proportion to their coincident seconds (binomial test, two-sided, 1e-3 false-failure
    # probability).  The FAR of the zero lag is the count over the summed coincident time.
    data = _pair(192.0, 21)
    t0 = data["H1"].t0
    for d in data.values():
        d.analysable_segments = [(t0 + 1.0, t0 + 64.0), (t0 + 128.0, t0 + 191.0)]
    res = Search(bank=_small_bank(), snr_threshold=4.3, n_slides=60, slide_step_s=3.0,
                 veto=False).run(data)
    s = res.slides[res.slides.slide > 0]
    assert s.live_s.max() > 1.6 * s.live_s.min()
    bg = res.background
    assert len(bg) > 200
    x = np.quantile(bg.network_snr, 0.5)
    counts = bg[bg.network_snr >= x].groupby("slide").size().reindex(s.slide, fill_value=0)
    short = (s.live_s < s.live_s.median()).to_numpy()
    n_short, n_all = int(counts.to_numpy()[short].sum()), int(counts.sum())
    p_short = s.live_s.to_numpy()[short].sum() / s.live_s.sum()
    assert stats.binomtest(n_short, n_all, p_short).pvalue > 1e-3
    # FAR = louder background / summed coincident time (no n_slides x zero-lag shortcut)
    assert res.background_s == pytest.approx(s.live_s.sum())
    c = res.candidates
    if len(c):
        own = [int((bg.network_snr >= v).sum()) for v in c.network_snr]
        assert (c.n_louder_background.to_numpy() <= own).all()
        np.testing.assert_allclose(
            c.far_per_year, np.maximum(c.n_louder_background, 1) / s.live_s.sum() * YEAR_S)


def test_far_never_zero_and_excludes_own_triggers():
    cand = pd.DataFrame({"network_snr": [25.0], "H1_trigger_id": [0], "L1_trigger_id": [5]})
    bg = pd.DataFrame({"network_snr": [30.0, 9.0, 26.0], "H1_trigger_id": [0, 1, 2],
                       "L1_trigger_id": [6, 7, 5]})
    out = assign_far(cand, bg, 1000.0, ["H1", "L1"])
    # louder background: 30 (reuses H1 trigger 0) and 26 (reuses L1 trigger 5) -> none
    # left, so the FAR is the upper limit 1 / 1000 s, flagged
    assert bool(out.far_is_upper_limit.iloc[0])
    assert out.far_per_year.iloc[0] == pytest.approx(YEAR_S / 1000.0)
    bg.loc[0, "H1_trigger_id"] = 3
    out = assign_far(cand, bg, 1000.0, ["H1", "L1"])
    assert out.n_louder_background.iloc[0] == 1 and not out.far_is_upper_limit.iloc[0]


def test_single_detector_far_is_rate_of_other_louder_triggers():
    rng = np.random.default_rng(4)
    t = pd.DataFrame({"snr_reweighted": 5.0 + rng.exponential(1.0, 3600)})
    out = single_detector_far(t, 3600.0)
    top = out.loc[out.snr_reweighted.idxmax()]
    assert bool(top.far_is_upper_limit) and top.n_louder_background == 0
    med = out.snr_reweighted.median()
    row = out.iloc[(out.snr_reweighted - med).abs().argmin()]
    assert row.far_per_year == pytest.approx(len(t) / 2 / 3600.0 * YEAR_S, rel=0.05)


def test_projection_snr_on_conditioned_data_follows_noncentral_chi2():
    # Detection theory (DESIGN.md): rho^2 at the true template and start time is
    # noncentral chi2(2, rho_opt^2), with rho_opt from physics.ringdown.optimal_snr, on the
    # real data layer (design noise, Welch PSD, whitening).
    from gwpy.timeseries import TimeSeries

    from ringsearch.data.condition import condition
    from ringsearch.data.noise import gaussian_noise
    from ringsearch.physics.ringdown import damped_sinusoid, optimal_snr
    from ringsearch.search.bank import qnm_f_tau
    from ringsearch.search.correlate import projection_snr

    fs, gps = 4096.0, 1_000_000_000.0
    f, tau = qnm_f_tau(np.array([65.0]), np.array([0.7]), 0)
    starts = 4.0 + 2.5 * np.arange(10) + 0.37 / fs  # off the sample grid
    noise = gaussian_noise("design", 32.0, fs, 11, gps_start=gps, detector="H1")
    t = noise.times.value
    psd_ref = condition(noise).psd
    data = noise.value.copy()
    for s in starts:
        h = damped_sinusoid(t, f[0], tau[0], gps + s)
        data += h * 12.0 / optimal_snr(TimeSeries(h, t0=gps, sample_rate=fs), psd_ref, 20.0,
                                       0.8 * fs / 2)
    cond = condition(TimeSeries(data, t0=gps, sample_rate=fs, name="H1"))
    rho2 = np.array([projection_snr(cond, f, tau, gps + s)["snr"] ** 2 for s in starts])
    # KS at 1e-3 (false-failure probability 1e-3 for the fixed seed); the PSD estimated
    # from 32 s of data scatters by a few per cent, well inside the test's power
    assert stats.kstest(rho2, stats.ncx2(2, 144.0).cdf).pvalue > 1e-3


def test_candidates_on_the_edge_of_the_box_are_flagged():
    # A ringdown from outside the box (150 Msun against a 60-120 Msun bank) is fitted by a
    # template on the box's edge: its mass and spin are a boundary value, which the
    # candidate says; a bank of listed points has no box and no edge.
    from ringsearch.search.bank import qnm_f_tau

    bank = Bank.from_box((60.0, 120.0), (0.3, 0.8), 0, 0.97, f_high=400.0, seed=0)
    edge = bank.on_box_edge()
    assert edge.any() and not edge.all()
    (f,), (tau,) = qnm_f_tau(np.array([150.0]), np.array([0.6]), 0)
    data = _pair(16.0, 7, [(8.0, 0.005, f, tau, 20.0, 16.0)])
    res = Search(bank=bank, n_slides=0).run(data)
    top = res.candidates.iloc[0]
    assert abs(top.gps - (data["H1"].t0 + 8.0)) < 0.05
    assert bool(top.on_box_edge) and res.summary["candidates"][0]["on_box_edge"]
    assert "boundary value" in res.summary["candidates"][0]["note"]
    assert not Bank.from_points([60.0, 70.0], [0.6, 0.7]).on_box_edge().any()


def test_refused_templates_are_kept_for_every_detector(tmp_path):
    # The fault: only the last detector's refused templates were kept.  A template
    # whose two modes are numerically the same cannot be separated by any data: both
    # detectors refuse it, and both refusals reach refused.parquet and the summary.
    bank = Bank.from_points([65.0, 70.0], [0.7, 0.6], n_overtones=1)
    bank.table.loc[1, "f221_hz"] = bank.table.loc[1, "f220_hz"]
    bank.table.loc[1, "tau221_s"] = bank.table.loc[1, "tau220_s"] * (1 + 1e-9)
    res = Search(bank=bank, n_slides=0).run(_pair(16.0, 2))
    assert sorted(res.refused.detector) == ["H1", "L1"]
    assert (res.refused.template_id == 1).all() and res.refused.reason.str.contains(
        "singular").all()
    out = res.write(tmp_path / "r", plots=False)
    summary = json.loads((out / "summary.json").read_text())
    assert {d: len(v) for d, v in summary["refused_templates"].items()} == {"H1": 1, "L1": 1}
    assert len(pd.read_parquet(out / "refused.parquet")) == 2


def _anchored(cands, at, dets):
    """Candidates whose anchor time lies in the requested times of their anchor detector."""
    anchor = cands["anchor_detector"].to_numpy(str)
    keep = np.zeros(len(cands), bool)
    for d in dets:
        for a, b in at[d]:
            keep |= (anchor == d) & (cands.gps.to_numpy() >= a) & (cands.gps.to_numpy() <= b)
    return cands[keep].sort_values(["anchor_detector", "gps"]).reset_index(drop=True)


def _same_candidates(fast, full, at):
    dets = full.detectors
    a, b = _anchored(fast.candidates, at, dets), _anchored(full.candidates, at, dets)
    assert len(a) == len(b)
    assert (a.template_index.to_numpy() == b.template_index.to_numpy()).all()
    assert a.gps.to_numpy() == pytest.approx(b.gps.to_numpy(), abs=1e-6)
    assert a.network_snr.to_numpy() == pytest.approx(b.network_snr.to_numpy(), rel=1e-6)
    # the trigger ids of the candidates refer to the result's own triggers
    trig = fast.triggers.set_index("trigger_id")
    for d in dets:
        ids = a[f"{d}_trigger_id"].to_numpy()
        assert np.isin(ids[ids >= 0], trig.index).all()
        own = trig.loc[ids[ids >= 0]]
        assert (own.detector == d).all()
    return len(a)


def test_search_at_requested_times_gives_the_full_series_numbers():
    # The campaign's fast path: asking for the candidates anchored at given times must
    # give those of the whole-series search there -- the same bins, refinement, veto,
    # clustering and network statistic -- to 1e-6 relative (issue: "the same numbers as
    # the full series").  Injections of SNR 5-16 in two detectors, +-15 ms around each.
    from gwpy.segments import Segment, SegmentList

    from ringsearch.search.bank import qnm_f_tau

    rng = np.random.default_rng(31)
    bank = Bank.from_box((60.0, 120.0), (0.3, 0.8), 0, 0.95, f_high=400.0, seed=0)
    m, s = rng.uniform(62, 118, 14), rng.uniform(0.35, 0.78, 14)
    f, tau = qnm_f_tau(m, s, 0)
    starts = 4.0 + 3.0 * np.arange(14) + rng.uniform(0, 1, 14) / FS
    snr = rng.uniform(5.0, 16.0, 14)
    sigs = [(starts[i], 0.006, f[i], tau[i], snr[i], 0.8 * snr[i]) for i in range(14)]
    data = _pair(48.0, 12, sigs)
    t0 = data["H1"].t0
    search = Search(bank=bank, n_slides=0)
    full = search.run(data)
    half = 0.015
    at = {"H1": SegmentList([Segment(t0 + t - half, t0 + t + half) for t in starts]),
          "L1": SegmentList([Segment(t0 + t + 0.006 - half, t0 + t + 0.006 + half)
                             for t in starts])}
    fast = search.run(data, at=at)
    assert fast.method != full.method and fast.candidates.far_per_year.isna().all()
    assert _same_candidates(fast, full, at) >= 10
    # only candidates anchored at the requested times are returned
    assert len(_anchored(fast.candidates, at, full.detectors)) == len(fast.candidates)


def test_search_at_requested_times_widens_where_it_cannot_certify(monkeypatch):
    # Dense noise triggers (threshold 3, a 2-mode bank: ~10 triggers per second and
    # detector) make chains of ever louder candidates that reach past the first regions:
    # those times are searched again wider, and the candidates are still the whole
    # series' ones.  With no margin at all nothing is certified and every requested time
    # falls back to the whole data.
    from gwpy.segments import Segment, SegmentList

    from ringsearch.search import attimes

    bank = Bank.from_box((60.0, 120.0), (0.3, 0.8), 1, 0.9, f_high=400.0, seed=0)
    data = _pair(40.0, 4)
    t0 = data["H1"].t0
    search = Search(bank=bank, n_slides=0, snr_threshold=3.0)
    full = search.run(data)
    times = t0 + np.arange(3.0, 37.0, 1.7)
    at = {d: SegmentList([Segment(t - 0.05, t + 0.05) for t in times]) for d in ("H1", "L1")}
    monkeypatch.setattr(attimes, "MARGIN_WINDOWS", (2.5, 5.0, 10.0))
    fast = search.run(data, at=at)
    assert len(fast.extra["at_times_rounds"]) >= 3  # two widenings were needed
    assert _same_candidates(fast, full, at) >= 10
    monkeypatch.setattr(attimes, "MARGIN_WINDOWS", (0.0,))
    whole = search.run(data, at=at)
    assert whole.extra["at_times_rounds"] == [20, 20]
    assert _same_candidates(whole, full, at) >= 10


def test_lazy_refinement_keeps_the_triggers_of_refining_every_peak():
    # Triggers are the greedy clustering of every refined peak; the engine refines only
    # the peaks that can still win (in the order of an upper bound of their refined SNR,
    # skipping those a kept trigger already covers).  On noise with a two-mode bank,
    # where peaks gain most between samples, the two give the same triggers.
    from test_search_support import white_data

    from ringsearch.search.correlate import filter_peaks
    from ringsearch.search.triggers import (
        GRID_MARGIN,
        cluster_triggers,
        detector_triggers,
        peak_table,
    )

    bank = Bank.from_box((60.0, 120.0), (0.3, 0.8), 1, 0.97, f_high=400.0, seed=1)
    cond = white_data(60.0, FS, np.random.default_rng(5), f_high=400.0)
    search = Search(bank=bank, snr_threshold=4.5)
    probe = search.probes({"H1": cond}, bank)["H1"]
    w = search.cluster_window(bank)
    peaks, _ = filter_peaks(cond, bank.f_hz, bank.tau_s, 4.5 * GRID_MARGIN, w / 2,
                            weighted=probe.weighted, grams=probe.grams)
    lazy = detector_triggers(probe, peaks, bank, 4.5, w)
    every = [probe.refine(int(i), int(k)) for i, k in zip(peaks.template_index,
                                                           peaks["sample"], strict=True)]
    table = peak_table(every, bank, "H1")
    full = cluster_triggers(table[table.snr >= 4.5].reset_index(drop=True), w,
                            column="snr_reweighted")
    assert len(lazy) == len(full) > 20
    np.testing.assert_array_equal(lazy.template_index, full.template_index)
    np.testing.assert_allclose(lazy.snr_reweighted, full.snr_reweighted, rtol=1e-12)
    # the contenders (for the at-times certificate) are every refined peak above the
    # threshold, with bounds that hold the re-weighted SNR of vetoing them all
    _, cont = detector_triggers(probe, peaks, bank, 4.5, w, return_contenders=True)
    above = table[table.snr >= 4.5].sort_values("gps").reset_index(drop=True)
    cont = cont.sort_values("gps").reset_index(drop=True)
    assert len(cont) == len(above) > len(lazy)
    np.testing.assert_allclose(cont.gps, above.gps, rtol=0, atol=1e-9)
    rw = above.snr_reweighted.to_numpy()
    assert (cont.lower.to_numpy() <= rw * (1 + 1e-12)).all()
    assert (cont.upper.to_numpy() >= rw * (1 - 1e-12)).all()
    assert np.isfinite(cont.lower).sum() >= len(lazy)
