"""Assemble a finished campaign's chunk tables into the final results.

Workers run the search engine (:class:`ringsearch.search.engine.Search`, the
one ``ringsearch search`` runs) on every chunk and report, per injection, its
optimal SNRs and, per template overtone count, the engine's candidate it
matched (if any) with its ranking statistic; and per chunk the engine's
time-slide events and each slide's coincident seconds.  The detection
threshold is applied here, once, over the background pooled from every
chunk, so the FAR threshold uses all the background the campaign produced;
FARs come from :func:`ringsearch.search.significance.far_from_counts` (an
upper limit, flagged, when nothing in the background is louder).

Tables written (all atomically):

``injections.parquet``
    every drawn injection: the plan's true parameters plus ``snr_opt_<DET>``
    per detector, ``network_snr``, ``distance_mpc`` (when known), ``f_0_hz``,
    ``tau_0_s`` (true fundamental mode), ``arrival_gps`` (signal start at
    the first detector).
``found.parquet``
    one row per (injection, template overtone count): ``searched`` (the
    injection's arrival lies in searched start time of every detector),
    ``found`` (searched, matched by a candidate within ``match_window_s``, and
    the candidate's ranking statistic at or above the threshold), ``stat``
    (the candidate's network re-weighted SNR), ``far_per_year`` and
    ``far_is_upper_limit`` (from the pooled background), ``trigger_gps``
    (candidate start at its ``anchor_detector``), ``<DET>_snr`` and
    ``<DET>_snr_reweighted``, ``on_box_edge``, recovered ``mass, spin, f_hz,
    tau_s`` and the errors ``mass_error`` (recovered - true, Msun),
    ``spin_error``, ``f_error_hz``, ``tau_error_s``, ``gps_error_s``.
    Recovered values are NaN exactly when ``searched`` is False.  Injections
    removed by the data conditioning's gates (``gated``; loud signals can
    trip them) count as missed; other unsearched ones (near data edges) are
    left out of the efficiency (``counted`` False) and counted in
    ``summary.json`` (``n_unsearched``).
``background.parquet``
    the pooled time-slide events (``chunk, template_overtones, slide, stat``).
``livetime.parquet``
    the coincident seconds of every chunk's slides (``chunk, template_overtones,
    slide, live_time_s``): the background time the FARs divide by.
``candidates.parquet``
    the engine's zero-lag candidates of every chunk (``chunk``,
    ``template_overtones`` and the engine's candidate columns): in the
    default at-times mode those anchored within the match window of an
    injection, in ``full`` mode all of them.
``threshold.csv``, ``efficiency.csv``, ``sigmoid.csv``, ``sensitivity.csv``,
``summary.json``.
``overtone_efficiency.csv`` (only with ``[overtones] enabled = true``)
    overtone-recovery efficiency in bins of network optimal SNR: per injected
    overtone count and required count k, the fraction of injections whose
    evidence supports at least k overtones (``supported_overtones >= k``),
    with the same binomial intervals as ``efficiency.csv``.  Population
    ``all``: every analysed injection (``template_overtones`` = -1, the
    evidence does not depend on the search); population ``found``: the found
    injections, per template overtone count.  The evidence columns
    (``supported_overtones``, ``log10_bayes_<k>_<k-1>``, ``evidence_*``) are
    in ``injections.parquet`` and ``found.parquet``.
"""

from __future__ import annotations

import json
import math
import time
from pathlib import Path

import numpy as np
import pandas as pd

from ringsearch import __version__
from ringsearch.campaign.efficiency import (
    ALL_TEMPLATES,
    EFFICIENCY_COLUMNS,
    OVERTONE_EFFICIENCY_COLUMNS,
    bin_edges,
    efficiency_table,
    fit_sigmoid,
    overtone_efficiency_table,
    sensitive_volume,
)
from ringsearch.files import atomic_path, write_json
from ringsearch.physics.units import YEAR_S
from ringsearch.search.significance import far_from_counts

#: The quantities efficiency is binned in; distance is left out when unknown.
BINNED = ("network_snr", "distance_mpc")


def _read_chunk_tables(out: Path, table: str) -> pd.DataFrame:
    frames = []
    for marker in sorted((out / "chunks").glob("*.done")):
        meta = json.loads(marker.read_text())
        if table not in meta.get("tables", []):
            continue
        frame = pd.read_parquet(out / "chunks" / f"{marker.stem}.{table}.parquet")
        frame.insert(0, "chunk", int(meta["chunk"]))
        frames.append(frame)
    if not frames:
        return pd.DataFrame()
    return pd.concat(frames, ignore_index=True)


def _write_parquet(frame: pd.DataFrame, path: Path) -> None:
    with atomic_path(path) as tmp:
        frame.to_parquet(tmp, index=False)


def _write_csv(frame: pd.DataFrame, path: Path) -> None:
    with atomic_path(path) as tmp:
        frame.to_csv(tmp, index=False, float_format="%.6g")


def thresholds(config: dict, background: pd.DataFrame, livetime: pd.DataFrame,
               template_counts: list[int] | None = None) -> pd.DataFrame:
    """Detection threshold on the ranking statistic per template overtone count.

    With ``threshold.snr`` the threshold is that value.  With
    ``threshold.far_per_year`` it is the smallest statistic whose rate of
    louder-or-equal background events is at most the target; when the
    background is too short to reach that rate, it is just above the
    loudest background event and ``limited`` says so.  Either way the pooled
    background's size and time are reported.  ``template_counts`` defaults to
    ``search.template_overtones``.

    Examples
    --------
    >>> cfg = {"threshold": {"snr": 6.0, "far_per_year": None},
    ...        "search": {"template_overtones": [0]}}
    >>> thresholds(cfg, pd.DataFrame(), pd.DataFrame())["threshold"].tolist()
    [6.0]
    """
    rows = []
    th = config["threshold"]
    counts = template_counts if template_counts is not None else \
        config["search"]["template_overtones"]
    for n_tpl in counts:
        stats = (background.loc[background["template_overtones"] == n_tpl, "stat"]
                 .to_numpy(float) if len(background) else np.array([]))
        years = (float(livetime.loc[livetime["template_overtones"] == n_tpl,
                                    "live_time_s"].sum()) / YEAR_S if len(livetime) else 0.0)
        if th["snr"] is not None:
            rows.append({"template_overtones": n_tpl, "threshold": th["snr"],
                         "kind": "snr", "target_far_per_year": math.nan,
                         "background_years": years,
                         "n_background": int(len(stats)), "limited": False})
            continue
        allowed = int(math.floor(th["far_per_year"] * years))  # louder events allowed
        s = np.sort(stats)[::-1]
        if len(s) == 0:
            thr, limited = 0.0, True
        elif allowed >= len(s):
            thr, limited = float(s[-1]), False
        elif allowed == 0:
            thr, limited = float(np.nextafter(s[0], np.inf)), True
        else:
            # the (allowed+1)-th loudest must stay below: threshold just above it
            thr, limited = float(np.nextafter(s[allowed], np.inf)), False
        rows.append({"template_overtones": n_tpl, "threshold": thr, "kind": "far",
                     "target_far_per_year": th["far_per_year"], "background_years": years,
                     "n_background": int(len(s)), "limited": limited})
    out = pd.DataFrame(rows)
    # how well the background measures the FAR at the threshold: n events at least as
    # loud, relative standard error 1/sqrt(n) (Poisson)
    n_at = []
    for r in out.itertuples():
        stats = (background.loc[background["template_overtones"] == r.template_overtones,
                                "stat"].to_numpy(float) if len(background) else np.array([]))
        n_at.append(int((stats >= r.threshold).sum()))
    out["n_background_above"] = n_at
    out["far_relative_error"] = [1.0 / math.sqrt(n) if n > 0 else math.inf for n in n_at]
    return out


def accuracy_table(found: pd.DataFrame) -> pd.DataFrame:
    """Median and central 90 % range of recovered-minus-true errors of found injections.

    One row per (injected, template) overtone-count pair and error column.

    Examples
    --------
    >>> df = pd.DataFrame({"injected_overtones": 0, "template_overtones": 0,
    ...                    "found": True, "mass_error": [-1.0, 0.0, 1.0]})
    >>> accuracy_table(df)["median"].tolist()
    [0.0]
    """
    rows = []
    errors = [c for c in ("mass_error", "spin_error", "f_error_hz", "tau_error_s",
                          "gps_error_s") if c in found.columns]
    hits = found[found["found"].astype(bool)]
    for (n_inj, n_tpl), g in hits.groupby(["injected_overtones", "template_overtones"]):
        for c in errors:
            v = g[c].to_numpy(float)
            v = v[np.isfinite(v)]
            if v.size == 0:
                continue
            lo, med, hi = np.quantile(v, [0.05, 0.5, 0.95])
            rows.append({"injected_overtones": int(n_inj), "template_overtones": int(n_tpl),
                         "error": c, "n_found": int(v.size), "median": med, "lo90": lo,
                         "hi90": hi})
    return pd.DataFrame(rows, columns=["injected_overtones", "template_overtones", "error",
                                       "n_found", "median", "lo90", "hi90"])


def overtone_results(config: dict, injections: pd.DataFrame, found: pd.DataFrame
                     ) -> tuple[pd.DataFrame, dict]:
    """The overtone-recovery efficiency table and its ``summary.json`` entry.

    Examples
    --------
    >>> table, entry = overtone_results(config, injections, found)  # doctest: +SKIP
    """
    ov = config["overtones"]
    rep = config["report"]
    n_max = ov["max_overtones"]
    done = injections[injections["supported_overtones"].to_numpy(float) >= 0]
    entry = {"max_overtones": n_max, "log10_bayes_threshold": ov["log10_bayes_threshold"],
             "network": ov["network"], "start_offset_ms": ov["start_offset_ms"],
             "n_analysed": int(len(done)), "n_not_analysed": int(len(injections) - len(done)),
             "supported_fraction": {}}
    if done.empty or not np.isfinite(done["network_snr"].to_numpy(float)).any():
        return pd.DataFrame(columns=OVERTONE_EFFICIENCY_COLUMNS), entry
    edges = bin_edges(done["network_snr"].to_numpy(float), rep["snr_bins"])
    pooled = done.assign(template_overtones=ALL_TEMPLATES)
    hits = found[found["found"].astype(bool)]
    table = pd.concat([
        overtone_efficiency_table(pooled, n_max, "network_snr", edges, rep["confidence"],
                                  rep["ci_method"], population="all"),
        overtone_efficiency_table(hits, n_max, "network_snr", edges, rep["confidence"],
                                  rep["ci_method"], population="found"),
    ], ignore_index=True)
    for n_inj, g in done.groupby("injected_overtones"):
        sup = g["supported_overtones"].to_numpy(int)
        for k in range(1, n_max + 1):
            entry["supported_fraction"][f"{int(n_inj)}:>={k}"] = float(np.mean(sup >= k))
    return table, entry


def assemble(out: str | Path) -> dict:
    """Build the final tables of a finished campaign folder; returns the summary.

    Examples
    --------
    >>> summary = assemble("out/quick")  # doctest: +SKIP
    """
    out = Path(out)
    manifest = json.loads((out / "campaign.json").read_text())
    config = manifest["config"]
    plan = pd.read_parquet(out / "plan" / "injections.parquet")
    per_inj = _read_chunk_tables(out, "injections").drop(columns="chunk", errors="ignore")
    found = _read_chunk_tables(out, "found").drop(columns="chunk", errors="ignore")
    background = _read_chunk_tables(out, "background")
    livetime = _read_chunk_tables(out, "livetime")
    candidates = _read_chunk_tables(out, "candidates")

    extra = [c for c in per_inj.columns if c != "injection_id" and c not in plan.columns]
    overlap = [c for c in per_inj.columns if c != "injection_id" and c in plan.columns]
    injections = plan.merge(per_inj[["injection_id", *extra]], on="injection_id", how="left")
    for c in overlap:  # worker-derived values (e.g. distance in SNR mode) fill gaps only
        filled = per_inj.set_index("injection_id")[c]
        injections[c] = injections[c].fillna(injections["injection_id"].map(filled))
    injections = injections.sort_values("injection_id").reset_index(drop=True)

    counts = sorted(int(n) for n in found["template_overtones"].unique()) if len(found) else None
    th = thresholds(config, background, livetime, counts)
    found = found.merge(th[["template_overtones", "threshold"]], on="template_overtones",
                        how="left")
    found["found"] = found["searched"].astype(bool) & (found["stat"] >= found["threshold"])
    if "gated" not in found:
        found["gated"] = False
    # gated injections were missed by the search; others outside filtered time are left out
    found["counted"] = found["searched"].astype(bool) | found["gated"].astype(bool)
    found["far_per_year"] = np.nan
    found["far_is_upper_limit"] = False
    for row in th.itertuples():
        sel = (found["template_overtones"] == row.template_overtones) & \
            found["stat"].notna()
        if row.background_years > 0 and sel.any():
            bg = np.sort(background.loc[background["template_overtones"]
                                        == row.template_overtones, "stat"].to_numpy(float))
            stat = found.loc[sel, "stat"].to_numpy(float)
            n_louder = bg.size - np.searchsorted(bg, stat, side="left")
            far = far_from_counts(n_louder, row.background_years * YEAR_S)
            found.loc[sel, "far_per_year"] = far["far_per_year"].to_numpy()
            found.loc[sel, "far_is_upper_limit"] = far["far_is_upper_limit"].to_numpy()
    truth_cols = ["injection_id", "injected_overtones", "gps", "mass", "spin", "network_snr"]
    for c in ("distance_mpc", "f_0_hz", "tau_0_s", "arrival_gps"):
        if c in injections.columns:
            truth_cols.append(c)
    overtones_on = bool(config.get("overtones", {}).get("enabled"))
    if overtones_on:  # the per-injection evidence goes into found.parquet too
        truth_cols += [c for c in injections.columns
                       if c == "supported_overtones" or c.startswith("log10_bayes_")
                       or c.startswith("evidence_")]
    truth = injections[truth_cols].rename(columns={"gps": "true_gps", "mass": "true_mass",
                                                   "spin": "true_spin", "f_0_hz": "true_f_hz",
                                                   "tau_0_s": "true_tau_s"})
    found = found.merge(truth, on="injection_id", how="left")
    found["mass_error"] = found["mass"] - found["true_mass"]
    found["spin_error"] = found["spin"] - found["true_spin"]
    if "true_f_hz" in found:
        found["f_error_hz"] = found["f_hz"] - found["true_f_hz"]
        found["tau_error_s"] = found["tau_s"] - found["true_tau_s"]
    # timing error against the arrival at the first detector (geocentre time if unknown)
    arrival = found["arrival_gps"] if "arrival_gps" in found else found["true_gps"]
    found["gps_error_s"] = found["trigger_gps"] - arrival
    found = found.sort_values(["injection_id", "template_overtones"]).reset_index(drop=True)

    rep = config["report"]
    searched = found[found["counted"]]
    tables = []
    fits = []
    sens = []
    for by in BINNED:
        if by not in searched.columns or not np.isfinite(searched[by].to_numpy(float)).any():
            continue
        edges = bin_edges(searched[by].to_numpy(float), rep["snr_bins" if by == "network_snr"
                                                             else "distance_bins"])
        table = efficiency_table(searched, by, edges, rep["confidence"], rep["ci_method"])
        tables.append(table)
        for (n_inj, n_tpl), g in searched.groupby(["injected_overtones",
                                                   "template_overtones"]):
            fit = fit_sigmoid(g[by].to_numpy(float), g["found"].to_numpy(bool))
            fits.append({"fitted_in": by, "injected_overtones": int(n_inj),
                         "template_overtones": int(n_tpl),
                         **{k: fit.get(k, math.nan) for k in
                            ("x50", "x50_err", "x90", "x90_err")},
                         "ok": fit["ok"], "message": fit["message"]})
            if by == "distance_mpc":
                sub = table[(table["injected_overtones"] == n_inj)
                            & (table["template_overtones"] == n_tpl)]
                if len(sub):
                    sens.append({"injected_overtones": int(n_inj),
                                 "template_overtones": int(n_tpl), **sensitive_volume(sub)})
    efficiency = (pd.concat(tables, ignore_index=True) if tables
                  else pd.DataFrame(columns=EFFICIENCY_COLUMNS))
    sigmoid = pd.DataFrame(fits)
    sensitivity = pd.DataFrame(sens)
    accuracy = accuracy_table(found)

    _write_parquet(injections, out / "injections.parquet")
    _write_parquet(found, out / "found.parquet")
    bg_out = background if len(background) else pd.DataFrame(
        {"chunk": pd.Series(dtype=int), "template_overtones": pd.Series(dtype=int),
         "stat": pd.Series(dtype=float)})
    _write_parquet(bg_out, out / "background.parquet")
    _write_parquet(livetime if len(livetime) else pd.DataFrame(
        {"chunk": pd.Series(dtype=int), "template_overtones": pd.Series(dtype=int),
         "slide": pd.Series(dtype=int), "live_time_s": pd.Series(dtype=float)}),
        out / "livetime.parquet")
    _write_parquet(candidates, out / "candidates.parquet")
    _write_csv(th, out / "threshold.csv")
    _write_csv(efficiency, out / "efficiency.csv")
    _write_csv(sigmoid, out / "sigmoid.csv")
    _write_csv(sensitivity, out / "sensitivity.csv")
    _write_csv(accuracy, out / "accuracy.csv")
    overtone_entry = None
    if overtones_on:
        ov_table, overtone_entry = overtone_results(config, injections, found)
        _write_csv(ov_table, out / "overtone_efficiency.csv")

    status_cpu = 0.0
    status_wall = 0.0
    for marker in (out / "chunks").glob("*.done"):
        meta = json.loads(marker.read_text())
        status_cpu += meta.get("cpu_s", 0.0)
        status_wall += meta.get("wall_s", 0.0)
    summary = {
        "name": manifest["name"],
        "config_hash": manifest["config_hash"],
        "ringsearch_version": __version__,
        "created_utc": manifest["created_utc"],
        "assembled_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "n_injections": int(len(injections)),
        "n_chunks": int(manifest["n_chunks"]),
        "chunk_cpu_s": status_cpu,
        "chunk_wall_s": status_wall,
        "n_unsearched": int((~found["counted"]).sum()),
        "n_gated": int(found["gated"].astype(bool).sum()),
        "ci_method": rep["ci_method"],
        "confidence": rep["confidence"],
        "search_mode": config["search"].get("mode", "full"),
        "background_chunks": int((pd.read_parquet(out / "plan" / "chunks.parquet")
                                  .get("kind", pd.Series(dtype=str)) == "background").sum()),
        "thresholds": th.to_dict("records"),
        "found_fraction": {f"{int(k[0])}:{int(k[1])}": float(v) for k, v in
                           found.groupby(["injected_overtones", "template_overtones"])
                           ["found"].mean().items()},
    }
    if overtone_entry is not None:
        summary["overtones"] = overtone_entry
    write_json(out / "summary.json", summary)
    return summary
