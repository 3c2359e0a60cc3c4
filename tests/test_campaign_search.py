"""The whole campaign chain with the real search: draw, inject, condition, filter, match, bin.

Checked against detection theory: with one template exactly matching the
injections, known injection times and Gaussian noise, rho^2 at the injection
time is non-central chi-squared with 2K = 2(N+1) degrees of freedom and
non-centrality rho_opt^2 (DESIGN.md, "The matched filter"; the standard
result for a linear least-squares projection of Gaussian data, e.g. Helstrom,
"Statistical Theory of Signal Detection", 1968 -- # from memory), so the
detection probability at a fixed threshold is
``scipy.stats.ncx2.sf(threshold**2, 2(N+1), rho_opt**2)``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from ringsearch.campaign import run_campaign, spec_from_dict
from ringsearch.campaign.efficiency import binomial_interval

THRESHOLD = 5.0

EXACT = {
    "campaign": {"seed": 61, "name": "exact-template"},
    "data": {"source": "synthetic", "detectors": ["H1"], "chunk_s": 64,
             "whiten_with": "model", "gating": False, "sample_rate": 2048},
    "injections": {"count": 360, "overtones": [0, 1, 2], "spacing_s": 1.0,
                   "mass": 60.0, "spin": 0.7, "align_to_samples": True,
                   "overtone_ratio": {"dist": "uniform", "low": 0.5, "high": 1.5},
                   "loudness": {"by": "snr", "snr": {"dist": "uniform", "low": 1.0,
                                                     "high": 9.0}}},
    # the search with one exact template and no veto: rho^2 at the injection's start is the
    # statistic of detection theory.  The search takes the loudest start time, which near
    # threshold noise moves by a few ms for templates with short overtones (free amplitudes
    # absorb a shift except at the abrupt start), so matching allows 10 ms
    "search": {"mass": [60.0, 60.0], "spin": [0.7, 0.7], "template_overtones": [0, 1, 2],
               "match_window_s": 0.01, "veto": False, "snr_threshold": THRESHOLD},
    "threshold": {"snr": THRESHOLD, "slides": 0},
    "report": {"snr_bins": [1, 3, 4, 5, 6, 7, 9], "confidence": 0.9},
}


@pytest.fixture(scope="module")
def exact_campaign(tmp_path_factory):
    out = tmp_path_factory.mktemp("exact") / "out"
    run_campaign(spec_from_dict(EXACT), out, workers=1, progress=False)
    return out


def test_efficiency_matches_noncentral_chi2(exact_campaign):
    found = pd.read_parquet(exact_campaign / "found.parquet")
    diag = found[found["injected_overtones"] == found["template_overtones"]]
    edges = np.asarray(EXACT["report"]["snr_bins"], float)
    # 99.99 % Wilson intervals; 18 bins (3 N x 6): false failure < 18e-4 ~ 0.2 %.
    checked = 0
    for n, g in diag.groupby("injected_overtones"):
        k = 2 * (n + 1)
        idx = np.digitize(g["network_snr"], edges) - 1
        for b in range(len(edges) - 1):
            sel = g[idx == b]
            if len(sel) < 10:
                continue
            expected = stats.ncx2.sf(THRESHOLD**2, k, sel["network_snr"].to_numpy()**2).mean()
            lo, hi = binomial_interval(int(sel["found"].sum()), len(sel), 0.9999)
            assert lo <= expected <= hi, (n, b, sel["found"].mean(), expected)
            checked += 1
    assert checked >= 15
    assert (found["searched"]).all()  # every injection inside filtered time


def test_recovered_snr_follows_optimal_snr(exact_campaign):
    # Injections at SNR >= 7.5 are all found (detection theory: P(rho^2 < 25) at the true
    # start is below 1e-3 for each, ncx2.cdf).  At the true start E[rho^2] = 2K + rho_opt^2
    # with Var = 2(2K) + 4 rho_opt^2; the search's statistic is the loudest start, so its
    # mean exceeds that by what maximising over start times gains (measured +6.4, -0.9,
    # +7.5 for N = 0, 1, 2): the mean residual must lie within 4.5 standard errors below
    # the theory and 4.5 standard errors + 12 above it (false failure ~1e-5 per N).
    found = pd.read_parquet(exact_campaign / "found.parquet")
    diag = found[found["injected_overtones"] == found["template_overtones"]]
    for n, g in diag.groupby("injected_overtones"):
        k = 2 * (n + 1)
        g = g[g["network_snr"] >= 7.5]
        assert len(g) >= 10 and g["found"].all()
        rho2 = g["network_snr"].to_numpy() ** 2
        resid = g["stat"].to_numpy() ** 2 - (k + rho2)
        se = np.sqrt(np.sum(2 * k + 4 * rho2)) / len(g)
        assert -4.5 * se < resid.mean() < 4.5 * se + 12.0, (n, resid.mean(), se)
        # the recovered template is the only template; its start sits at the injection
        # within the few ms noise moves the best start of a multi-mode template
        assert np.all(g["gps_error_s"].abs() < 0.01)


def test_efficiency_rises_with_snr(exact_campaign):
    eff = pd.read_csv(exact_campaign / "efficiency.csv")
    for _, g in eff[eff["binned_by"] == "network_snr"].groupby(
            ["injected_overtones", "template_overtones"]):
        g = g.sort_values("bin_lo")
        running_lo = np.maximum.accumulate(g["ci_lo"].to_numpy())
        assert (g["ci_hi"].to_numpy() >= running_lo - 1e-12).all()


SMALL = {
    "campaign": {"seed": 9, "name": "small-network"},
    "data": {"source": "synthetic", "detectors": ["H1", "L1"], "chunk_s": 24, "pad_s": 6.0},
    "injections": {"count": 12, "overtones": [0, 1], "spacing_s": 2.0,
                   "mass": {"dist": "uniform", "low": 55.0, "high": 65.0},
                   "spin": {"dist": "uniform", "low": 0.6, "high": 0.75},
                   "loudness": {"by": "snr", "snr": {"dist": "uniform", "low": 4.0,
                                                     "high": 20.0}}},
    "search": {"mass": [60.0, 60.0], "spin": [0.7, 0.7], "template_overtones": [0, 1]},
    "threshold": {"far_per_year": 1e6, "slides": 3},
}


def test_dask_staged_and_single_runs_are_identical(tmp_path):
    distributed = pytest.importorskip("distributed")
    spec = spec_from_dict(SMALL)
    run_campaign(spec, tmp_path / "one", progress=False)
    # staged: one chunk, stop, resume the rest (what a killed-and-resumed run does)
    run_campaign(spec, tmp_path / "staged", progress=False, max_chunks=1, finalize=False)
    run_campaign(spec, tmp_path / "staged", progress=False)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        run_campaign(spec, tmp_path / "dask", scheduler=client, progress=False)
    for other in ("staged", "dask"):
        for name in ("injections.parquet", "found.parquet", "background.parquet"):
            pd.testing.assert_frame_equal(pd.read_parquet(tmp_path / "one" / name),
                                          pd.read_parquet(tmp_path / other / name))
        for name in ("efficiency.csv", "threshold.csv"):
            assert (tmp_path / "one" / name).read_text() == (tmp_path / other / name).read_text()
    # the banks were placed once, in the submitting process, and every chunk loaded them
    from ringsearch.campaign.worker import campaign_bank
    from ringsearch.search.bank import Bank

    for n in (0, 1):
        saved = Bank.load(tmp_path / "one" / "shared" / f"bank_N{n}.parquet")
        pd.testing.assert_frame_equal(saved.table, campaign_bank(spec.config, n).table)
    th = pd.read_csv(tmp_path / "one" / "threshold.csv")
    assert (th["kind"] == "far").all() and (th["background_years"] > 0).all()
    found = pd.read_parquet(tmp_path / "one" / "found.parquet")
    matched = found["stat"].notna()
    assert matched.any() and found.loc[matched, "far_per_year"].notna().all()
    # a FAR is never 0: with nothing louder in the background it is an upper limit
    assert (found.loc[matched, "far_per_year"] > 0).all()
    bg = pd.read_parquet(tmp_path / "one" / "background.parquet")
    for r in found[matched].itertuples():
        louder = (bg.loc[bg.template_overtones == r.template_overtones, "stat"] >= r.stat).sum()
        assert bool(r.far_is_upper_limit) == (louder == 0)


def test_open_data_campaign_rises_from_zero_to_one(gw150914_files, tmp_path):
    from ringsearch.report import make_report

    raw = {
        "campaign": {"seed": 14, "name": "open-data-test"},
        "data": {"source": "files", "files": {d: str(p) for d, p in gw150914_files.items()},
                 "chunk_s": 32, "pad_s": 8.0, "reuse": 8,
                 # GW150914 itself (merger at GPS 1126259462.42) stays out
                 "avoid": [[1126259460.4, 1126259464.4]]},
        "injections": {"count": 80, "overtones": [0], "spacing_s": 1.0,
                       "mass": {"dist": "uniform", "low": 60.0, "high": 70.0},
                       "spin": {"dist": "uniform", "low": 0.6, "high": 0.75},
                       "loudness": {"by": "snr", "snr": {"dist": "uniform", "low": 1.0,
                                                         "high": 30.0}}},
        "search": {"mass": [55.0, 75.0], "spin": [0.5, 0.8], "min_match": 0.8,
                   "template_overtones": [0]},
        "threshold": {"snr": 9.0, "slides": 0},
        "report": {"snr_bins": [1, 5, 10, 15, 20, 30]},
    }
    out = tmp_path / "out"
    run_campaign(spec_from_dict(raw), out, progress=False)
    inj = pd.read_parquet(out / "injections.parquet")
    assert not ((inj["gps"] > 1126259460.4 - 0.5) & (inj["gps"] < 1126259464.4 + 0.5)).any()
    eff = pd.read_csv(out / "efficiency.csv")
    eff = eff[eff["binned_by"] == "network_snr"].sort_values("bin_lo")
    # Gaussian-noise theory for K=2 (scipy.stats.ncx2) gives < 1 % detection below
    # SNR 5 and > 99 % above SNR 15 at threshold 9 (plus a little for the bank's
    # maximisation); real noise need only come close.
    assert eff["efficiency"].iloc[0] <= 0.2 and eff["ci_lo"].iloc[0] <= 0.05
    assert eff["efficiency"].iloc[-1] >= 0.8
    assert make_report(out).exists()


def test_gated_injections_count_as_missed(tmp_path):
    # SNR 400 ringdowns trip the conditioning's gate (default 100 whitened-noise sigma):
    # the search cannot find them, and the efficiency must say so instead of
    # silently dropping them.
    import copy
    import json

    raw = copy.deepcopy(SMALL)
    raw["data"]["gating"] = True
    raw["injections"]["loudness"] = {"by": "snr", "snr": 400.0}
    raw["threshold"] = {"snr": 8.0, "slides": 0}
    out = tmp_path / "out"
    run_campaign(spec_from_dict(raw), out, progress=False)
    found = pd.read_parquet(out / "found.parquet")
    assert found["gated"].all() and not found["found"].any()
    eff = pd.read_csv(out / "efficiency.csv")
    assert eff["n_injected"].sum() == 2 * 12 and eff["n_found"].sum() == 0
    assert json.loads((out / "summary.json").read_text())["n_unsearched"] == 0


def test_at_times_campaign_equals_full_campaign_injection_by_injection(tmp_path):
    # The fast method (search only around each injection; background searched once,
    # without injections) measures the same search as filtering every chunk whole: every
    # injection's ranking statistic agrees to 1e-6 and its verdict is the same.
    import copy

    raw = copy.deepcopy(SMALL)
    raw["threshold"] = {"snr": 8.0, "slides": 0}
    runs = {}
    for mode in ("at-times", "full"):
        raw["search"]["mode"] = mode
        out = tmp_path / mode
        run_campaign(spec_from_dict(raw), out, progress=False)
        runs[mode] = pd.read_parquet(out / "found.parquet").set_index(
            ["injection_id", "template_overtones"]).sort_index()
    a, b = runs["at-times"], runs["full"]
    assert a.index.equals(b.index) and a["stat"].notna().sum() >= 10
    both = a["stat"].notna()
    assert (b["stat"].notna() == both).all()
    np.testing.assert_allclose(a.loc[both, "stat"], b.loc[both, "stat"], rtol=1e-6)
    assert (a["found"] == b["found"]).all()


def test_background_is_searched_once_with_the_stated_precision(tmp_path):
    # Synthetic data: the number of noise-only stretches follows from the FAR target and
    # the requested precision (n = 1/p^2 louder events); the injection chunks make no
    # background of their own, and threshold.csv states the precision reached.
    import copy
    import json

    from ringsearch.campaign.draw import background_chunks_needed

    raw = copy.deepcopy(SMALL)
    raw["threshold"] = {"far_per_year": 2e6, "slides": 20, "background_precision": 0.5}
    spec = spec_from_dict(raw)
    n_bg = background_chunks_needed(spec)
    assert n_bg >= 1
    out = tmp_path / "bg"
    run_campaign(spec, out, progress=False)
    chunks = pd.read_parquet(out / "plan" / "chunks.parquet")
    assert (chunks["kind"] == "background").sum() == n_bg
    live = pd.read_parquet(out / "livetime.parquet")
    bg_chunks = set(chunks.loc[chunks["kind"] == "background", "chunk"])
    assert set(live["chunk"]) <= bg_chunks and len(live) > 0
    th = pd.read_csv(out / "threshold.csv")
    assert {"n_background_above", "far_relative_error"} <= set(th.columns)
    summary = json.loads((out / "summary.json").read_text())
    assert summary["search_mode"] == "at-times" and summary["background_chunks"] == n_bg
