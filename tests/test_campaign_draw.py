"""Draws and placement: seeded, isotropic, spaced, away from avoided windows."""

from __future__ import annotations

import copy

import numpy as np
import pytest
from scipy import stats
from test_campaign_spec import BASE

from ringsearch.campaign.draw import data_chunks, plan_campaign, sample
from ringsearch.campaign.spec import spec_from_dict
from ringsearch.errors import InputError


def make(**changes):
    raw = copy.deepcopy(BASE)
    for path, value in changes.items():
        *parents, last = path.split("__")
        node = raw
        for p in parents:
            node = node[p]
        node[last] = value
    return spec_from_dict(raw)


def test_plan_is_reproducible_and_spaced():
    spec = make(injections__count=400)
    chunks_a, inj_a = plan_campaign(spec)
    chunks_b, inj_b = plan_campaign(spec)
    assert inj_a.equals(inj_b) and chunks_a.equals(chunks_b)
    assert len(inj_a) == 400 and chunks_a["n_injections"].sum() == 400
    t = np.sort(inj_a["gps"].to_numpy())
    assert np.diff(t).min() >= spec.injections["spacing_s"] - 1e-9
    # every injection inside its chunk, away from the padded edges
    merged = inj_a.merge(chunks_a, on="chunk")
    pad = spec.data["pad_s"]
    assert ((merged["gps"] >= merged["gps_start"] + pad)
            & (merged["gps"] <= merged["gps_end"] - pad)).all()
    # balanced overtone counts
    assert set(inj_a["injected_overtones"].value_counts()) == {200}


def test_isotropic_angles_follow_their_distributions():
    # Kolmogorov-Smirnov at alpha = 1e-4 per test, four tests: false failure < 4e-4.
    spec = make(injections__count=3000, data__duration_s=16 * 500)
    _, inj = plan_campaign(spec)
    assert stats.kstest(np.sin(inj["dec"]), "uniform", args=(-1, 2)).pvalue > 1e-4
    assert stats.kstest(np.cos(inj["inclination"]), "uniform", args=(-1, 2)).pvalue > 1e-4
    assert stats.kstest(inj["ra"], "uniform", args=(0, 2 * np.pi)).pvalue > 1e-4
    assert stats.kstest(inj["polarization"], "uniform", args=(0, np.pi)).pvalue > 1e-4


def test_powerlaw_index_two_is_uniform_in_volume():
    # x^3 is uniform on [lo^3, hi^3] when p(x) ~ x^2; KS false failure 1e-4.
    x = sample({"dist": "powerlaw", "low": 100.0, "high": 500.0, "index": 2.0},
               np.random.default_rng(3), 5000)
    assert stats.kstest(x**3, "uniform", args=(100.0**3, 500.0**3 - 100.0**3)).pvalue > 1e-4


def test_avoided_window_gets_no_injection():
    window = [1.3e9 + 20.0, 1.3e9 + 26.0]
    spec = make(injections__count=50, data__avoid=[window], data__duration_s=16 * 10)
    _, inj = plan_campaign(spec)
    spacing = spec.injections["spacing_s"]
    assert not ((inj["gps"] > window[0] - spacing / 2)
                & (inj["gps"] < window[1] + spacing / 2)).any()


def test_too_many_injections_for_the_data():
    spec = make(injections__count=500, data__duration_s=160.0)
    with pytest.raises(InputError, match="injections.count"):
        plan_campaign(spec)


def test_file_data_reuse_and_segments():
    raw = copy.deepcopy(BASE)
    raw["data"] = {"source": "synthetic", "detectors": ["H1", "L1"], "chunk_s": 16, "pad_s": 2.0}
    spec = spec_from_dict(raw)
    # emulate file data by swapping the source after validation
    spec.config["data"].update({"source": "files", "reuse": 3, "gps_start": None,
                                "gps_end": None})
    segs = [[(0.0, 32.0)], [(4.0, 40.0)]]
    stretches = data_chunks(spec, segs)
    assert stretches["gps_start"].min() == 4.0 and stretches["gps_end"].max() == 32.0
    chunks, inj = plan_campaign(spec, segs)
    assert chunks["round"].max() <= 2 and len(inj) == 20


# ------------------------------------------------------------- listed injections


def listed_spec(tmp_path, times, **data):
    from test_campaign_spec import listed, write_list

    write_list(tmp_path, times)
    raw = listed()
    raw["data"].update(data)
    return spec_from_dict(raw, base=tmp_path)


def test_listed_plan_on_synthetic_data_lays_chunks_around_the_rows(tmp_path):
    from ringsearch.data.injections import check_injection_table

    t0 = 1.3e9
    spec = listed_spec(tmp_path, [9.0, 5.0, 30.0, 44.5, 50.5])  # chunk_s 16, pad_s 2
    chunks, inj = plan_campaign(spec)
    assert inj["injection_id"].tolist() == [0, 1, 2, 3, 4]
    # a chunk starts pad_s before the first row it covers; 44.5 needs a chunk overlapping
    # the one of 30 (which ends at 44), and 50.5 fits in that second one
    assert (chunks["gps_start"] - t0).tolist() == [3.0, 28.0, 42.5]
    assert chunks["n_injections"].tolist() == [2, 1, 2]
    assert inj["chunk"].tolist() == [0, 0, 1, 2, 2]
    merged = inj.merge(chunks, on="chunk")
    assert ((merged["gps"] >= merged["gps_start"] + 2.0)
            & (merged["gps"] <= merged["gps_end"] - 2.0)).all()
    # the same columns as a drawn plan of the same kind, and both pass the schema check
    drawn = plan_campaign(make(injections__count=5))[1]
    assert inj.columns.tolist() == drawn.columns.tolist()
    assert (inj.dtypes == drawn.dtypes).all()
    for table in (inj, drawn):
        check_injection_table(table.drop(columns="chunk"))
    a, b = plan_campaign(spec)
    assert a.equals(chunks) and b.equals(inj)


def test_listed_plan_on_file_data_uses_the_segments(tmp_path):
    t0 = 1.3e9
    spec = listed_spec(tmp_path, [5.0, 9.0, 24.0])
    spec.config["data"].update({"source": "files", "gps_start": None, "gps_end": None})
    segs = [[(t0, t0 + 40.0)], [(t0 + 1.0, t0 + 40.0)]]   # 39 s: two stretches of 19.5 s
    chunks, inj = plan_campaign(spec, segs)
    # recorded data: each stretch is also searched once without injections (the
    # background of the default at-times search), whatever the rounds that reuse it
    bg = chunks[chunks["kind"] == "background"]
    assert (bg["gps_start"] - t0).tolist() == [1.0, 20.5] and (bg["n_injections"] == 0).all()
    chunks = chunks[chunks["kind"] == "injections"]
    assert (chunks["gps_start"] - t0).tolist() == [1.0, 20.5]
    assert len(chunks) == 2 and chunks["round"].tolist() == [0, 0]
    assert inj["chunk"].tolist() == [0, 0, 1]
    # a row that only one detector's data hold lies in no chunk
    with pytest.raises(InputError, match="listed injection 0 at GPS 1300000005.000000"):
        plan_campaign(spec, [[(t0, t0 + 32.0)], [(t0 + 6.0, t0 + 40.0)]])


@pytest.mark.parametrize("times, data, words", [
    ([5.0, 6.5], {}, ["listed injections 0 and 1", "injections.spacing_s"]),
    ([5.0, 22.0], {"avoid": [[1.3e9 + 20.0, 1.3e9 + 21.5]]},
     ["listed injection 1", "data.avoid"]),
])
def test_listed_plan_refusals(tmp_path, times, data, words):
    spec = listed_spec(tmp_path, times, **data)
    with pytest.raises(InputError) as err:
        plan_campaign(spec)
    message = str(err.value)
    assert message.endswith(".") and ". " not in message
    for w in words:
        assert w in message


def test_listed_plan_refuses_a_list_changed_after_the_spec(tmp_path):
    from test_campaign_spec import write_list

    spec = listed_spec(tmp_path, [5.0, 9.0])
    write_list(tmp_path, [5.0, 10.0])
    with pytest.raises(InputError, match="changed after campaign"):
        plan_campaign(spec)
