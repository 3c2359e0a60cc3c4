"""Long data searched in stretches: the whole-series triggers and candidates, with bounded memory.

The reference is the engine's own whole-series search of the same data with
the same PSDs (given, so both whiten alike).  Short data and short stretches
put many boundaries in a few minutes of design noise, with ringdowns and a
gated glitch placed next to them and a data gap across one; the stretches
must give the same triggers (each once) and the same zero-lag candidates.
The two searches whiten on FFT grids of different lengths, and the
conditioning's band mask rings differently on each (about 1e-3 of the
whitened samples), so their numbers agree to that precision rather than to
rounding: SNRs to 1e-4 relative here (checked to 1e-3), re-weighted SNRs to
2e-3 (checked to 5e-3).  Seeds are fixed; a false failure
would need a peak within that agreement of the threshold or of a clustering
tie (none is in these data).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from gwpy.timeseries import TimeSeries

from ringsearch.data.condition import conditioning_psd
from ringsearch.data.io import open_detectors, read_detectors, write_gwosc_hdf5
from ringsearch.data.noise import gaussian_noise
from ringsearch.data.sources import StrainSource
from ringsearch.errors import InputError
from ringsearch.search import stretches
from ringsearch.search.bank import Bank
from ringsearch.search.engine import Search, SearchConfig
from ringsearch.search.stretches import n_stretches, plan_stretches

FS = 2048.0
T0 = 1e9
DURATION = 420.0
STRETCH = 64.0  # 7 stretches of 60 s


def _bank() -> Bank:
    return Bank.from_box((50.0, 100.0), (0.5, 0.9), 0, 0.95, f_high=900.0, seed=0)


def _boundaries() -> list[float]:
    src = {"H1": StrainSource("H1", T0, FS, int(DURATION * FS), [])}
    return [st.own[1] for st in plan_stretches(src, STRETCH, 5.0)][:-1]


def _data(gap: bool = True) -> dict:
    """Design noise in H1 and L1 with ringdowns at stretch boundaries, a glitch, a gap."""
    out = {}
    edges = _boundaries()
    for i, det in enumerate(("H1", "L1")):
        ts = gaussian_noise("design", DURATION, FS, 11 + i, gps_start=T0, detector=det)
        t = ts.times.value
        h = np.zeros_like(t)
        # damped sinusoids of SNR ~10-30 just before, on and after boundaries, 4 ms later
        # in L1 (inside the 10 ms light travel time)
        for k, (dt, amp, f, tau) in enumerate([(-0.03, 1e-21, 250.0, 0.004),
                                               (0.0, 2e-21, 200.0, 0.005),
                                               (0.02, 1.5e-21, 230.0, 0.004),
                                               (-0.2, 3e-21, 210.0, 0.006),
                                               (0.35, 1e-21, 260.0, 0.004)]):
            t0 = edges[k] + dt + 0.004 * i
            on = t >= t0
            h[on] += amp * np.exp(-(t[on] - t0) / tau) * np.cos(2 * np.pi * f * (t[on] - t0))
        if det == "H1":  # a loud glitch 1.5 s from a boundary: both searches gate it
            tg = edges[5] + 1.5
            h += 1e-18 * np.exp(-((t - tg) / 0.01) ** 2) * np.cos(2 * np.pi * 150.0 * (t - tg))
        x = ts.value + h
        if gap and det == "L1":  # 3 s of missing data across a boundary
            x[(t >= edges[2] - 1.0) & (t < edges[2] + 2.0)] = np.nan
        out[det] = TimeSeries(x, t0=T0, sample_rate=FS, name=det, channel=f"{det}:STRAIN")
    return out


def _psds(data: dict) -> dict:
    return {d: conditioning_psd(ts, 4.0, None) for d, ts in data.items()}


def _same_candidates(whole, parts) -> None:
    """The same zero-lag candidates: template and every detector's peak time.

    The anchor is not compared: when both detectors' triggers are the same
    template, the events anchored in each are the same numbers, a tie the
    clustering breaks by rounding."""
    a, b = whole.candidates, parts.candidates
    assert len(a) == len(b)
    cols = [f"{d}_gps" for d in whole.detectors] if len(whole.detectors) > 1 else ["gps"]
    tb = b[cols].to_numpy(float)
    for _, r in a.iterrows():
        hit = (b["template_index"].to_numpy() == r["template_index"]) & \
            (np.abs(tb - r[cols].to_numpy(float)) < 1e-5).all(axis=1)
        assert hit.sum() == 1, r
        assert b.loc[hit, "network_snr"].iloc[0] == pytest.approx(r["network_snr"], rel=5e-3)


def _check_tables(res) -> None:
    """Trigger ids are 0..n-1 once each; candidates refer to triggers of their detectors."""
    trig = res.triggers
    assert trig["trigger_id"].tolist() == list(range(len(trig)))
    assert not trig.duplicated(["detector", "template_index", "sample"]).any()
    by_id = trig.set_index("trigger_id")
    for d in res.detectors:
        col = f"{d}_trigger_id" if len(res.detectors) > 1 else "trigger_id"
        ids = res.candidates[col].to_numpy(np.int64)
        ids = ids[ids >= 0]
        assert (by_id.loc[ids, "detector"] == d).all()


def _compare(whole, parts) -> None:
    a, b = whole.triggers, parts.triggers
    m = a.merge(b, on=["detector", "template_index", "sample"], how="outer", indicator=True,
                suffixes=("_w", "_s"))
    assert (m["_merge"] == "both").all(), m.loc[m["_merge"] != "both",
                                                ["detector", "gps_w", "gps_s", "snr_w", "snr_s"]]
    assert np.allclose(m["snr_s"], m["snr_w"], rtol=1e-3, atol=0)
    assert np.allclose(m["snr_reweighted_s"], m["snr_reweighted_w"], rtol=5e-3, atol=0)
    assert np.abs(m["gps_s"] - m["gps_w"]).max() < 1e-5
    _same_candidates(whole, parts)
    for d in whole.detectors:
        assert parts.analysed_s[d] == pytest.approx(whole.analysed_s[d], abs=1e-6)
        assert abs(parts.valid[d] ^ whole.valid[d]) < 1e-6
    _check_tables(parts)


@pytest.fixture(scope="module")
def network_pair():
    data = _data()
    psds = _psds(data)
    bank = _bank()
    cfg = SearchConfig(n_slides=5)
    whole = Search(cfg, bank=bank, stretch_s=None).run(data, psds=psds)
    parts = Search(cfg, bank=bank, stretch_s=STRETCH).run(data, psds=psds)
    return data, whole, parts


def test_stretches_equal_the_whole_series_at_boundaries(network_pair):
    _, whole, parts = network_pair
    assert len(parts.extra["stretches"]) == 7
    assert "stretches" not in whole.extra
    _compare(whole, parts)
    # the test is about boundaries: loud triggers sit within a cluster window of them
    w = Search(bank=_bank()).cluster_window(_bank())
    t = parts.triggers["gps"].to_numpy()
    gap = np.array([np.abs(t - e).min() for e in _boundaries()[:5]])
    assert (gap < 0.5).all() and (gap < w).sum() >= 3
    assert len(parts.candidates) >= 5
    assert len(whole.conditioned["H1"].gates) == 1
    assert len(parts.conditioned) == 2  # the loudest candidate's stretch, both detectors


def test_stretches_pool_their_time_slides(network_pair):
    _, whole, parts = network_pair
    s = parts.slides
    assert s["slide"].tolist() == list(range(6))
    # each stretch slides its own owned interval: the coincident time of the zero lag is
    # the whole series', and every slide's lies within it
    assert s.loc[0, "live_s"] == pytest.approx(whole.slides.loc[0, "live_s"], abs=1e-6)
    assert (s.loc[1:, "live_s"] <= s.loc[0, "live_s"] + 1e-9).all()
    assert parts.background_s == pytest.approx(s.loc[1:, "live_s"].sum())
    far = parts.candidates["far_per_year"].to_numpy(float)
    assert np.isfinite(far).all()
    # a candidate's FAR counts the pooled background at least as loud (less the events
    # that share its triggers) over the pooled background time
    from ringsearch.physics.units import YEAR_S

    bg = parts.background["network_snr"].to_numpy(float)
    c = parts.candidates
    louder = np.array([(bg >= x).sum() for x in c["network_snr"]])
    n = c["n_louder_background"].to_numpy()
    # (at most one event per slide and detector shares a trigger with the candidate)
    assert (n <= louder).all() and (louder - n <= 5 * len(parts.detectors)).all()
    assert np.allclose(far, np.maximum(n, 1) / parts.background_s * YEAR_S)


def test_an_uncertified_stretch_is_searched_with_a_wider_margin(monkeypatch):
    """With no clustering margin the boundaries cannot be certified: the retry must still
    give the whole-series triggers (the check can fail: see the first assertion)."""
    data = {d: ts for d, ts in _data(gap=False).items() if d == "H1"}
    psds = _psds(data)
    bank = _bank()
    monkeypatch.setattr(stretches, "MARGIN_WINDOWS", (0.0, 8.0))
    whole = Search(bank=bank, stretch_s=None).run(data, psds=psds)
    parts = Search(bank=bank, stretch_s=STRETCH).run(data, psds=psds)
    assert (parts.extra["stretches"]["margin_windows"] == 8.0).any()
    _compare(whole, parts)
    # one detector: candidates are the triggers, FAR from the others
    assert parts.method == whole.method
    assert np.allclose(parts.candidates["far_per_year"], whole.candidates["far_per_year"])


def test_stretches_estimate_their_own_psds():
    data = _data(gap=False)
    bank = _bank()
    parts = Search(bank=bank, n_slides=2, stretch_s=STRETCH).run(data)
    _check_tables(parts)
    one = parts.conditioned["H1"]
    assert one.duration < 2 * STRETCH  # a stretch, not the whole series
    # its PSD is the Welch median of its own stretch, as conditioning would estimate it
    ts, segs = StrainSource.from_series(data["H1"]).read(
        round((one.t0 - T0) * FS), round((one.t0 - T0) * FS) + one.whitened.size)
    assert np.allclose(one.psd.value, conditioning_psd(ts, 4.0, segs).value, rtol=1e-12)


def test_whole_series_when_the_data_are_short():
    src = {"H1": StrainSource("H1", 0.0, FS, int(600 * FS), [])}
    assert n_stretches(src, 512.0) == 1
    assert n_stretches(src, 256.0) == 2
    assert n_stretches(src, 512.0, window=(0.0, 100.0)) == 1


def test_stretch_length_is_checked():
    with pytest.raises(InputError, match="stretch length"):
        SearchConfig(stretch_s=10.0).validated()
    with pytest.raises(InputError, match="stretch length"):
        SearchConfig(stretch_s=math.nan).validated()
    assert SearchConfig(stretch_s=None).validated().stretch_s is None


def test_partial_reads_of_files_equal_whole_reads(tmp_path):
    """open_detectors reads any stretch of several files (with a gap between them) as
    read_detectors reads all of them: the same samples, the same segments."""
    ts = gaussian_noise("design", 40.0, 1024.0, 3, gps_start=T0, detector="H1")
    first, second = ts.crop(T0, T0 + 16), ts.crop(T0 + 20, T0 + 40)
    paths = [write_gwosc_hdf5(first, tmp_path / "H-H1_SIM-1000000000-16.hdf5"),
             write_gwosc_hdf5(second, tmp_path / "H-H1_SIM-1000000020-20.hdf5")]
    whole, segs = read_detectors(paths)["H1"]
    src = open_detectors(paths)["H1"]
    assert src.n_samples == whole.size
    for a, b in [(0, whole.size), (5000, 25000), (16 * 1024 - 7, 20 * 1024 + 9)]:
        part, psegs = src.read(a, b)
        assert np.array_equal(part.value, whole.value[a:b], equal_nan=True)
        assert float(part.t0.value) == float(whole.t0.value) + a / 1024.0
        span = type(segs)([type(segs[0])(T0 + a / 1024.0, T0 + b / 1024.0)])
        assert list(psegs) == list((segs & span).coalesce())


def test_files_are_searched_stretch_by_stretch(tmp_path):
    """A search of files goes through the sources: stretches of files equal stretches of
    the same series in memory."""
    data = _data(gap=False)
    paths = [write_gwosc_hdf5(ts, tmp_path / f"{d[0]}-{d}_SIM-1000000000-420.hdf5")
             for d, ts in data.items()]
    psds = _psds(data)
    bank = _bank()
    from_files = Search(bank=bank, n_slides=2, stretch_s=128.0).run(paths, psds=psds,
                                                                     )
    in_memory = Search(bank=bank, n_slides=2, stretch_s=128.0).run(data, psds=psds)
    assert from_files.triggers.drop(columns="trigger_id").equals(
        in_memory.triggers.drop(columns="trigger_id"))
    assert len(from_files.extra["stretches"]) == 3
