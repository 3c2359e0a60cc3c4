"""Triggers: clustering of per-template SNR maxima into one row per signal, and the table.

Trigger table columns (one row per clustered trigger):

``gps`` (template start time t0, GPS s), ``detector``, ``snr`` (projection SNR),
``template_id``, ``mass_msun``, ``spin``, ``n_overtones``, and for each mode
n = 0..N ``f22{n}_hz``, ``tau22{n}_s``, ``amp22{n}_re``, ``amp22{n}_im`` (the
maximum-likelihood complex amplitude ``A_n`` at t0, strain units: the fitted
signal is ``Re[A_n e^{-i 2 pi f_n (t-t0)}] e^{-(t-t0)/tau_n}``), ``amp22{n}_abs``,
``cond_gram`` (condition number of the template's normalised Gram matrix), and
the signal-consistency veto (:mod:`ringsearch.search.veto`): ``chisq`` (band
chi-squared; NaN when the veto is off), ``chisq_dof`` (its degrees of freedom;
0 when off) and ``snr_reweighted`` (the ranking SNR; equal to ``snr`` when off).
"""

from __future__ import annotations

import bisect

import numpy as np
import pandas as pd

from ringsearch.search.bank import Bank

#: Column order of an empty trigger table (per-mode columns are added for N).
BASE_COLUMNS = ["gps", "detector", "snr", "template_id", "mass_msun", "spin",
                "n_overtones", "cond_gram"]


def cluster_triggers(cand: pd.DataFrame, window_s: float, column: str = "snr") -> pd.DataFrame:
    """Keep the loudest candidate in every time window, across all templates.

    Greedy: candidates are taken loudest first (by ``column``: ``"snr"``, or
    ``"snr_reweighted"`` with the veto on) and kept unless a kept one lies
    within ``window_s`` of it, so one signal makes one trigger.

    Examples
    --------
    >>> c = pd.DataFrame({"gps": [0.0, 0.01, 1.0], "snr": [6.0, 8.0, 7.0]})
    >>> cluster_triggers(c, 0.1).snr.tolist()
    [8.0, 7.0]
    """
    if len(cand) == 0:
        return cand.copy()
    order = np.argsort(-cand[column].to_numpy(), kind="stable")
    t = cand["gps"].to_numpy()[order]
    kept_t: list[float] = []
    kept: list[int] = []
    # kept times stay sorted so each check is a bisection
    for i, ti in zip(order, t, strict=True):
        j = bisect.bisect_left(kept_t, ti)
        if (j < len(kept_t) and kept_t[j] - ti < window_s) or (j > 0 and ti - kept_t[j - 1]
                                                               < window_s):
            continue
        kept_t.insert(j, ti)
        kept.append(i)
    return cand.iloc[kept].sort_values("gps").reset_index(drop=True)


def trigger_table(kept: pd.DataFrame, bank: Bank, templates: pd.DataFrame,
                  detector: str) -> pd.DataFrame:
    """Trigger rows with the template's parameters and per-mode complex amplitudes.

    Examples
    --------
    >>> trigger_table(kept, bank, templates, "H1")  # doctest: +SKIP
    """
    k = bank.n_modes
    ti = kept["template_index"].to_numpy(int) if len(kept) else np.empty(0, int)
    row = bank.table.iloc[ti]
    out = pd.DataFrame({
        "gps": kept["gps"].to_numpy(float) if len(kept) else np.empty(0),
        "detector": detector,
        "snr": kept["snr"].to_numpy(float) if len(kept) else np.empty(0),
        "template_id": row["template_id"].to_numpy(),
        "mass_msun": row["mass_msun"].to_numpy(float),
        "spin": row["spin"].to_numpy(float),
        "n_overtones": np.full(len(ti), bank.n_overtones, dtype=int),
        "cond_gram": templates["cond_gram"].to_numpy(float)[ti],
    })
    for n in range(k):
        out[f"f22{n}_hz"] = row[f"f22{n}_hz"].to_numpy(float)
        out[f"tau22{n}_s"] = row[f"tau22{n}_s"].to_numpy(float)
        re = kept[f"a{2 * n}"].to_numpy(float) if len(kept) else np.empty(0)
        im = kept[f"a{2 * n + 1}"].to_numpy(float) if len(kept) else np.empty(0)
        out[f"amp22{n}_re"] = re
        out[f"amp22{n}_im"] = im
        out[f"amp22{n}_abs"] = np.hypot(re, im)
    n_rows = len(ti)
    has = len(kept) and "chisq" in kept.columns
    out["chisq"] = kept["chisq"].to_numpy(float) if has else np.full(n_rows, np.nan)
    out["chisq_dof"] = kept["chisq_dof"].to_numpy(int) if has else np.zeros(n_rows, int)
    out["snr_reweighted"] = (kept["snr_reweighted"].to_numpy(float) if has
                             else out["snr"].to_numpy(float))
    out["detector"] = out["detector"].astype(str)
    return out


def loudest(triggers: pd.DataFrame, column: str = "snr") -> dict | None:
    """The loudest trigger (largest ``column``) as a plain dict with the summary keys of DESIGN.md.

    Keys: ``gps, snr, mass, spin, f_hz, tau_s, n_overtones`` (f/tau of (2,2,0))
    plus ``template_id``, ``detector`` and, when present, ``snr_reweighted``,
    ``chisq``, ``chisq_dof``.

    Examples
    --------
    >>> loudest(triggers)["gps"]  # doctest: +SKIP
    """
    if triggers is None or len(triggers) == 0:
        return None
    r = triggers.loc[triggers[column].idxmax()]
    out = {"gps": float(r.gps), "snr": float(r.snr), "mass": float(r.mass_msun),
           "spin": float(r.spin), "f_hz": float(r.f220_hz), "tau_s": float(r.tau220_s),
           "n_overtones": int(r.n_overtones), "template_id": int(r.template_id),
           "detector": str(r.detector)}
    if "snr_reweighted" in triggers.columns:
        out.update(snr_reweighted=float(r.snr_reweighted), chisq=float(r.chisq),
                   chisq_dof=int(r.chisq_dof))
    return out
