"""Grouped filter: the per-template filter's peaks from each group's principal correlations.

The reference is the plain per-template filter in double precision (one
correlation per basis function).  The grouped filter claims the same peaks,
because its bound ``|y| <= |b| + eps |d|`` (linear algebra, see
:mod:`ringsearch.search.subspace`) holds wherever the data's norm in a group's
residual space stays below its reach; these tests check the bound directly and
the peaks on design noise with loud ringdowns and a glitch, and on open data.
Seeds are fixed; a false failure would need the Gaussian part of the bound to
fail (probability 1e-12 per group and start time: about 1e-5 over the few
million pairs these tests evaluate) or a peak within rounding of the
threshold.
"""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest
from gwpy.timeseries import TimeSeries

from ringsearch.data.noise import gaussian_noise
from ringsearch.search.bank import Bank
from ringsearch.search.correlate import filter_peaks
from ringsearch.search.engine import Search, SearchConfig
from ringsearch.search.probe import Probe
from ringsearch.search.subspace import (
    energy_sums,
    member_bound,
    principal_rank,
    reach_quantiles,
    template_groups,
    worth_grouping,
)
from ringsearch.search.templates import basis_waveforms

FS = 2048.0


def _bank(n_overtones: int) -> Bank:
    return Bank.from_box((40.0, 160.0), (0.3, 0.9), n_overtones, 0.98, f_high=900.0, seed=0)


def _design_cond(seed: int, signals: bool):
    """32 s of design noise at 2048 Hz, with ringdowns from SNR ~5 to ~300 and a glitch."""
    ts = gaussian_noise("design", 32, FS, seed, gps_start=1e9, detector="H1")
    if signals:
        t = ts.times.value - 1e9
        h = np.zeros_like(t)
        # damped sinusoids (strain amplitudes of SNR about 5, 20 and 300 at these f, tau
        # in design noise) and a sine-Gaussian glitch far louder than any of them
        for t0, amp, f, tau in [(6.0, 5e-22, 180.0, 0.005), (11.3, 2e-21, 260.0, 0.004),
                                (17.7, 3e-20, 120.0, 0.009)]:
            on = t >= t0
            h[on] += amp * np.exp(-(t[on] - t0) / tau) * np.cos(2 * np.pi * f * (t[on] - t0))
        h += 1e-19 * np.exp(-((t - 24.0) / 0.01) ** 2) * np.cos(2 * np.pi * 150.0 * (t - 24.0))
        ts = TimeSeries(ts.value + h, t0=ts.t0, sample_rate=ts.sample_rate, name="H1")
        ts.channel = None
    cfg = SearchConfig(gate_threshold=math.inf)  # the glitch stays in the data: the bound must hold
    return Search(cfg).condition({"H1": ts})["H1"]


def _compare(cond, bank, thr, require_groups=True):
    probe = Probe(cond, bank.f_hz, bank.tau_s, veto_bins=None)
    kw = {"weighted": probe.weighted, "grams": probe.grams}
    ref, _ = filter_peaks(cond, bank.f_hz, bank.tau_s, thr, 0.05, precision="double", **kw)
    # groups not worth grouping at this threshold are filtered one by one, in double
    # precision here as the reference is (in single by default: tested elsewhere to 1e-5)
    got, _ = filter_peaks(cond, bank.f_hz, bank.tau_s, thr, 0.05, groups=probe.groups,
                          precision="double", **kw)
    if require_groups:
        assert worth_grouping(probe.groups, 2 * bank.f_hz.shape[1], thr).any()
    return ref, got, probe


WBIN = round(0.05 * FS)  # the filter's time bin at 2048 Hz


def _assert_same(ref, got, wbin=WBIN):
    # one maximum per template and time bin, with the same SNR; the sample may differ
    # only where two samples of a bin tie to rounding (the reference's FFT against the
    # direct products)
    def keyed(t):
        return t.assign(bin=t["sample"] // wbin)

    key = ["template_index", "bin"]
    assert len(ref) > 0
    m = keyed(ref).merge(keyed(got), on=key, how="outer", indicator=True,
                         suffixes=("_ref", "_got"))
    assert (m["_merge"] == "both").all(), m[m["_merge"] != "both"].head()
    np.testing.assert_allclose(m["snr_grid_got"], m["snr_grid_ref"], rtol=1e-9)
    moved = m["sample_got"] != m["sample_ref"]
    assert moved.sum() <= max(2, len(m) // 1000)


@pytest.mark.parametrize("n_overtones, seed", [(0, 1), (2, 2), (2, 3)])
def test_grouped_filter_finds_the_per_template_peaks_in_noise_with_loud_signals(
        n_overtones, seed):
    cond = _design_cond(seed, signals=True)
    bank = _bank(n_overtones)
    thr = 5.0 if n_overtones == 0 else 5.6  # below the searches' on-grid thresholds
    ref, got, probe = _compare(cond, bank, thr)
    _assert_same(ref, got)
    # the groups do share: fewer principal functions than basis functions
    assert probe.groups.n_functions < 0.6 * bank.f_hz.size * 2
    # and the loud ringdown and the glitch were among the peaks compared
    gps = ref["gps"].to_numpy() - 1e9
    assert np.any(np.abs(gps - 17.7) < 0.05) and np.any(np.abs(gps - 24.0) < 0.1)


def test_grouped_filter_finds_the_per_template_peaks_in_open_data(gw150914_files):
    cfg = SearchConfig(gate_threshold=math.inf)
    cond = Search(cfg).condition([str(gw150914_files["H1"])])["H1"]
    for n in (0, 2):
        bank = Bank.from_box((40.0, 160.0), (0.3, 0.9), n, 0.98, f_high=900.0, seed=0)
        # (one-mode groups of this sparse bank flag too often at 4096 Hz: filtered singly)
        ref, got, _ = _compare(cond, bank, 5.0 if n == 0 else 5.6, require_groups=n > 0)
        _assert_same(ref, got, wbin=round(0.05 * float(cond.sample_rate)))


def test_the_comparison_catches_a_bound_that_does_not_hold():
    # the same comparison with every group's principal basis cut to 2 functions while its
    # residual is still claimed at 1 %: peaks go missing, and the test above would fail
    # (in noise and ringdowns only: near a loud glitch every start time is evaluated)
    cond = _design_cond(2, signals=False)
    bank = _bank(2)
    probe = Probe(cond, bank.f_hz, bank.tau_s, veto_bins=None)
    groups = copy.copy(probe.groups)  # the probe's are shared by data whitened alike
    groups.basis = [b[:2] for b in groups.basis]
    kw = {"weighted": probe.weighted, "grams": probe.grams}
    ref, _ = filter_peaks(cond, bank.f_hz, bank.tau_s, 5.6, 0.05, precision="double", **kw)
    got, _ = filter_peaks(cond, bank.f_hz, bank.tau_s, 5.6, 0.05, groups=groups, **kw)
    assert len(got) < len(ref)


def test_every_members_snr_is_within_the_bound_at_every_start_time():
    # The inequality itself, start time by start time, on noise with a glitch: each
    # member's exact rho from its own basis never exceeds the group's bound.
    cond = _design_cond(4, signals=True)
    bank = _bank(2)
    probe = Probe(cond, bank.f_hz, bank.tau_s, veto_bins=None)
    groups = probe.groups
    x, w = probe.weighted, np.asarray(cond.whitened.value, float)
    from ringsearch.search.correlate import filter_length

    reach = filter_length(cond)
    starts = np.arange(int(4 * FS), int(28 * FS), 3)  # glitch at 24 s inside
    worst = -np.inf
    for g in range(len(groups)):
        members, length = groups.members[g], int(groups.length[g])
        seg = x[starts[:, None] + np.arange(length)]
        b2 = ((seg @ groups.basis[g].T) ** 2).sum(axis=1)
        u = np.matmul(probe.grams.cinv[members],
                      basis_waveforms(bank.f_hz[members], bank.tau_s[members], length, FS))
        y = np.einsum("nl,gkl->ngk", seg, u)
        rho = np.sqrt((y * y).sum(axis=-1)).max(axis=1)
        cs = energy_sums(w, int(starts[0]), int(starts[-1] - starts[0] + 1), length, reach)
        span = length + 2 * reach
        rel = starts - starts[0]
        energy = cs[rel + span] - cs[rel]
        base, high = reach_quantiles(int(groups.residual_dof[g]), span)
        bound = member_bound(b2, base + np.sqrt(np.maximum(energy - high, 0.0)),
                             float(groups.eps[g]))
        worst = max(worst, float(np.max(rho - bound)))
        # |b| is a projection of the same data: never above the bound's own base
        assert np.all(np.sqrt(b2) <= bound)
    assert worst <= 0.0


def test_principal_rank_leaves_each_member_within_its_residual():
    # explicit projections of correlated members onto the leading space: the largest
    # member residual (spectral norm) is what principal_rank reports, and within eps
    rng = np.random.default_rng(7)
    common = rng.standard_normal((3, 40))
    e = np.stack([np.linalg.qr((common + 0.2 * rng.standard_normal((3, 40))).T)[0].T
                  for _ in range(4)])  # 4 members of 3 orthonormal functions each
    flat = e.reshape(12, 40)
    lam, vec = np.linalg.eigh(flat @ flat.T)
    lam, vec = lam[::-1], vec[:, ::-1]
    r, worst = principal_rank(vec * np.sqrt(np.maximum(lam, 0.0)), 3, 0.3)
    assert 3 <= r < 12
    basis = (vec[:, :r] / np.sqrt(lam[:r])).T @ flat  # orthonormal rows
    resid = [np.linalg.norm(m - (m @ basis.T) @ basis, 2) for m in e]
    assert np.isclose(max(resid), worst, rtol=1e-8)
    assert worst <= 0.3
    # one function fewer would leave some member above eps
    smaller = (vec[:, :r - 1] / np.sqrt(lam[:r - 1])).T @ flat
    assert max(np.linalg.norm(m - (m @ smaller.T) @ smaller, 2) for m in e) > 0.3


def test_groups_cover_every_accepted_template_once():
    cond = _design_cond(5, signals=False)
    bank = _bank(2)
    probe = Probe(cond, bank.f_hz, bank.tau_s, veto_bins=None)
    groups = template_groups(bank.f_hz, bank.tau_s, probe.grams, probe._response, FS,
                             probe.pad, size=5)
    covered = np.sort(np.concatenate(groups.members))
    assert covered.tolist() == np.flatnonzero(probe.grams.ok).tolist()
    assert np.all(groups.eps <= 0.01 + 1e-12)


def test_grouped_filter_in_many_chunks_and_blocks_equals_one_pass(monkeypatch):
    # chunks of 2 s in blocks of 2 chunks: flagged start times are evaluated block by
    # block, and a time bin never straddles two chunks, so the peaks are the same
    import ringsearch.search.correlate as flt

    cond = _design_cond(6, signals=True)
    bank = _bank(2)
    ref, one, probe = _compare(cond, bank, 5.6)
    orig = flt.plan_chunks
    monkeypatch.setattr(flt, "plan_chunks",
                        lambda *a, **k: orig(*a, **{**k, "max_single_s": 1.0}))
    monkeypatch.setattr(flt, "BLOCK_BYTES", 0.0)  # blocks of block_chunks chunks
    calls = []
    exact = flt._Pass.exact
    monkeypatch.setattr(flt._Pass, "exact", lambda self, *a: calls.append(1) or exact(self, *a))
    kw = {"weighted": probe.weighted, "grams": probe.grams, "groups": probe.groups,
          "precision": "double"}
    many, _ = filter_peaks(cond, bank.f_hz, bank.tau_s, 5.6, 0.05, chunk_s=2.0,
                           block_chunks=2, **kw)
    assert len(calls) > 4  # flagged times evaluated block by block
    _assert_same(ref, many)
    _assert_same(one, many)


def test_probes_of_data_whitened_alike_share_grams_and_groups():
    # campaign chunks of one PSD: the second probe reuses the first one's Gram matrices
    # and groups (same templates, same filter response), which equal fresh ones
    from ringsearch.data.noise import design_psd
    from ringsearch.search import probe as probe_mod

    bank = _bank(2)
    psd = design_psd(np.arange(0.0, 1024.25, 0.25))
    conds = [Search().condition({"H1": gaussian_noise("design", 32, FS, s, gps_start=1e9,
                                                      detector="H1")}, psds={"H1": psd})["H1"]
             for s in (11, 12)]
    a, b = (Probe(c, bank.f_hz, bank.tau_s, veto_bins=None) for c in conds)
    assert b.grams is a.grams and b.groups is a.groups
    probe_mod._SHARED.clear()
    fresh = Probe(conds[1], bank.f_hz, bank.tau_s, veto_bins=None)
    assert fresh.grams is not a.grams
    np.testing.assert_array_equal(fresh.grams.cinv, a.grams.cinv)
    for x, y in zip(fresh.groups.basis, a.groups.basis, strict=True):
        np.testing.assert_array_equal(x, y)
