"""Coverage of the overtone analysis over its own prior (simulation-based calibration).

Truths are drawn from the prior the analysis uses (N uniform in 0..2, mass and
spin uniform in the box, expected network SNR log-uniform on the default SNR
prior, amplitudes from the g-prior), data are simulated exactly under the noise
model, and each trial's truth is located in its posteriors
(:mod:`ringsearch.analysis.calibration`).  For a calibrated analysis the 50% and
90% intervals hold the truth in Binomial(n, 0.5) and Binomial(n, 0.9) of n
trials (Cook, Gelman & Rubin 2006, JCGS 15, 675; Talts et al. 2018,
arXiv:1804.06788).  Each check accepts the counts whose two-sided binomial tail
exceeds 1e-3, so with the 14 checks below the false-failure probability of a
calibrated analysis is at most 1.4% (they are not independent, which only
lowers it); the seed is fixed.  ``make calibrate`` runs the same with 400
trials per network and writes the table and P-P plots kept in the README.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from ringsearch.analysis.calibration import (
    CalibrationSetup,
    claim_rates,
    coverage_table,
    draw_trial,
    run_trial,
)
from ringsearch.analysis.posterior import remnant_posterior

TRIALS = 120
TAIL = 1e-3


def _accepted(n: int, p: float) -> tuple[int, int]:
    """Counts k with P(K <= k) > TAIL/2 and P(K >= k) > TAIL/2 for K ~ Binomial(n, p)."""
    lo = int(stats.binom.ppf(TAIL / 2, n, p))
    hi = int(stats.binom.isf(TAIL / 2, n, p))
    return lo, hi


@pytest.fixture(scope="module", params=[("H1",), ("H1", "L1")], ids=["one", "two"])
def trials(request):
    setup = CalibrationSetup(detectors=request.param, seed=41 + len(request.param))
    return pd.DataFrame([run_trial(setup, i) for i in range(TRIALS)])


def test_intervals_hold_the_truth_at_their_nominal_rate(trials):
    table = coverage_table(trials)
    rows = table[table["group"] == "all"]
    checked = 0
    for _, r in rows.iterrows():
        if r["posterior"] == "averaged over N" and r["nominal"] == 0.5:
            continue
        lo, hi = _accepted(int(r["n"]), float(r["nominal"]))
        assert lo <= r["held"] <= hi, r.to_dict()
        checked += 1
    assert checked == 7


def test_the_draws_span_the_prior(trials):
    # the population is what the prior says: every N, SNRs from quiet to loud
    assert set(trials["n_overtones"]) == {0, 1, 2}
    assert trials["snr"].min() < 10 and trials["snr"].max() > 80
    assert ((trials["best_snr"] >= 15) & (trials["best_snr"] < 50)).sum() > 20


def test_a_trial_is_reproducible_from_its_seed_and_index():
    setup = CalibrationSetup(seed=5)
    a, sa = draw_trial(setup, 3)
    b, sb = draw_trial(CalibrationSetup(seed=5), 3)
    assert a == b and np.array_equal(sa[0].values, sb[0].values)
    c, _ = draw_trial(setup, 4)
    assert c != a


def test_noise_alone_is_reported_as_prior_dominated():
    # Pure noise: no overtone is supported and the (mass, spin) posterior is close to the
    # prior, which the warnings must say (a scale of SNR 0.01 is noise in practice).
    setup = CalibrationSetup(snr_prior=(0.01, 0.0100001), true_overtones=0, seed=9)
    _, series = draw_trial(setup, 0)
    post = remnant_posterior(series, [setup.noise()], 0.0, setup.mass_range,
                             setup.spin_range, 2, (20, 20))
    assert post.supported_overtones() == 0
    warned = [w for w in post.resolution_warnings(0) if "dominated by the prior" in w]
    assert len(warned) == 1 and post.region_fraction(0) > 0.5
    # and a loud signal is not
    loud = CalibrationSetup(snr_prior=(60.0, 60.0001), true_overtones=0, seed=9)
    _, series = draw_trial(loud, 0)
    post = remnant_posterior(series, [loud.noise()], 0.0, loud.mass_range, loud.spin_range,
                             2, (20, 20))
    assert not [w for w in post.resolution_warnings(0) if "dominated by the prior" in w]


def test_model_average_weighs_the_n_posteriors_by_their_evidence(trials):
    setup = CalibrationSetup(snr_prior=(60.0, 60.0001), true_overtones=0, seed=9)
    _, series = draw_trial(setup, 0)
    post = remnant_posterior(series, [setup.noise()], 0.0, setup.mass_range,
                             setup.spin_range, 2, (20, 20))
    av = post.averaged()
    w = np.array([av["weights"][str(k)] for k in range(3)])
    assert w.sum() == pytest.approx(1.0)
    z = post.log_evidence
    assert w[1] / w[0] == pytest.approx(np.exp(z[1] - z[0]), rel=1e-9)
    # dominated by N = 0 here, so the average is N = 0's summary
    assert w[0] > 0.9
    assert av["mass"]["median"] == pytest.approx(post.summary(0)["mass"]["median"], abs=1.0)


def test_claim_rates_count_false_claims_and_misses(trials):
    c = claim_rates(trials, [0, 10, 1000])
    assert c["n"].sum() == len(trials)
    none = c.iloc[0]
    assert none["n"] == int((trials["n_overtones"] == 0).sum())
    assert none["missed"] == 0
