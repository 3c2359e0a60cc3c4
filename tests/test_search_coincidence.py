"""Coincidence and significance: windows, time slides, FAR against Poisson expectations."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from ringsearch.errors import InputError
from ringsearch.physics.units import C_SI, YEAR_S
from ringsearch.search.coincidence import coincident_candidates, light_travel_time
from ringsearch.search.significance import (
    assign_far,
    max_distinct_slides,
    single_detector_far,
    time_slide_background,
)


def test_light_travel_time_h1_l1():
    # H1-L1 separation ~3002 km -> 10.0 ms (Abbott et al. 2016, PRL 116, 061102: "up to
    # 10 ms") # from memory
    assert light_travel_time("H1", "L1") == pytest.approx(3.002e6 / C_SI, rel=2e-3)


def test_window_is_light_travel_plus_tolerance():
    h = pd.DataFrame({"gps": [100.0, 200.0], "snr": [8.0, 8.0]})
    win = light_travel_time("H1", "L1") + 0.005
    l_in = pd.DataFrame({"gps": [100.0 + win - 1e-4, 200.0 + win + 1e-4], "snr": [6.0, 6.0]})
    c = coincident_candidates({"H1": h, "L1": l_in}, tolerance_s=0.005)
    assert c.gps.tolist() == [100.0]
    assert c.network_snr.iloc[0] == pytest.approx(10.0)
    with pytest.raises(InputError, match="two detectors"):
        coincident_candidates({"H1": h})
    for bad in (-0.001, float("nan")):  # regression: a negative window was accepted
        with pytest.raises(InputError, match="timing tolerance"):
            coincident_candidates({"H1": h, "L1": l_in}, tolerance_s=bad)


def _poisson_triggers(rng, rate, dur, t0=0.0):
    n = rng.poisson(rate * dur)
    return pd.DataFrame({"gps": np.sort(rng.uniform(t0, t0 + dur, n)),
                         "snr": 5.0 + rng.exponential(1.0, n)})


def test_time_slide_coincidence_rate_matches_poisson_expectation():
    # Independent Poisson trigger streams of rates r1, r2 give accidental coincidences at
    # rate ~ r1 r2 (2 w) for window w (standard accidental-coincidence rate) while the
    # triggers are sparse; clustering at 0.1 s barely changes that here.
    rng = np.random.default_rng(99)
    dur, r = 2000.0, 0.5
    trig = {"H1": _poisson_triggers(rng, r, dur), "L1": _poisson_triggers(rng, r, dur)}
    w = light_travel_time("H1", "L1") + 0.01
    bg = time_slide_background(trig, (0.0, dur), n_slides=20, step_s=1.0,
                               cluster_window_s=0.05)
    expected = r * r * 2 * w * dur * 20
    # Poisson count: two-sided 1e-3 false-failure probability
    lo, hi = stats.poisson(expected).ppf([5e-4, 1 - 5e-4])
    assert lo <= len(bg) <= hi
    assert set(bg.slide) <= set(range(1, 21))


def test_far_counts_louder_background_and_excludes_own_triggers():
    h = pd.DataFrame({"gps": [10.0, 20.0, 30.0], "snr": [20.0, 6.0, 6.5]})
    l1 = pd.DataFrame({"gps": [10.005, 20.5, 31.0], "snr": [15.0, 6.0, 6.0]})
    zero = coincident_candidates({"H1": h, "L1": l1})
    assert len(zero) == 1
    # slid coincidences involving the loud H1 trigger (row 0) must not count against it
    bg = pd.DataFrame({"network_snr": [30.0, 9.0, 26.0], "H1_row": [0, 1, 2],
                       "L1_row": [1, 2, 0]})
    out = assign_far(zero, bg, n_slides=10, live_time_s=100.0, detectors=["H1", "L1"])
    # network 25: louder background = 30 (uses H1 row 0 -> excluded) and 26 (uses L1
    # row 0 -> excluded): none left, so the FAR is an upper limit 1 / (10 x 100 s)
    assert bool(out.far_is_upper_limit.iloc[0])
    assert out.far_per_year.iloc[0] == pytest.approx(YEAR_S / 1000.0)
    bg.loc[0, "H1_row"] = 2
    out = assign_far(zero, bg, n_slides=10, live_time_s=100.0, detectors=["H1", "L1"])
    assert out.n_louder_background.iloc[0] == 1 and not out.far_is_upper_limit.iloc[0]


def test_slides_must_fit_the_data():
    assert max_distinct_slides(32.0, 0.6, 2) == 52
    with pytest.raises(InputError, match="do not fit"):
        time_slide_background({"H1": pd.DataFrame({"gps": [], "snr": []}),
                               "L1": pd.DataFrame({"gps": [], "snr": []})},
                              (0.0, 10.0), n_slides=50, step_s=1.0)


def test_single_detector_far_is_rate_of_other_louder_triggers():
    rng = np.random.default_rng(4)
    t = _poisson_triggers(rng, 1.0, 3600.0)
    out = single_detector_far(t, 3600.0)
    top = out.loc[out.snr.idxmax()]
    assert bool(top.far_is_upper_limit) and top.n_louder_background == 0
    # the median trigger has about half the others above it
    med = out.snr.median()
    row = out.iloc[(out.snr - med).abs().argmin()]
    assert row.far_per_year == pytest.approx(len(t) / 2 / 3600.0 * YEAR_S, rel=0.05)
