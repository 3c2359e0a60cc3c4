"""Simulation-based calibration of the overtone analysis: do its intervals hold the truth
as often as they claim?

Each trial draws a truth from the analysis' own prior
(:mod:`ringsearch.analysis.posterior`): the overtone count N uniformly from
0..N_max (or fixed), (mass, spin) uniformly in the box, the expected network
SNR ρ̄ log-uniformly on the SNR prior, and the amplitudes from the g-prior
(the whitened signal isotropic in the model's signal space with variance
``ρ̄²/k`` per direction).  It simulates data exactly under the noise model
(Gaussian noise with the Toeplitz covariance of the PSD), analyses them with
:func:`~ringsearch.analysis.posterior.remnant_posterior`, and records where the
truth falls in each posterior: the quantile of the true mass and spin in the
true N's marginals and in the model-averaged ones, and whether the truth lies
in the 90% highest-density region.  Over truths drawn from the prior, every
such quantile is uniform and every interval holds the truth at its nominal
rate (Cook, Gelman & Rubin 2006, JCGS 15, 675; Talts et al. 2018,
arXiv:1804.06788); keeping only trials whose *observed* SNR lies in a range
conditions on the data, which keeps that property, so coverage can be
reported per range of observed SNR.

Trials are independent and seeded one by one (``numpy.random.SeedSequence``
of the campaign seed and the trial index), so any subset can be rerun and
results do not depend on how trials are spread over processes.

Entry points: :func:`draw_trial` (one truth and its data), :func:`run_trial`
(one analysed trial, a flat dict), :func:`coverage_table` (rates with
binomial intervals) and :func:`claim_rates` (how often the supported N
exceeds or falls short of the truth, against overtone SNR).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from ringsearch.analysis.fits import DetectorSeries, damped_basis
from ringsearch.analysis.posterior import SNR_PRIOR, kerr_modes, remnant_posterior
from ringsearch.errors import InputError

__all__ = ["CalibrationSetup", "draw_trial", "run_trial", "coverage_table", "claim_rates"]


@dataclass(frozen=True)
class CalibrationSetup:
    """What a calibration run simulates and how it analyses each trial.

    Attributes
    ----------
    detectors : tuple of str
        Detectors with independent amplitudes (the analysis' default network).
    mass_range, spin_range : (lo, hi)
        The prior box (detector-frame solar masses; spin).
    max_overtones : int
        Models N = 0..max_overtones are analysed.
    true_overtones : int or None
        The truth's N (None: drawn uniformly from 0..max_overtones).
    snr_prior : (lo, hi)
        Range of the log-uniform prior on the expected optimal network SNR.
    sample_rate, duration_s : float
        The analysed segment (Hz, s).
    f_low, f_high : float
        Band of the noise model (Hz).
    psd : str
        Analytic PSD name of :func:`ringsearch.data.noise.resolve_psd`.
    grid : (int, int)
        (mass, spin) grid of the analysis.
    seed : int
        Seed of the whole run; trial i uses ``SeedSequence([seed, i])``.
    """

    detectors: tuple[str, ...] = ("H1",)
    mass_range: tuple[float, float] = (50.0, 100.0)
    spin_range: tuple[float, float] = (0.0, 0.9)
    max_overtones: int = 2
    true_overtones: int | None = None
    snr_prior: tuple[float, float] = SNR_PRIOR
    sample_rate: float = 4096.0
    duration_s: float = 0.1
    f_low: float = 20.0
    f_high: float = 1600.0
    psd: str = "design"
    grid: tuple[int, int] = (20, 20)
    seed: int = 0
    _noise: list = field(default_factory=list, repr=False, compare=False)

    def noise(self) -> Any:
        """The Toeplitz noise model of one detector's segment (built once, shared)."""
        if not self._noise:
            from ringsearch.analysis.noise_model import toeplitz_noise
            from ringsearch.data.noise import resolve_psd

            freqs = np.arange(0.0, self.sample_rate / 2 + 0.25, 0.25)
            n = int(round(self.duration_s * self.sample_rate))
            self._noise.append(toeplitz_noise(freqs, resolve_psd(self.psd, freqs),
                                              self.sample_rate, n, self.f_low, self.f_high))
        return self._noise[0]


def _rng(setup: CalibrationSetup, index: int) -> np.random.Generator:
    return np.random.default_rng(np.random.SeedSequence([int(setup.seed), int(index)]))


def draw_trial(setup: CalibrationSetup, index: int) -> tuple[dict, list[DetectorSeries]]:
    """Trial ``index``: a truth drawn from the prior and the data it makes.

    Returns ``(truth, series)``: ``truth`` holds ``n_overtones, mass, spin,
    snr_scale`` (ρ̄), ``snr`` (optimal network SNR of the drawn signal) and
    ``overtone_snr`` (optimal network SNR of its modes n >= 1 alone);
    ``series`` one :class:`~ringsearch.analysis.fits.DetectorSeries` per
    detector, starting at GPS 0 (the ringdown's start).

    Examples
    --------
    >>> truth, series = draw_trial(CalibrationSetup(), 0)
    >>> sorted(truth)[:3], len(series)
    (['mass', 'n_overtones', 'overtone_snr'], 1)
    """
    rng = _rng(setup, index)
    noise = setup.noise()
    n_true = (int(rng.integers(0, setup.max_overtones + 1)) if setup.true_overtones is None
              else int(setup.true_overtones))
    mass = float(rng.uniform(*setup.mass_range))
    spin = float(rng.uniform(*setup.spin_range))
    lo, hi = setup.snr_prior
    scale = float(math.exp(rng.uniform(math.log(lo), math.log(hi))))
    modes = kerr_modes()
    f = np.array([float(np.ravel(modes(np.array([mass]), np.array([spin]), k)[0])[0])
                  for k in range(n_true + 1)])
    tau = np.array([float(np.ravel(modes(np.array([mass]), np.array([spin]), k)[1])[0])
                    for k in range(n_true + 1)])
    t = np.arange(noise.n) / noise.sample_rate
    basis = damped_basis(t, f, tau)                          # (n, 2K)
    white = noise.whiten(basis)
    k_total = basis.shape[1] * len(setup.detectors)
    g = scale**2 / k_total
    series, snr2, over2 = [], 0.0, 0.0
    for det in setup.detectors:
        # a ~ N(0, g G^-1): the whitened signal isotropic in the signal space
        chol = np.linalg.cholesky(white.T @ white)
        amp = math.sqrt(g) * np.linalg.solve(chol.T, rng.standard_normal(basis.shape[1]))
        signal = basis @ amp
        snr2 += float(np.sum((white @ amp) ** 2))
        over2 += float(np.sum((white[:, 2:] @ amp[2:]) ** 2))
        values = signal + noise.chol @ rng.standard_normal(noise.n)
        series.append(DetectorSeries(det, values, 0.0, noise.sample_rate))
    truth = {"n_overtones": n_true, "mass": mass, "spin": spin, "snr_scale": scale,
             "snr": math.sqrt(snr2), "overtone_snr": math.sqrt(over2)}
    return truth, series


def _quantile(x: np.ndarray, density: np.ndarray, value: float) -> float:
    """The posterior CDF at ``value`` of a density sampled on the grid ``x``."""
    w = np.asarray(density, float)
    cdf = np.concatenate([[0.0], np.cumsum(0.5 * (w[1:] + w[:-1]) * np.diff(x))])
    if cdf[-1] <= 0:
        return float("nan")
    return float(np.interp(value, x, cdf / cdf[-1]))


def run_trial(setup: CalibrationSetup, index: int) -> dict:
    """Trial ``index`` drawn, simulated and analysed: one flat row.

    Columns: the truth (:func:`draw_trial`), ``best_snr`` (observed: the
    largest least-squares network SNR of the true N's model on the grid),
    ``supported_overtones``, ``log10_bayes_<N>_<N-1>``, ``p_model_<N>`` and,
    for the true N's posterior and the model-averaged one (``avg``),
    ``q_mass_*``/``q_spin_*`` (the truth's quantile in the marginal) and for
    the true N ``in_hpd90`` (truth in the 90% highest-density region).

    Examples
    --------
    >>> row = run_trial(CalibrationSetup(grid=(8, 8)), 1)
    >>> 0.0 <= row["q_mass_true"] <= 1.0
    True
    """
    truth, series = draw_trial(setup, index)
    noise = setup.noise()
    post = remnant_posterior(series, [noise] * len(series), 0.0, setup.mass_range,
                             setup.spin_range, setup.max_overtones, setup.grid,
                             setup.snr_prior)
    n = truth["n_overtones"]
    row: dict[str, Any] = {"trial": index, **truth, "best_snr": post.best_snr[n],
                           "supported_overtones": post.supported_overtones()}
    for key, v in post.log10_bayes.items():
        row[f"log10_bayes_{key.replace(':', '_')}"] = v
    for k, p in enumerate(post.model_probabilities()):
        row[f"p_model_{k}"] = float(p)
    weights = post.model_probabilities()
    for axis, (lo, hi) in zip(("mass", "spin"), post.box, strict=True):
        x = np.linspace(lo, hi, 2001)
        true_density = post.marginal(n, axis, x)
        mix = sum(w * post.marginal(k, axis, x) for k, w in enumerate(weights))
        row[f"q_{axis}_true"] = _quantile(x, true_density, truth[axis])
        row[f"q_{axis}_avg"] = _quantile(x, mix, truth[axis])
    row["in_hpd90"] = bool(post.contains(truth["mass"], truth["spin"], n, 0.9))
    row["warnings"] = " | ".join(post.warnings + post.resolution_warnings(n))
    return row


def _interval(k: int, n: int, level: float = 0.9) -> tuple[float, float]:
    """Clopper-Pearson interval of a binomial rate."""
    from scipy import stats

    a = (1 - level) / 2
    lo = 0.0 if k == 0 else float(stats.beta.ppf(a, k, n - k + 1))
    hi = 1.0 if k == n else float(stats.beta.ppf(1 - a, k + 1, n - k))
    return lo, hi


def coverage_table(rows: pd.DataFrame, by: Sequence[str] = ("n_overtones",)) -> pd.DataFrame:
    """How often the 50% and 90% intervals hold the truth, with 90% binomial intervals.

    For the true N's posterior and the model-averaged one, for mass and spin
    (equal-tailed intervals: the truth's quantile within them) and the true
    N's 90% (mass, spin) region.  One row per group of ``by`` (and one for all
    trials).  Columns: ``group``, ``posterior``, ``parameter``, ``nominal``,
    ``n``, ``held``, ``rate``, ``ci_lo``, ``ci_hi``.

    Examples
    --------
    >>> t = pd.DataFrame({"n_overtones": [0, 0], "q_mass_true": [0.5, 0.8],
    ...                   "q_spin_true": [0.5, 0.5], "q_mass_avg": [0.5, 0.5],
    ...                   "q_spin_avg": [0.5, 0.5], "in_hpd90": [True, True]})
    >>> coverage_table(t).query("parameter == 'mass' and posterior == 'true N'").rate.tolist()
    [0.5, 1.0, 0.5, 1.0]
    """
    out = []
    groups = [("all", rows)] + [(", ".join(f"{c}={v}" for c, v in
                                           zip(by, key if isinstance(key, tuple) else (key,),
                                               strict=True)), g)
                                for key, g in rows.groupby(list(by))]
    for name, g in groups:
        for post, suffix in (("true N", "true"), ("averaged over N", "avg")):
            for par in ("mass", "spin"):
                q = g[f"q_{par}_{suffix}"].to_numpy(float)
                for nominal in (0.5, 0.9):
                    held = int(np.sum(np.abs(q - 0.5) < nominal / 2))
                    out.append((name, post, par, nominal, len(q), held))
        held = int(g["in_hpd90"].sum())
        out.append((name, "true N", "mass and spin (region)", 0.9, len(g), held))
    table = pd.DataFrame(out, columns=["group", "posterior", "parameter", "nominal", "n",
                                       "held"])
    table["rate"] = table["held"] / table["n"].clip(lower=1)
    cis = [_interval(int(k), int(n)) for k, n in zip(table["held"], table["n"], strict=True)]
    table["ci_lo"] = [c[0] for c in cis]
    table["ci_hi"] = [c[1] for c in cis]
    return table


def claim_rates(rows: pd.DataFrame, edges: Sequence[float]) -> pd.DataFrame:
    """False-claim and missed-overtone rates of the supported N, in bins of overtone SNR.

    ``false_claim``: the supported N exceeds the truth's; ``missed``: it falls
    short of it (only trials with at least one overtone).  Bins of the
    truth's ``overtone_snr``; trials without overtones have overtone SNR 0 and
    form the first row (``bin_lo = bin_hi = 0``).

    Examples
    --------
    >>> t = pd.DataFrame({"n_overtones": [0, 1, 1], "supported_overtones": [1, 1, 0],
    ...                   "overtone_snr": [0.0, 12.0, 3.0]})
    >>> claim_rates(t, [0, 5, 20])[["n", "false_claim", "missed"]].values.tolist()
    [[1, 1, 0], [1, 0, 1], [1, 0, 0]]
    """
    if len(edges) < 2:
        raise InputError("claim_rates needs at least two bin edges.")
    rows = rows.copy()
    out = []
    none = rows[rows["n_overtones"] == 0]
    parts = [(0.0, 0.0, none)]
    some = rows[rows["n_overtones"] > 0]
    for a, b in zip(edges[:-1], edges[1:], strict=True):
        parts.append((float(a), float(b), some[(some["overtone_snr"] >= a)
                                               & (some["overtone_snr"] < b)]))
    for a, b, g in parts:
        sup, true = g["supported_overtones"].to_numpy(), g["n_overtones"].to_numpy()
        fc, ms = int(np.sum(sup > true)), int(np.sum(sup < true))
        n = len(g)
        out.append({"bin_lo": a, "bin_hi": b, "n": n, "false_claim": fc, "missed": ms,
                    "false_claim_rate": fc / n if n else float("nan"),
                    "missed_rate": ms / n if n else float("nan"),
                    "false_claim_ci": _interval(fc, n) if n else (float("nan"),) * 2,
                    "missed_ci": _interval(ms, n) if n else (float("nan"),) * 2})
    return pd.DataFrame(out)
