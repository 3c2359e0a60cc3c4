"""Calibrate the overtone analysis by simulation: coverage table, P-P plots, claim rates.

Runs :mod:`ringsearch.analysis.calibration` for one detector and for two
detectors with independent amplitudes (the analysis' default network),
truths drawn from the analysis' own prior (N uniform in 0..2, mass and spin
uniform in the box, expected network SNR log-uniform on the default SNR
prior), and writes into ``--out`` (default ``scripts/calibration-results``):

* ``trials.csv``: one row per trial (truth, observed SNR, Bayes factors,
  quantiles of the truth in each posterior);
* ``coverage.csv`` and ``coverage.md``: how often the 50% and 90% intervals
  hold the truth, per true N and overall, for all trials and for those whose
  observed network SNR lies in 15-50, with 90% Clopper-Pearson intervals;
* ``pp.png``: P-P plots (the cumulative distribution of the truth's
  quantile; a calibrated posterior follows the diagonal);
* ``claims.csv`` and ``claims.png``: how often the supported N exceeds the
  truth (false claim) or falls short of it (missed overtone), against the
  optimal SNR of the overtones.

Usage: ``python scripts/calibrate.py [--trials 1200] [--workers 2] [--out DIR]``
(``make calibrate``: 1200 trials per network, about 6 minutes on 2 cores).
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent

#: The networks calibrated: name -> detectors (independent amplitudes).
NETWORKS = {"one detector": ("H1",), "two detectors": ("H1", "L1")}

#: Observed-SNR range reported beside all trials (conditioning on the data keeps
#: the calibration exact).
SNR_RANGE = (15.0, 50.0)

#: Bins of overtone SNR for the claim rates.
CLAIM_EDGES = (0.0, 5.0, 10.0, 15.0, 20.0, 30.0, 50.0, 100.0, 1000.0)


def _trial(args: tuple) -> dict:
    from ringsearch.analysis.calibration import CalibrationSetup, run_trial

    network, detectors, seed, index = args
    row = run_trial(CalibrationSetup(detectors=detectors, seed=seed), index)
    row["network"] = network
    return row


def run(trials: int, workers: int, seed: int) -> pd.DataFrame:
    jobs = [(name, dets, seed + k, i) for k, (name, dets) in enumerate(NETWORKS.items())
            for i in range(trials)]
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    with ProcessPoolExecutor(max_workers=workers) as pool:
        rows = list(pool.map(_trial, jobs, chunksize=8))
    return pd.DataFrame(rows)


def tables(df: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    from ringsearch.analysis.calibration import claim_rates, coverage_table

    cov, claims = [], []
    lo, hi = SNR_RANGE
    for network, g in df.groupby("network", sort=False):
        for selection, part in (("all trials", g),
                                (f"observed SNR {lo:g}-{hi:g}",
                                 g[(g["best_snr"] >= lo) & (g["best_snr"] < hi)])):
            cov.append(coverage_table(part).assign(network=network, selection=selection))
        claims.append(claim_rates(g, CLAIM_EDGES).assign(network=network))
    return pd.concat(cov, ignore_index=True), pd.concat(claims, ignore_index=True)


def markdown(cov: pd.DataFrame) -> str:
    lines = ["| network | trials | true N | posterior | parameter | nominal | held / n | rate "
             "[90% interval] |", "|---|---|---|---|---|---|---|---|"]
    for _, r in cov.iterrows():
        lines.append(f"| {r.network} | {r.selection} | {r.group} | {r.posterior} | "
                     f"{r.parameter} | {r.nominal:.2f} | {r.held} / {r.n} | {r.rate:.3f} "
                     f"[{r.ci_lo:.3f}, {r.ci_hi:.3f}] |")
    return "\n".join(lines) + "\n"


def plots(df: pd.DataFrame, claims: pd.DataFrame, out: Path) -> None:
    from ringsearch.style import figure, save_figure

    fig, axes = figure(ncols=len(NETWORKS), figsize=(5.2 * len(NETWORKS), 4.6))
    axes = np.atleast_1d(axes)
    for ax, (network, g) in zip(axes, df.groupby("network", sort=False), strict=True):
        u = np.linspace(0, 1, 201)
        n = len(g)
        band = 1.645 * np.sqrt(u * (1 - u) / max(n, 1))
        ax.fill_between(u, u - band, u + band, color="0.85", label="90% band of a uniform")
        for col, label in (("q_mass_true", "mass, true N"), ("q_spin_true", "spin, true N"),
                           ("q_mass_avg", "mass, averaged over N"),
                           ("q_spin_avg", "spin, averaged over N")):
            q = np.sort(g[col].to_numpy(float))
            ax.plot(q, np.arange(1, n + 1) / n, label=label,
                    ls="-" if "true" in col else "--")
        ax.plot([0, 1], [0, 1], color="k", lw=0.8)
        ax.set_xlabel("quantile of the truth in its posterior")
        ax.set_ylabel("fraction of trials")
        ax.set_title(f"{network}: {n} trials from the prior")
        ax.legend(fontsize=8, loc="upper left")
    save_figure(fig, out / "pp.png")
    fig, axes = figure(ncols=len(NETWORKS), figsize=(5.2 * len(NETWORKS), 4.2))
    axes = np.atleast_1d(axes)
    for ax, (network, c) in zip(axes, claims.groupby("network", sort=False), strict=True):
        some = c[c["bin_hi"] > 0]
        mid = np.sqrt(np.maximum(some["bin_lo"], 1.0) * some["bin_hi"].clip(upper=200.0))
        ax.errorbar(mid, some["missed_rate"], fmt="o-", label="missed overtone (true N >= 1)")
        ax.errorbar(mid, some["false_claim_rate"], fmt="s-",
                    label="false claim (supported N > true N)")
        zero = c[c["bin_hi"] == 0].iloc[0]
        ax.axhline(zero["false_claim_rate"], color="0.4", ls=":",
                   label=f"false claim, true N = 0 ({zero['false_claim']}/{zero['n']})")
        ax.set_xscale("log")
        ax.set_xlabel("optimal SNR of the overtones (modes n >= 1)")
        ax.set_ylabel("fraction of trials")
        ax.set_ylim(-0.02, 1.02)
        ax.set_title(f"{network}: supported N at log10 B > 0.5")
        ax.legend(fontsize=8)
    save_figure(fig, out / "claims.png")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=1200,
                    help="trials per network (default 1200)")
    ap.add_argument("--workers", type=int, default=2, help="processes (default 2)")
    ap.add_argument("--seed", type=int, default=2026, help="seed of the run (default 2026)")
    ap.add_argument("--out", type=Path, default=HERE / "calibration-results")
    args = ap.parse_args(argv)
    if args.trials < 1 or args.workers < 1:
        print("--trials and --workers must be positive integers.", file=sys.stderr)
        return 2
    start = time.perf_counter()
    df = run(args.trials, args.workers, args.seed)
    cov, claims = tables(df)
    from ringsearch.files import atomic_path, write_text

    args.out.mkdir(parents=True, exist_ok=True)
    for name, table in (("trials.csv", df), ("coverage.csv", cov), ("claims.csv", claims)):
        with atomic_path(args.out / name) as tmp:
            table.to_csv(tmp, index=False)
    write_text(args.out / "coverage.md", markdown(cov))
    plots(df, claims, args.out)
    print(markdown(cov[(cov["group"] == "all") & (cov["nominal"] == 0.9)]))
    print(claims.to_string(index=False))
    print(f"{len(df)} trials in {time.perf_counter() - start:.0f} s; wrote {args.out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
