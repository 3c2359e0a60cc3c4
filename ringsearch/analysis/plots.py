"""Figures of the overtone analysis: posterior contours, Bayes factors, start-time scan.

Every figure goes through :func:`ringsearch.style.figure` and
:func:`ringsearch.style.save_figure` (Okabe–Ito colours, units on every axis).
"""

from __future__ import annotations

import os

import numpy as np
import pandas as pd

from ringsearch.analysis.posterior import RemnantPosterior, hpd_levels
from ringsearch.style import colour, figure, save_figure

__all__ = ["plot_posterior", "plot_bayes_factors", "plot_start_time_scan"]


def plot_posterior(post: RemnantPosterior, path: str | os.PathLike,
                   truth: tuple[float, float] | None = None, supported: int | None = None) -> None:
    """(mass, spin) posterior for every N with its 50% and 90% HPD contours.

    Examples
    --------
    >>> plot_posterior(post, "posterior.png", truth=(67.6, 0.67))  # doctest: +SKIP
    """
    fig, ax = figure(figsize=(6.4, 4.8))
    for k in range(post.max_overtones + 1):
        p = post.posterior(k)
        lev = sorted(set(hpd_levels(p, [0.9, 0.5])))
        if len(lev) < 2 or lev[0] >= p.max():
            continue
        ls = "-" if supported is None or k == supported else "--"
        ax.contour(post.masses[k], post.spins[k], p.T, levels=lev + [p.max() * 1.0001],
                   colors=[colour(k)], linestyles=ls, linewidths=[1.0, 2.0])
        ax.plot([], [], color=colour(k), ls=ls, label=f"N = {k}")
    if truth is not None:
        ax.plot(*truth, marker="*", ms=12, color="black", ls="none", label="injected")
    ax.set_xlabel("detector-frame mass [M$_\\odot$]")
    ax.set_ylabel("spin [dimensionless]")
    ax.set_title("remnant posterior: 50% (thick) and 90% (thin) credible regions")
    if ax.get_legend_handles_labels()[0]:
        ax.legend(loc="best")
    save_figure(fig, path)


def plot_bayes_factors(post: RemnantPosterior, ev_t0: pd.DataFrame | None,
                       path: str | os.PathLike, threshold: float = 0.5) -> None:
    """log10 Bayes factors N:N-1 against N (left) and against start time (right)."""
    ncol = 2 if ev_t0 is not None and len(ev_t0) > 1 else 1
    fig, axes = figure(ncols=ncol, figsize=(5.2 * ncol, 4.0), squeeze=False)
    ax = axes[0, 0]
    keys = list(post.log10_bayes)
    ns = np.arange(1, len(keys) + 1)
    ax.bar(ns, [post.log10_bayes[k] for k in keys], color=colour(0))
    ax.axhline(threshold, color=colour(1), ls="--", label=f"threshold {threshold:g}")
    ax.axhline(0.0, color="black", lw=0.8)
    ax.set_xticks(ns, [f"{k}" for k in keys])
    ax.set_xlabel("overtone counts compared, N : N-1 [count]")
    ax.set_ylabel("log$_{10}$ Bayes factor [dimensionless]")
    ax.legend(loc="best")
    if ncol == 2:
        ax = axes[0, 1]
        for i, k in enumerate(keys):
            col = f"log10_bayes_{k.replace(':', '_')}"
            if col in ev_t0:
                ax.plot(ev_t0.t0_offset_ms, ev_t0[col], marker="o", color=colour(i),
                        label=f"{k}")
        ax.axhline(threshold, color="black", ls="--", lw=0.8)
        ax.set_xlabel("start time after the candidate time [ms]")
        ax.set_ylabel("log$_{10}$ Bayes factor [dimensionless]")
        ax.legend(loc="best", title="N : N-1")
    save_figure(fig, path)


def plot_start_time_scan(scan: pd.DataFrame, path: str | os.PathLike) -> None:
    """Fitted amplitudes (at the common reference time) and residual power against t0.

    One panel row per overtone count N; markers per mode n with 1-sigma error
    bars (log scale: referring a fast overtone back to the reference time
    multiplies it by ``exp(Δt / τ)``).
    """
    ns = sorted(scan.n_overtones.unique())
    dets = list(dict.fromkeys(scan.detector))
    fig, axes = figure(nrows=len(ns), ncols=2, figsize=(10, 2.8 * len(ns)), squeeze=False)
    for r, nov in enumerate(ns):
        sub = scan[scan.n_overtones == nov]
        ax = axes[r, 0]
        for di, det in enumerate(dets):
            for k in sorted(sub.mode_n.unique()):
                m = sub[(sub.detector == det) & (sub.mode_n == k)]
                ax.errorbar(m.t0_rel_ms + 0.15 * di, m.amp_strain, yerr=m.amp_sigma_strain,
                            marker="os^v"[di % 4], ls="-", color=colour(k), capsize=2,
                            label=f"{det} n={k}")
        ax.set_yscale("log")
        ax.set_ylabel("|A| at reference [strain]")
        ax.set_title(f"N = {nov}")
        ax.legend(loc="best", fontsize="small")
        ax = axes[r, 1]
        for di, det in enumerate(dets):
            m = sub[(sub.detector == det) & (sub.mode_n == 0)]
            ax.errorbar(m.t0_rel_ms, m.residual_chi2 - m.residual_dof, yerr=m.residual_chi2_sigma,
                        marker="os^v"[di % 4], color=colour(di), capsize=2, label=det)
        ax.axhline(0.0, color="black", lw=0.8)
        ax.set_ylabel("residual - expected [whitened]")
        ax.legend(loc="best", fontsize="small")
    for ax in axes[-1]:
        ax.set_xlabel("start time after the reference time [ms]")
    save_figure(fig, path)
