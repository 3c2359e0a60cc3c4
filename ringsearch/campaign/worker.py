"""The chunk worker: noise, injections, then the search engine, then matching.

:func:`run_chunk` is a pure function of (campaign config, chunk row, the
chunk's injections), so it can run in any process or on any cluster node and
always give the same tables:

1. the chunk's strain per detector: seeded Gaussian noise from the PSD model
   (synthetic data) or the recorded strain cropped to the chunk with its
   data-quality segments (files);
2. the PSD of the uninjected data (Welch median, avoided windows left out),
   or the model PSD: the campaign's *truth* for each injection's optimal SNR
   and for scaling injections to a target SNR;
3. one :class:`ringsearch.physics.ringdown.RingdownSource` per injection
   (:func:`ringsearch.data.injections.make_sources`), added to the strain;
4. **the search**: :class:`ringsearch.search.engine.Search` -- the engine of
   ``ringsearch search``, with the campaign's ``[search]``/``[threshold]``
   settings -- conditions the injected strain (PSD estimated from it, or the
   model PSD with ``data.whiten_with = "model"``), makes triggers,
   coincidences and the time-slide background.  Times around every injection
   and avoided window are kept out of the background (the search's
   ``background_exclude``), as a search keeps known signals out of its own;
5. matching: each injection takes the loudest engine candidate whose start
   lies within ``search.match_window_s`` of the injection's arrival at the
   candidate's anchor detector;
6. optionally (``[overtones] enabled = true``) the overtone-count evidence of
   every injection (:func:`ringsearch.analysis.pipeline.candidate_evidence`).

The worker computes no statistic, slide or false-alarm rate of its own; the
results layer pools the engines' backgrounds over all chunks.
"""

from __future__ import annotations

import math
from functools import lru_cache
from pathlib import Path

import numpy as np
import pandas as pd

from ringsearch.campaign.draw import STREAM_NOISE, rng_for
from ringsearch.errors import InputError

#: Seconds around each injection's arrival (beyond its longest template) kept out of
#: the time-slide background: the whitening filter's short-range ringing and the
#: templates that fit the signal's tail.
BACKGROUND_GUARD_S = 0.25


# --------------------------------------------------------------------------- checks


def warm() -> None:
    """Import what every chunk uses; each local worker process calls it as it starts.

    The campaign starts its worker processes before placing the banks, so
    these imports overlap that fixed cost instead of delaying the first chunk.

    Examples
    --------
    >>> warm()
    """
    import ringsearch.data.condition  # noqa: F401
    import ringsearch.data.inject  # noqa: F401
    import ringsearch.data.injections  # noqa: F401
    import ringsearch.data.noise  # noqa: F401
    import ringsearch.search.engine  # noqa: F401


def prepare(config: dict) -> None:
    """Checks that need the physics and the search, run once before any chunk.

    Every injected mode must lie below the Nyquist frequency, the overtone
    evidence's spin box must lie in the QNM table, and every template bank
    must build (or load) within ``search.max_templates`` with the overtone
    count asked for (the banks are cached, so an in-process run reuses them).
    Raises InputError naming the key.
    """
    from ringsearch.physics.qnm import mode_f_tau

    fs = config["data"]["sample_rate"]
    inj = config["injections"]
    if "file" not in inj:  # a listed campaign's modes were checked with its list
        m_lo = inj["mass"]["value"] if inj["mass"]["dist"] == "fixed" else inj["mass"]["low"]
        chi_hi = (inj["spin"]["value"] if inj["spin"]["dist"] == "fixed"
                  else inj["spin"]["high"])
        f_max = max(float(np.max(mode_f_tau(m_lo, chi_hi, 2, 2, n)[0]))
                    for n in range(max(inj["overtones"]) + 1))
        if f_max >= fs / 2:
            raise InputError(f"'injections.mass' down to {m_lo} Msun with spin {chi_hi} puts "
                             f"a mode at {f_max:.0f} Hz, above the Nyquist frequency "
                             f"{fs / 2:g} Hz of 'data.sample_rate'.")
    ov = config.get("overtones")
    if ov and ov["enabled"]:
        from ringsearch.analysis.posterior import kerr22_spin_range

        lo, hi = kerr22_spin_range()
        if not lo <= ov["spin"][0] < ov["spin"][1] <= hi:
            raise InputError(f"'overtones.spin' = {ov['spin']} lies outside the QNM table's "
                             f"range [{lo:g}, {hi:.4g}] for (2,2,n) modes.")
    for n in template_overtones(config):
        campaign_bank(config, n)


# --------------------------------------------------------------------------- data


def analysable_segments(config: dict) -> list[list[tuple[float, float]]]:
    """Analysable GPS segments of each detector's files (DQ-passing, no NaN)."""
    from ringsearch.data.io import analysable_segments as segs_of

    out = []
    for det in config["data"]["detectors"]:
        segs = segs_of(config["data"]["files"][det], detector=det)
        out.append([(float(s[0]), float(s[1])) for s in segs])
    return out


@lru_cache(maxsize=8)
def _file_strain(paths: tuple[str, ...], det: str, sample_rate: float):
    """A detector's recording and its analysable segments, read as ``ringsearch search`` does."""
    from ringsearch.data.io import read_strain_with_quality

    strain, segs = read_strain_with_quality(list(paths), detector=det)
    if strain.sample_rate.value != sample_rate:
        strain = strain.resample(sample_rate)
    return strain, segs


def chunk_strain(config: dict, chunk: dict) -> dict:
    """The chunk's uninjected strain per detector: ``{det: (TimeSeries, SegmentList | None)}``.

    Synthetic noise has no data-quality segments (None); recorded strain
    brings its analysable segments cropped to the chunk.
    """
    data = config["data"]
    fs = data["sample_rate"]
    a, b = float(chunk["gps_start"]), float(chunk["gps_end"])
    out = {}
    if data["source"] == "synthetic":
        from ringsearch.data.noise import gaussian_noise

        duration = round((b - a) * fs) / fs
        for i, det in enumerate(data["detectors"]):
            rng = rng_for(config["campaign"]["seed"], STREAM_NOISE, chunk["data_index"], i)
            out[det] = (gaussian_noise(data["psd"], duration, fs, rng, gps_start=a,
                                       detector=det), None)
    else:
        from gwpy.segments import Segment, SegmentList

        for det in data["detectors"]:
            full, segs = _file_strain(tuple(data["files"][det]), det, fs)
            t0 = float(full.t0.value)
            i0 = int(math.ceil((a - t0) * fs - 1e-6))
            i1 = int(math.floor((b - t0) * fs + 1e-6))
            piece = full[max(i0, 0):min(i1, full.size)].copy()
            span = SegmentList([Segment(float(piece.t0.value),
                                        float(piece.t0.value) + piece.size / fs)])
            out[det] = (piece, (segs & span).coalesce())
    return out


def chunk_psds(config: dict, strains: dict, engine) -> dict:
    """PSD per detector: what the search estimates from the uninjected strain, or the model.

    The search whitens the injected chunk with it, and optimal SNRs and
    target-SNR scaling use it too.  Injections are placed every few seconds,
    so a PSD estimated from the injected data would be biased by them; the
    search run on data with one rare signal estimates the PSD of the data
    without it (the Welch median is robust to a single event), which is the
    estimate of the uninjected chunk.  ``ringsearch search --psd-from`` does
    the same for data made by ``ringsearch inject``.
    """
    if config["data"]["whiten_with"] == "model":
        return {det: model_psd(config) for det in strains}
    return engine.estimate_psds(strains)


def model_psd(config: dict):
    """The synthetic data's model PSD on the grid of ``data.psd_seglen_s`` (computed once
    per process)."""
    data = config["data"]
    return _model_psd(data["psd"], float(data["psd_seglen_s"]), float(data["sample_rate"]))


@lru_cache(maxsize=4)
def _model_psd(name: str, seglen: float, fs: float):
    from ringsearch.data.noise import resolve_psd

    return resolve_psd(name, np.fft.rfftfreq(int(round(seglen * fs)), 1.0 / fs))


# --------------------------------------------------------------------------- overtone evidence


def evidence_columns(max_overtones: int) -> list[str]:
    """Per-injection columns the overtone evidence adds to the ``injections`` table."""
    return (["supported_overtones"]
            + [f"log10_bayes_{k}_{k - 1}" for k in range(1, max_overtones + 1)]
            + ["evidence_mass", "evidence_spin", "evidence_t0_gps", "evidence_note"])


def overtone_evidence_rows(config: dict, sources: list, strains: dict, psds: dict,
                           f_high: float) -> list[dict]:
    """Overtone-count evidence for every injection of a chunk (``[overtones]`` settings).

    Each injection is analysed in the injected strain (noise plus every
    signal of the chunk) with the chunk's PSDs, starting at its arrival time
    in each detector plus ``overtones.start_offset_ms`` (the detectors'
    arrival-time differences are passed as time shifts, so every detector's
    segment starts at its own arrival).  One noise-model cache serves the
    whole chunk.  Evidence is computed for every injection, found or not: it
    does not depend on the search, and the results layer reports both all
    injections and the found ones.  An injection the analysis refuses (e.g.
    too near a data edge) gets ``supported_overtones = -1`` and the reason in
    ``evidence_note``.
    """
    from ringsearch.analysis.pipeline import candidate_evidence

    ov = config["overtones"]
    dets = list(config["data"]["detectors"])
    n_max = ov["max_overtones"]
    cache: dict = {}
    rows = []
    for src in sources:
        arrival = {d: src.arrival_time(d) for d in dets}
        t0 = arrival[dets[0]] + ov["start_offset_ms"] / 1e3
        shifts = {d: arrival[d] - arrival[dets[0]] for d in dets}
        antenna = ({d: tuple(map(float, src.antenna_pattern(d))) for d in dets}
                   if ov["network"] == "coherent" else None)
        row: dict = {"supported_overtones": -1, "evidence_t0_gps": t0,
                     **{f"log10_bayes_{k}_{k - 1}": math.nan for k in range(1, n_max + 1)},
                     "evidence_mass": math.nan, "evidence_spin": math.nan, "evidence_note": ""}
        try:
            ev = candidate_evidence(
                strains, t0, tuple(ov["mass"]), tuple(ov["spin"]), n_max, psds=psds,
                grid=tuple(ov["grid"]), duration=ov["duration_s"],
                f_low=config["data"]["f_low"], f_high=f_high,
                threshold=ov["log10_bayes_threshold"],
                snr_prior=tuple(ov["snr_prior"]), time_shifts=shifts, cache=cache,
                antenna=antenna)
        except InputError as exc:
            row["evidence_note"] = f"not analysed: {exc}"
        else:
            row["supported_overtones"] = int(ev["supported_overtones"])
            for key, value in ev["log10_bayes"].items():
                k, k1 = key.split(":")
                row[f"log10_bayes_{k}_{k1}"] = float(value)
            row["evidence_mass"] = float(ev["mass"]["median"])
            row["evidence_spin"] = float(ev["spin"]["median"])
            row["evidence_note"] = " ".join(ev.get("warnings", []))
        rows.append(row)
    return rows


# --------------------------------------------------------------------------- the search


def template_overtones(config: dict) -> list[int]:
    """The template overtone counts searched (a given bank's own count when not listed)."""
    s = config["search"]
    if s.get("template_overtones") is not None:
        return list(s["template_overtones"])
    from ringsearch.search.bank import Bank

    return [Bank.load(s["bank"]).n_overtones]


def f_high_of(config: dict) -> float:
    """Upper band edge of the search: ``search.f_high`` or 0.8 x Nyquist (the default of
    ``ringsearch search``)."""
    from ringsearch.data.condition import DEFAULT_F_HIGH_FRACTION

    fs = config["data"]["sample_rate"]
    return config["search"]["f_high"] or DEFAULT_F_HIGH_FRACTION * fs / 2


def reference_psd(config: dict):
    """The PSD the banks are placed with: the model (synthetic data) or the Welch
    median of the first detector's whole recording (files), avoided windows left
    out.  It depends on the config alone, so every process builds the same bank."""
    data = config["data"]
    if data["source"] == "synthetic":
        return model_psd(config)
    from ringsearch.data.psd import estimate_psd

    det = data["detectors"][0]
    strain, _ = _file_strain(tuple(data["files"][det]), det, data["sample_rate"])
    return estimate_psd(strain, seglen=data["psd_seglen_s"], exclude=data["avoid"] or None)


def share(config: dict, folder: Path) -> dict:
    """Write what every chunk reuses into ``folder`` once; return where it is.

    The template bank of each overtone count is placed (or loaded) here, in the
    submitting process, and saved as ``bank_N<n>.parquet``; every worker
    process then loads it instead of placing it again.  A resumed campaign
    finds the files and reuses them.

    Examples
    --------
    >>> share(spec.config, Path("out/quick/shared"))  # doctest: +SKIP
    {'banks': {'0': 'out/quick/shared/bank_N0.parquet', ...}}
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    banks = {}
    for n in template_overtones(config):
        path = folder / f"bank_N{n}.parquet"
        if not path.exists():
            campaign_bank(config, n).save(path)
        banks[str(n)] = str(path)
    return {"banks": banks}


def campaign_bank(config: dict, n_overtones: int, shared: dict | None = None):
    """The template bank for N overtones (cached per process: every chunk shares it).

    With ``shared`` (from :func:`share`) the bank saved in the campaign folder
    is loaded.  Otherwise ``search.bank`` is loaded (its overtone count must be
    N), or the bank is placed over ``search.mass``/``search.spin`` (a single
    point when the box is one).
    """
    s = config["search"]
    path = ((shared or {}).get("banks") or {}).get(str(n_overtones))
    key = (n_overtones, tuple(s["mass"]), tuple(s["spin"]), s["min_match"],
           config["data"]["f_low"], f_high_of(config), config["campaign"]["seed"],
           s.get("bank"), s.get("bank_sha256"), path)
    if key not in _BANKS:
        from ringsearch.search.bank import Bank

        if path is not None:
            bank = Bank.load(path)
        elif s.get("bank"):
            bank = Bank.load(s["bank"])
            if bank.n_overtones != n_overtones:
                raise InputError(f"'search.bank' = {s['bank']} was built for "
                                 f"{bank.n_overtones} overtone(s), not the {n_overtones} of "
                                 f"'search.template_overtones'.")
        elif s["mass"][0] == s["mass"][1] and s["spin"][0] == s["spin"][1]:
            bank = Bank.from_points([s["mass"][0]], [s["spin"][0]], n_overtones)
        else:
            bank = Bank.from_box(tuple(s["mass"]), tuple(s["spin"]), n_overtones,
                                 s["min_match"], psd=reference_psd(config),
                                 f_low=config["data"]["f_low"], f_high=f_high_of(config),
                                 seed=config["campaign"]["seed"])
        if len(bank) > s["max_templates"]:
            raise InputError(f"the bank for {n_overtones} overtones has {len(bank)} templates, "
                             f"more than 'search.max_templates' = {s['max_templates']}; "
                             f"narrow the box or lower 'search.min_match'.")
        _BANKS[key] = bank
    return _BANKS[key]


_BANKS: dict = {}


def search_config(config: dict, n_overtones: int):
    """The :class:`~ringsearch.search.engine.SearchConfig` a campaign's settings describe.

    Examples
    --------
    >>> search_config(spec.config, 0).veto  # doctest: +SKIP
    True
    """
    from ringsearch.search.engine import SearchConfig

    data, s, th = config["data"], config["search"], config["threshold"]
    return SearchConfig(
        mass=tuple(s["mass"]), spin=tuple(s["spin"]), n_overtones=n_overtones,
        min_match=s["min_match"], bank_seed=int(config["campaign"]["seed"]) % (2 ** 31),
        snr_threshold=s["snr_threshold"], cluster_window_s=s["cluster_window_s"],
        veto=s["veto"], veto_bins=s["veto_bins"], veto_domain=s["veto_domain"],
        tolerance_s=s["tolerance_s"],
        n_slides=th["slides"] if len(data["detectors"]) > 1 else 0,
        slide_step_s=th["slide_step_s"], f_low=data["f_low"], f_high=f_high_of(config),
        psd_seglen_s=data["psd_seglen_s"],
        gate_threshold=None if data["gating"] else math.inf)


def background_exclusions(config: dict, inj_table: pd.DataFrame, longest_s: float) -> dict:
    """Per detector, the times kept out of the time-slide background (not out of the zero lag).

    Each injection's arrival at the detector, from ``BACKGROUND_GUARD_S`` before
    to that guard plus the longest template after, and every avoided window.
    """
    dets = list(config["data"]["detectors"])
    out = {}
    for d in dets:
        col = f"arrival_gps_{d}"
        t = inj_table[col].to_numpy(float) if col in inj_table else np.empty(0)
        segs = [(a - BACKGROUND_GUARD_S, a + BACKGROUND_GUARD_S + longest_s) for a in t]
        segs += [tuple(w) for w in config["data"]["avoid"]]
        out[d] = segs
    return out


def _in_any(t: float, segments) -> bool:
    return any(float(s[0]) <= t < float(s[1]) for s in segments)


def match_injections(result, inj_table: pd.DataFrame, window_s: float, gates: dict
                     ) -> pd.DataFrame:
    """One row per injection: the loudest engine candidate within ``window_s`` of its arrival.

    The window is measured at the candidate's anchor detector (the detector of
    the trigger that seeded it).  ``searched``: the injection's arrival lies in
    valid start time of every detector; ``gated``: a gate of the conditioning
    removed it (loud signals trip the gates), which counts as missed.
    """
    cands = result.candidates
    dets = result.detectors
    valid = result.valid_starts()
    bank = result.bank.table
    anchor = (cands["anchor_detector"].to_numpy(str) if len(dets) > 1 and len(cands)
              else np.full(len(cands), dets[0]))
    rows = []
    for r in inj_table.to_dict("records"):
        arrival = {d: float(r[f"arrival_gps_{d}"]) for d in dets}
        searched = all(_in_any(arrival[d], valid[d]) for d in dets)
        gated = any(abs(arrival[d] - g.gps) < g.width_s / 2 + window_s + BACKGROUND_GUARD_S
                    for d in dets for g in gates[d].itertuples())
        row = {"injection_id": int(r["injection_id"]), "searched": bool(searched),
               "gated": bool(gated), "stat": math.nan, "trigger_gps": math.nan,
               "anchor_detector": "", "candidate_far_per_year": math.nan,
               "mass": math.nan, "spin": math.nan, "f_hz": math.nan, "tau_s": math.nan,
               "template_id": -1, "on_box_edge": False,
               **{f"{d}_snr": math.nan for d in dets},
               **{f"{d}_snr_reweighted": math.nan for d in dets}}
        if len(cands):
            t_arr = np.array([arrival[a] for a in anchor])
            near = np.flatnonzero(np.abs(cands["gps"].to_numpy(float) - t_arr) <= window_s)
            if near.size:
                j = int(near[np.argmax(cands["network_snr"].to_numpy(float)[near])])
                c = cands.iloc[j]
                t = bank.iloc[int(c["template_index"])]
                row.update(stat=float(c["network_snr"]), trigger_gps=float(c["gps"]),
                           anchor_detector=str(anchor[j]),
                           candidate_far_per_year=float(c.get("far_per_year", math.nan)),
                           mass=float(t.mass_msun), spin=float(t.spin),
                           f_hz=float(t.f220_hz), tau_s=float(t.tau220_s),
                           template_id=int(t.template_id), on_box_edge=bool(c["on_box_edge"]))
                for d in dets:
                    if len(dets) > 1:
                        row[f"{d}_snr"] = float(c[f"{d}_snr"])
                        row[f"{d}_snr_reweighted"] = float(c[f"{d}_snr_reweighted"])
                    else:
                        row[f"{d}_snr"] = float(c["snr"])
                        row[f"{d}_snr_reweighted"] = float(c["snr_reweighted"])
        rows.append(row)
    return pd.DataFrame(rows)


def _engine_tables(res, n_tpl: int) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The engine's time-slide events and each slide's coincident seconds, as chunk tables."""
    bg = res.background
    events = pd.DataFrame({"template_overtones": n_tpl,
                           "slide": bg["slide"].to_numpy(np.int64),
                           "stat": bg["network_snr"].to_numpy(float)})
    # time slides need two detectors; one detector's slides table is its zero lag only
    sl = res.slides[res.slides["slide"] > 0]
    live = pd.DataFrame({"template_overtones": n_tpl, "slide": sl["slide"].to_numpy(np.int64),
                         "live_time_s": sl["live_s"].to_numpy(float)})
    return events, live


def injection_times(config: dict, inj_table: pd.DataFrame) -> dict:
    """Per detector, the anchor times a candidate must have to match an injection.

    Each injection's arrival at the detector, widened by the match window (and
    a microsecond against rounding): the at-times search returns the
    whole-series candidates anchored there (:mod:`ringsearch.search.attimes`).
    """
    from gwpy.segments import Segment, SegmentList

    half = float(config["search"]["match_window_s"]) + 1e-6
    return {d: SegmentList(Segment(t - half, t + half)
                           for t in inj_table[f"arrival_gps_{d}"].to_numpy(float)).coalesce()
            for d in config["data"]["detectors"]}


def background_chunk(config: dict, chunk: dict) -> dict[str, pd.DataFrame]:
    """Search a data stretch without injections, whole, with its time slides.

    The background of an at-times campaign: every template overtone count's
    time-slide events and the slides' coincident seconds; avoided windows
    (known events) are kept out of the slides.
    """
    from ringsearch.search.engine import Search

    raw = chunk_strain(config, chunk)
    counts = template_overtones(config)
    shared = chunk.get("shared")
    first = Search(search_config(config, counts[0]),
                   bank=campaign_bank(config, counts[0], shared))
    psds = chunk_psds(config, raw, first)
    conds = first.condition(raw, psds=psds)
    avoid = {d: [tuple(w) for w in config["data"]["avoid"]] for d in config["data"]["detectors"]}
    events, live = [], []
    for n_tpl in counts:
        engine = Search(search_config(config, n_tpl), bank=campaign_bank(config, n_tpl, shared))
        e, lt = _engine_tables(engine.run(conds, background_exclude=avoid), n_tpl)
        events.append(e)
        live.append(lt)
    return {"background": pd.concat(events, ignore_index=True),
            "livetime": pd.concat(live, ignore_index=True)}


def run_chunk(config: dict, chunk: dict, injections: pd.DataFrame) -> dict[str, pd.DataFrame]:
    """Inject, search (with the search engine) and match one chunk.

    Tables: ``injections`` (optimal SNRs per detector and network, arrival
    times, derived distance, true f and tau; with ``[overtones]`` enabled also
    the overtone evidence, see :func:`overtone_evidence_rows`), ``found`` (per
    injection and template overtone count: the matched candidate's ranking
    statistic, its template and per-detector SNRs), ``candidates`` (the
    engine's zero-lag candidates; at-times: those near the injections), and
    with ``search.mode = "full"`` ``background`` (the engine's time-slide
    events: ``template_overtones, slide, stat``) and ``livetime`` (each
    slide's coincident seconds).  In the default at-times mode the engine
    searches only around each injection (:func:`injection_times`) and the
    background comes from the campaign's background units
    (:func:`background_chunk`, run for chunks of ``kind`` "background").

    Examples
    --------
    >>> tables = run_chunk(spec.config, chunks.iloc[0].to_dict(), inj_of_chunk0)
    ... # doctest: +SKIP
    """
    if chunk.get("kind") == "background":
        return background_chunk(config, chunk)
    from ringsearch.data.inject import inject
    from ringsearch.data.injections import make_sources
    from ringsearch.search.engine import Search

    data, search = config["data"], config["search"]
    fs = data["sample_rate"]
    dets = list(data["detectors"])
    f_high = f_high_of(config)
    raw = chunk_strain(config, chunk)
    counts = template_overtones(config)
    shared = chunk.get("shared")
    first = Search(search_config(config, counts[0]),
                   bank=campaign_bank(config, counts[0], shared))
    psds = chunk_psds(config, raw, first)
    sources, inj_table = make_sources(injections, psds, fs, data["f_low"], f_high)
    injected = {det: (inject(raw[det][0], sources, det), raw[det][1]) for det in dets}
    if config.get("overtones", {}).get("enabled"):
        strains = {det: injected[det][0] for det in dets}
        evidence = pd.DataFrame(overtone_evidence_rows(config, sources, strains, psds, f_high),
                                columns=evidence_columns(config["overtones"]["max_overtones"]))
        inj_table = pd.concat([inj_table, evidence], axis=1)
    found, cand_rows, bg_rows, live_rows = [], [], [], []
    conds = None
    for n_tpl in counts:
        bank = campaign_bank(config, n_tpl, shared)
        engine = Search(search_config(config, n_tpl), bank=bank)
        if conds is None:  # the conditioning does not depend on the templates
            conds = engine.condition(injected, psds=psds)
        if search["mode"] == "full":
            exclude = background_exclusions(config, inj_table, float(bank.duration_s.max()))
            res = engine.run(conds, background_exclude=exclude)
            e, lt = _engine_tables(res, n_tpl)
            bg_rows.append(e)
            live_rows.append(lt)
        else:
            res = engine.run(conds, at=injection_times(config, inj_table))
        gates = {d: c.gates for d, c in conds.items()}
        found.append(match_injections(res, inj_table, search["match_window_s"], gates)
                     .assign(template_overtones=n_tpl))
        cand_rows.append(res.candidates.assign(template_overtones=n_tpl))
    tables = {"injections": inj_table, "found": pd.concat(found, ignore_index=True),
              "candidates": pd.concat(cand_rows, ignore_index=True)}
    if bg_rows:
        tables["background"] = pd.concat(bg_rows, ignore_index=True)
        tables["livetime"] = pd.concat(live_rows, ignore_index=True)
    return tables
