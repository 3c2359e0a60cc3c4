"""Figures of a search: SNR around the loudest candidate, fit on whitened data, bank, FAR.

Every figure goes through :func:`ringsearch.style.figure` / ``save_figure``
(Okabe–Ito colours, units on every axis).  The Q-transform comes from the data
layer's :func:`ringsearch.data.plots.plot_qtransform`.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import scipy.fft

from ringsearch.search.bank import Bank
from ringsearch.search.correlate import snr_series
from ringsearch.search.templates import basis_waveforms
from ringsearch.style import PALETTE, detector_colour, figure, save_figure


def _template_modes(bank: Bank, template_id: int) -> tuple[np.ndarray, np.ndarray]:
    row = bank.table.index[bank.table.template_id == template_id][0]
    return bank.f_hz[row], bank.tau_s[row]


def plot_snr_around(conds: dict, bank: Bank, template_id: int, around: float, path: Any,
                    half_width: float = 0.25) -> Path:
    """Projection SNR of one template against start time, per detector, around ``around``.

    Examples
    --------
    >>> plot_snr_around(res.conditioned, res.bank, 12, gps, "snr.png")  # doctest: +SKIP
    """
    f, tau = _template_modes(bank, template_id)
    fig, ax = figure(figsize=(7, 3.5))
    for det, c in conds.items():
        s = snr_series(c, f, tau, gps_start=around - half_width, gps_end=around + half_width)
        ax.plot(s.gps - around, s.snr, color=detector_colour(det), lw=1, label=det)
    ax.set_xlabel(f"template start time - {around:.3f} (s)")
    ax.set_ylabel("projection SNR (dimensionless)")
    ax.set_title(f"template {template_id}: f220 = {f[0]:.1f} Hz, tau220 = {tau[0] * 1e3:.2f} ms")
    ax.legend()
    save_figure(fig, path)
    return Path(path)


def plot_whitened_fit(conds: dict, candidate_rows: dict, path: Any, before: float = 0.05,
                      after: float = 0.1) -> Path:
    """Whitened data with the best-fit ringdown (whitened identically) overlaid.

    ``candidate_rows`` maps detector -> trigger row (``gps``, modes, amplitudes).

    Examples
    --------
    >>> plot_whitened_fit(res.conditioned, {"H1": row}, "fit.png")  # doctest: +SKIP
    """
    fig, axes = figure(nrows=len(candidate_rows), figsize=(7, 2.6 * len(candidate_rows)),
                       squeeze=False)
    for ax, (det, r) in zip(axes[:, 0], candidate_rows.items(), strict=True):
        c = conds[det]
        w = c.whitened
        fs = float(c.sample_rate)
        t0 = float(w.t0.value)
        k0 = int(round((float(r["gps"]) - t0) * fs))
        a, b = max(0, k0 - int(before * fs)), min(w.size, k0 + int(after * fs))
        n = int(r["n_overtones"]) + 1
        f = np.array([r[f"f22{j}_hz"] for j in range(n)], float)
        tau = np.array([r[f"tau22{j}_s"] for j in range(n)], float)
        amp = np.array([[r[f"amp22{j}_re"], r[f"amp22{j}_im"]] for j in range(n)]).ravel()
        # the model in strain units on a buffer long enough for the whitening filter
        m = scipy.fft.next_fast_len(max(8 * (b - a), int(4 * fs)))
        u = basis_waveforms(f, tau, m, fs)  # (2K, m), template starting at index 0
        h = amp @ u
        hw = np.roll(scipy.fft.irfft(scipy.fft.rfft(h) * c.filter_response(
            scipy.fft.rfftfreq(m, 1 / fs)), m), k0 - a)[: b - a]
        t = (np.arange(a, b) - k0) / fs
        sig = float(getattr(c, "sigma", 1.0)) or 1.0
        ax.plot(t * 1e3, w.value[a:b] / sig, color=PALETTE["black"], lw=0.7, alpha=0.6,
                label=f"{det} whitened data")
        ax.plot(t * 1e3, hw / sig, color=detector_colour(det), lw=1.4, label="best-fit ringdown")
        ax.axvline(0, color=PALETTE["sky"], lw=0.8)
        ax.set_ylabel("whitened (noise std)")
        ax.legend(loc="upper right", fontsize=8)
    axes[-1, 0].set_xlabel("time after template start (ms)")
    save_figure(fig, path)
    return Path(path)


def plot_bank(bank: Bank, path: Any, mark: int | None = None) -> Path:
    """The bank in the (mass, spin) plane and in (f220, tau220), loudest template marked.

    Examples
    --------
    >>> plot_bank(bank, "bank.png", mark=12)  # doctest: +SKIP
    """
    fig, (a1, a2) = figure(ncols=2, figsize=(9, 3.8))
    t = bank.table
    a1.scatter(t.mass_msun, t.spin, s=6, color=PALETTE["blue"], label="templates")
    a2.scatter(t.f220_hz, t.tau220_s * 1e3, s=6, color=PALETTE["blue"])
    if mark is not None and mark >= 0:
        r = t[t.template_id == mark]
        a1.scatter(r.mass_msun, r.spin, s=90, marker="*", color=PALETTE["vermillion"],
                   label="loudest candidate")
        a2.scatter(r.f220_hz, r.tau220_s * 1e3, s=90, marker="*", color=PALETTE["vermillion"])
    a1.set_xlabel("remnant mass (solar masses, detector frame)")
    a1.set_ylabel("remnant spin (dimensionless)")
    a1.legend(fontsize=8)
    a2.set_xscale("log")
    a2.set_yscale("log")
    a2.set_xlabel("f220 (Hz)")
    a2.set_ylabel("tau220 (ms)")
    fig.suptitle(f"{len(bank)} templates, N = {bank.n_overtones} overtones, "
                 f"min match {bank.meta.get('min_match', float('nan')):.3g}")
    save_figure(fig, path)
    return Path(path)


def plot_far(candidates: pd.DataFrame, background: pd.DataFrame, background_time_s: float,
             path: Any) -> Path:
    """Cumulative rate of background events against the ranking statistic, candidates on top.

    Examples
    --------
    >>> plot_far(res.candidates, res.background, 1188.0, "far.png")  # doctest: +SKIP
    """
    from ringsearch.physics.units import YEAR_S

    fig, ax = figure(figsize=(6.5, 4))
    if len(background) and background_time_s > 0:
        x = np.sort(background["network_snr"].to_numpy(float))[::-1]
        rate = np.arange(1, x.size + 1) / background_time_s * YEAR_S
        ax.step(x, rate, where="post", color=PALETTE["black"], label="background (time slides)")
    if len(candidates) and "far_per_year" in candidates:
        c = candidates.dropna(subset=["far_per_year"])
        up = c.get("far_is_upper_limit", pd.Series(False, index=c.index)).astype(bool)
        ax.scatter(c.network_snr[~up], c.far_per_year[~up], color=PALETTE["vermillion"],
                   zorder=3, label="candidates")
        ax.scatter(c.network_snr[up], c.far_per_year[up], color=PALETTE["vermillion"],
                   marker="v", zorder=3, label="candidates (upper limit)")
    ax.set_yscale("log")
    ax.set_xlabel("network ranking statistic (SNR, dimensionless)")
    ax.set_ylabel("false-alarm rate (per year)")
    if ax.get_legend_handles_labels()[0]:
        ax.legend(fontsize=8)
    else:
        ax.text(0.5, 0.5, "no background event and no candidate", transform=ax.transAxes,
                ha="center", va="center")
    save_figure(fig, path)
    return Path(path)
