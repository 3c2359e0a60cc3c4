"""Figures of an injection campaign, drawn from its output folder's tables.

Each function takes the loaded tables and a path stem and writes the figure
as PNG and PDF (through :func:`ringsearch.style.save_figure`); it returns
the PNG path, or None when the campaign has nothing to show for it (e.g.
no distances when loudness was set by SNR alone).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

from ringsearch.style import PALETTE, colour, figure, save_figure

#: Axis labels (with units) of the binned quantities.
LABELS = {
    "network_snr": "network optimal SNR",
    "distance_mpc": "luminosity distance [Mpc]",
}


def _save_both(fig, stem: Path) -> Path:
    from ringsearch.files import atomic_path

    stem.parent.mkdir(parents=True, exist_ok=True)
    with atomic_path(stem.with_suffix(".pdf")) as tmp:
        fig.savefig(tmp, format="pdf")
    save_figure(fig, stem.with_suffix(".png"))
    return stem.with_suffix(".png")


def read_csv_or_empty(path: Path) -> pd.DataFrame:
    """A CSV table, or an empty frame when the file holds no columns."""
    try:
        return pd.read_csv(path)
    except pd.errors.EmptyDataError:
        return pd.DataFrame()


def _panels(n: int, height: float = 3.2):
    fig, axes = figure(ncols=n, nrows=1, figsize=(4.2 * n + 0.4, height), sharey=True,
                       squeeze=False)
    return fig, list(axes[0])


def _dodged(g: pd.DataFrame, i: int, n: int) -> np.ndarray:
    """Bin centres shifted by a few per cent of the bin width per series, so that the
    error bars of several series in one bin do not hide each other."""
    width = (g["bin_hi"] - g["bin_lo"]).to_numpy(float)
    return g["bin_centre"].to_numpy(float) + (i - (n - 1) / 2) * 0.08 * width


def efficiency_curves(efficiency: pd.DataFrame, sigmoid: pd.DataFrame, by: str,
                      stem: Path) -> Path | None:
    """Efficiency against ``by``: one panel per template overtone count, one curve per
    injected overtone count, binomial intervals as error bars, fitted sigmoid as a line.

    Examples
    --------
    >>> efficiency_curves(eff, sig, "network_snr", Path("fig/eff_snr"))  # doctest: +SKIP
    """
    table = efficiency[efficiency["binned_by"] == by]
    if table.empty:
        return None
    templates = sorted(table["template_overtones"].unique())
    injected = sorted(table["injected_overtones"].unique())
    fig, axes = _panels(len(templates))
    for ax, n_tpl in zip(axes, templates, strict=True):
        for i, n_inj in enumerate(injected):
            g = table[(table["template_overtones"] == n_tpl)
                      & (table["injected_overtones"] == n_inj)].sort_values("bin_lo")
            if g.empty:
                continue
            c = colour(i)
            x = _dodged(g, i, len(injected))
            y = g["efficiency"].to_numpy(float)
            err = np.vstack([y - g["ci_lo"].to_numpy(float), g["ci_hi"].to_numpy(float) - y])
            ax.errorbar(x, y, yerr=err, fmt="o", ms=4, color=c, capsize=2,
                        label=f"{n_inj} overtone{'s' if n_inj != 1 else ''} injected")
            fit = sigmoid[(sigmoid["fitted_in"] == by) & (sigmoid["template_overtones"] == n_tpl)
                          & (sigmoid["injected_overtones"] == n_inj)] if len(sigmoid) else []
            if len(fit) and bool(fit["ok"].iloc[0]):
                x50, x90 = float(fit["x50"].iloc[0]), float(fit["x90"].iloc[0])
                b = math.log(9.0) / (x90 - x50)
                xx = np.linspace(g["bin_lo"].min(), g["bin_hi"].max(), 200)
                ax.plot(xx, 1 / (1 + np.exp(-b * (xx - x50))), color=c, lw=1.2, alpha=0.8)
        ax.set_title(f"templates with {n_tpl} overtone{'s' if n_tpl != 1 else ''}")
        ax.set_xlabel(LABELS.get(by, by))
        ax.set_ylim(-0.03, 1.03)
    axes[0].set_ylabel("detection efficiency (fraction found)")
    axes[0].legend(loc="best", fontsize="small")
    return _save_both(fig, stem)


def overtone_efficiency_curves(table: pd.DataFrame, stem: Path,
                               population: str = "all") -> Path | None:
    """Overtone-recovery efficiency against network optimal SNR.

    One panel per required overtone count k (fraction of injections whose
    evidence supports at least k overtones), one curve per injected overtone
    count, binomial intervals as error bars.  ``population`` picks the rows
    of ``overtone_efficiency.csv`` (``"all"`` analysed injections by default).

    Examples
    --------
    >>> overtone_efficiency_curves(table, Path("fig/overtone_efficiency"))  # doctest: +SKIP
    """
    if table is None or table.empty or "population" not in table:
        return None
    table = table[(table["population"] == population) & (table["binned_by"] == "network_snr")]
    if table.empty:
        return None
    required = sorted(table["required_overtones"].unique())
    injected = sorted(table["injected_overtones"].unique())
    fig, axes = _panels(len(required))
    for ax, k in zip(axes, required, strict=True):
        for i, n_inj in enumerate(injected):
            g = table[(table["required_overtones"] == k)
                      & (table["injected_overtones"] == n_inj)].sort_values("bin_lo")
            if g.empty:
                continue
            x = _dodged(g, i, len(injected))
            y = g["efficiency"].to_numpy(float)
            err = np.vstack([y - g["ci_lo"].to_numpy(float), g["ci_hi"].to_numpy(float) - y])
            ax.errorbar(x, y, yerr=err, fmt="o-", ms=4, lw=1, color=colour(i), capsize=2,
                        label=f"{n_inj} overtone{'s' if n_inj != 1 else ''} injected")
        ax.set_title(f"at least {k} overtone{'s' if k != 1 else ''} supported")
        ax.set_xlabel(LABELS["network_snr"])
        ax.set_ylim(-0.03, 1.03)
    axes[0].set_ylabel("fraction with >= k overtones supported")
    axes[0].legend(loc="best", fontsize="small")
    return _save_both(fig, stem)


def found_missed(found: pd.DataFrame, stem: Path) -> Path | None:
    """Found and missed injections in the (distance, mass) plane, a panel per template
    overtone count (network SNR replaces distance when distances are unknown)."""
    if found.empty:
        return None
    xcol = "distance_mpc" if "distance_mpc" in found and np.isfinite(
        found["distance_mpc"].to_numpy(float)).any() else "network_snr"
    templates = sorted(found["template_overtones"].unique())
    fig, axes = _panels(len(templates))
    for ax, n_tpl in zip(axes, templates, strict=True):
        g = found[found["template_overtones"] == n_tpl]
        hit = g["found"].to_numpy(bool)
        ax.scatter(g.loc[~hit, xcol], g.loc[~hit, "true_mass"], marker="x", s=14,
                   color=PALETTE["vermillion"], label=f"missed ({(~hit).sum()})")
        ax.scatter(g.loc[hit, xcol], g.loc[hit, "true_mass"], marker="o", s=12,
                   facecolors="none", edgecolors=PALETTE["blue"], label=f"found ({hit.sum()})")
        if xcol == "distance_mpc":
            ax.set_xscale("log")
        ax.set_xlabel(LABELS[xcol])
        ax.set_title(f"templates with {n_tpl} overtone{'s' if n_tpl != 1 else ''}")
        ax.legend(loc="best", fontsize="small")
    axes[0].set_ylabel("injected remnant mass [M$_\\odot$, detector frame]")
    return _save_both(fig, stem)


def recovered_vs_injected(found: pd.DataFrame, stem: Path) -> Path | None:
    """Recovered against injected mass, spin and (2,2,0) frequency for found injections."""
    hits = found[found["found"].astype(bool)]
    if hits.empty:
        return None
    pairs = [("true_mass", "mass", "mass [M$_\\odot$]"), ("true_spin", "spin", "spin"),
             ("true_f_hz", "f_hz", "(2,2,0) frequency [Hz]")]
    pairs = [p for p in pairs if p[0] in hits and p[1] in hits]
    fig, axes = figure(ncols=len(pairs), figsize=(4.0 * len(pairs), 3.6), squeeze=False)
    for ax, (true, rec, label) in zip(axes[0], pairs, strict=True):
        for i, n_tpl in enumerate(sorted(hits["template_overtones"].unique())):
            g = hits[hits["template_overtones"] == n_tpl]
            ax.scatter(g[true], g[rec], s=10, alpha=0.6, color=colour(i),
                       label=f"{n_tpl}-overtone templates")
        lo = float(np.nanmin([hits[true].min(), hits[rec].min()]))
        hi = float(np.nanmax([hits[true].max(), hits[rec].max()]))
        ax.plot([lo, hi], [lo, hi], color=PALETTE["black"], lw=0.8, ls="--")
        ax.set_xlabel(f"injected {label}")
        ax.set_ylabel(f"recovered {label}")
    axes[0][0].legend(loc="best", fontsize="small")
    return _save_both(fig, stem)


def background(background: pd.DataFrame, thresholds: pd.DataFrame, stem: Path,
               years: dict | None = None) -> Path | None:
    """Cumulative background (events at least as loud) with the detection threshold."""
    if background.empty and thresholds.empty:
        return None
    fig, axes = figure(figsize=(5.5, 3.8))
    ax = axes
    for i, row in enumerate(thresholds.itertuples()):
        c = colour(i)
        stats = np.sort(background.loc[background["template_overtones"]
                                       == row.template_overtones, "stat"].to_numpy(float)
                        if len(background) else np.array([]))[::-1]
        if stats.size:
            yrs = (years or {}).get(row.template_overtones)
            count = np.arange(1, stats.size + 1)
            ylab = "background events per year at least this loud" if yrs else \
                "background events at least this loud"
            ax.step(stats, count / yrs if yrs else count, where="post", color=c,
                    label=f"{row.template_overtones}-overtone templates")
            ax.set_ylabel(ylab)
        ax.axvline(row.threshold, color=c, ls="--", lw=1)
    ax.set_yscale("log")
    ax.set_xlabel("ranking statistic (network SNR)")
    if not ax.get_ylabel():
        ax.set_ylabel("background events at least this loud")
    ax.set_title("time-slide background; dashed: detection threshold")
    if ax.get_legend_handles_labels()[0]:
        ax.legend(loc="best", fontsize="small")
    return _save_both(fig, stem)


def make_figures(out: str | Path, folder: str | Path | None = None) -> dict[str, Path]:
    """Draw every campaign figure from the tables in ``out``; returns name -> PNG path.

    Examples
    --------
    >>> pngs = make_figures("out/quick")  # doctest: +SKIP
    >>> sorted(pngs)                       # doctest: +SKIP
    ['background', 'efficiency_distance', 'efficiency_snr', 'found_missed', 'recovered']
    """
    out = Path(out)
    folder = Path(folder) if folder is not None else out / "figures"
    efficiency = pd.read_csv(out / "efficiency.csv")
    sigmoid = read_csv_or_empty(out / "sigmoid.csv")
    found = pd.read_parquet(out / "found.parquet")
    bg = pd.read_parquet(out / "background.parquet")
    th = pd.read_csv(out / "threshold.csv")
    years = {int(r.template_overtones): float(r.background_years) for r in th.itertuples()
             if np.isfinite(r.background_years) and r.background_years > 0}
    made = {
        "efficiency_snr": efficiency_curves(efficiency, sigmoid, "network_snr",
                                            folder / "efficiency_snr"),
        "efficiency_distance": efficiency_curves(efficiency, sigmoid, "distance_mpc",
                                                 folder / "efficiency_distance"),
        "found_missed": found_missed(found, folder / "found_missed"),
        "recovered": recovered_vs_injected(found, folder / "recovered"),
        "background": background(bg, th, folder / "background", years),
    }
    if (out / "overtone_efficiency.csv").exists():
        made["overtone_efficiency"] = overtone_efficiency_curves(
            read_csv_or_empty(out / "overtone_efficiency.csv"), folder / "overtone_efficiency")
    return {k: v for k, v in made.items() if v is not None}
