"""A campaign measures the search people run: the same injections give the same numbers.

One injection list goes into the GW150914 open data twice: through
``ringsearch inject`` followed by ``ringsearch search`` on the files it
writes, and through a campaign on the original files.  Both run the one
search engine, so every injection's ranking statistic and found/missed
verdict must agree (to 1e-6 relative), which they could not if the campaign
ran a pipeline of its own.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from ringsearch.cli import main

#: GW150914 (merger GPS 1126259462.42, Abbott et al. 2016, PRL 116, 061102) is kept out
AVOID = [1126259460.4, 1126259464.4]
THRESHOLD = 8.0
WINDOW_S = 0.01


def _list(path, files):
    """Six ringdowns of the open data's own box, distances spread so that SNRs straddle
    the threshold (distance rows: the injected strain does not depend on any PSD)."""
    from ringsearch.data.injections import check_injection_table, make_sources
    from ringsearch.search.engine import Search

    rows = pd.DataFrame({
        "injection_id": np.arange(6),
        "gps": [1126259450.3, 1126259452.7, 1126259456.1, 1126259467.9, 1126259471.2,
                1126259474.0],
        "mass": [62.0, 70.0, 80.0, 66.0, 90.0, 58.0],
        "spin": [0.7, 0.6, 0.8, 0.65, 0.75, 0.55],
        "injected_overtones": [0, 1, 0, 1, 0, 0],
        "ratio_1": [np.nan, 0.8, np.nan, 1.2, np.nan, np.nan],
        "phase_1": [np.nan, 1.0, np.nan, 2.5, np.nan, np.nan],
        "phase_0": [0.3, 1.1, 2.0, 4.0, 5.5, 0.9],
        "ra": [1.9, 0.4, 3.3, 5.0, 2.2, 1.1], "dec": [-1.2, 0.5, 0.1, -0.4, 0.9, -0.7],
        "inclination": [0.3, 2.8, 1.0, 0.2, 2.5, 0.6],
        "polarization": [0.8, 2.0, 0.1, 1.5, 3.0, 0.4],
        "distance_mpc": 100.0, "epsilon": 0.01})
    psds = Search().estimate_psds(list(files.values()))
    _, out = make_sources(check_injection_table(rows), psds, 4096.0, 20.0, 1638.4)
    target = np.array([5.0, 7.0, 9.0, 12.0, 16.0, 30.0])
    rows["distance_mpc"] = 100.0 * out["network_snr"].to_numpy() / target
    rows.to_csv(path, index=False)
    return path


@pytest.mark.filterwarnings("ignore::Warning")
def test_search_and_campaign_agree_injection_by_injection(gw150914_files, tmp_path):
    from ringsearch.campaign import run_campaign
    from ringsearch.campaign.spec import load_spec
    from ringsearch.search.bank import Bank

    files = {d: str(p) for d, p in gw150914_files.items()}
    listed = _list(tmp_path / "list.csv", files)
    bank = Bank.from_box((50.0, 100.0), (0.5, 0.9), 0, 0.9, seed=0)
    bank.save(tmp_path / "bank.parquet")

    # 1. ringsearch inject + ringsearch search (PSD from the data before injection)
    assert main(["inject", *files.values(), "--injections", str(listed),
                 "--out", str(tmp_path / "inj")]) == 0
    injected = sorted(str(p) for p in (tmp_path / "inj").glob("*.hdf5"))
    assert main(["search", *injected, "--psd-from", *files.values(), "--bank",
                 str(tmp_path / "bank.parquet"), "--slides", "0", "--no-plots",
                 "--out", str(tmp_path / "search")]) == 0
    cands = pd.read_parquet(tmp_path / "search" / "candidates.parquet")
    truth = pd.read_parquet(tmp_path / "inj" / "injections.parquet")

    # 2. a campaign on the original files with the same list and bank
    (tmp_path / "c.toml").write_text(f"""
[campaign]
name = "sameness"
seed = 1
[data]
source = "files"
files = {{ H1 = "{files['H1']}", L1 = "{files['L1']}" }}
sample_rate = 4096
chunk_s = 32
pad_s = 3.5
avoid = [[{AVOID[0]}, {AVOID[1]}]]
[injections]
file = "{listed}"
spacing_s = 2.0
[search]
mass = [50.0, 100.0]
spin = [0.5, 0.9]
bank = "{tmp_path / 'bank.parquet'}"
match_window_s = {WINDOW_S}
[threshold]
snr = {THRESHOLD}
slides = 0
""")
    run_campaign(load_spec(tmp_path / "c.toml"), tmp_path / "camp", progress=False)
    found = pd.read_parquet(tmp_path / "camp" / "found.parquet").set_index("injection_id")
    assert len(found) == 6

    # the search's own verdict: the loudest candidate starting within the match window
    # of the injection's arrival at the candidate's anchor detector
    checked_found = checked_missed = 0
    for r in truth.itertuples():
        arrival = np.array([getattr(r, f"arrival_gps_{a}") for a in cands.anchor_detector])
        near = np.abs(cands.gps.to_numpy() - arrival) <= WINDOW_S
        stat = float(cands.network_snr[near].max()) if near.any() else np.nan
        row = found.loc[r.injection_id]
        if np.isnan(stat):
            assert np.isnan(row.stat)
        else:
            assert row.stat == pytest.approx(stat, rel=1e-6)
        verdict = bool(stat >= THRESHOLD)
        assert bool(row.found) == verdict
        checked_found += verdict
        checked_missed += not verdict
    assert checked_found >= 2 and checked_missed >= 1  # both verdicts exercised
    summary = json.loads((tmp_path / "camp" / "summary.json").read_text())
    assert summary["n_injections"] == 6
