"""The search engine: one ``Search`` for ``ringsearch search`` and for every campaign chunk.

A :class:`SearchConfig` holds everything that defines the search (bank box,
conditioning band, trigger thresholds, veto, clustering, coincidence
allowance, time slides).  :meth:`Search.run` takes strain (file paths,
series or already conditioned data) through these steps and returns a
:class:`SearchResult`:

1. **condition** each detector (:func:`ringsearch.data.condition.condition`:
   Welch-median PSD, whitening, gating, analysable segments);
2. **bank**: the given one, or stochastic placement over the box with the
   detectors' combined PSD;
3. **triggers** per detector: on-grid peaks of every template
   (:func:`~ringsearch.search.correlate.filter_peaks`), refined between
   samples and vetoed (:class:`~ringsearch.search.probe.Probe`), above the
   detector's threshold, clustered on the re-weighted SNR; each trigger gets
   a stable ``trigger_id``;
4. **coincidences** (several detectors): network events seeded by every
   trigger, each detector contributing the network template's peak within the
   light-travel window (:mod:`ringsearch.search.network`);
5. **background**: the same events for each time slide, with each slide's
   coincident time from segment arithmetic (:func:`~ringsearch.search.network.slide_plan`);
6. **FAR** of each candidate from the background (an upper limit when
   nothing is louder; :mod:`ringsearch.search.significance`).  With one
   detector, the FAR comes from the data's own other triggers.

Strain spanning more than about two ``stretch_s`` (512 s) goes through the
same steps stretch by stretch (:mod:`ringsearch.search.stretches`), so memory
does not grow with the data; each stretch has its own PSD and time slides.

Campaigns call the same :meth:`Search.run` on each injected chunk and only add
what is theirs (drawing and injecting signals, matching injections to the
candidates, pooling backgrounds), so their efficiency describes this search.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ringsearch.errors import InputError
from ringsearch.search.attimes import search_at_times
from ringsearch.search.bank import Bank
from ringsearch.search.correlate import default_cluster_window, filter_peaks, valid_starts
from ringsearch.search.network import (
    TIMING_TOLERANCE_S,
    check_tolerance,
    coincidence_windows,
    empty_events,
    light_travel_time,
    max_distinct_slides,
    network_events,
    slide_plan,
)
from ringsearch.search.probe import Probe
from ringsearch.search.significance import (
    FAR_COLUMNS,
    SINGLE_METHOD,
    SLIDES_METHOD,
    assign_far,
    rate_at,
    single_detector_far,
)
from ringsearch.search.stretches import MIN_STRETCH_S, STRETCH_S, n_stretches, search_stretches
from ringsearch.search.triggers import GRID_MARGIN, detector_triggers, loudest
from ringsearch.search.veto import (
    DEFAULT_BINS,
    DEFAULT_DOMAIN,
    check_bins,
    check_domain,
    mismatch_allowance,
)

#: Time slides asked for by default (capped by what the data can hold).
DEFAULT_SLIDES: int = 100

#: The method of a search restricted to requested start times (no FAR).
AT_TIMES_METHOD = "at requested times (no time slides, no FAR)"


@dataclass(frozen=True)
class SearchConfig:
    """Everything that defines a search; :meth:`validated` checks it before any work.

    Attributes
    ----------
    mass, spin : (lo, hi)
        Remnant box of the bank (detector-frame solar masses; spin in [0, 1)).
        Not used when a bank is given to :class:`Search`.
    n_overtones : int or None
        Templates carry the (2,2,0..N) modes (default 0, or the given bank's N).
    min_match : float
        Minimal match of a placed bank.
    bank_seed : int
        Seed of the bank placement.
    snr_threshold : float or mapping detector -> float
        Projection-SNR threshold of a trigger, per detector if a mapping.
    cluster_window_s : float or None
        One trigger per window across the bank (default: the longest template,
        clipped to [0.05, 1] s); also the clustering of network events.
    veto : bool
        Signal-consistency chi-squared at every peak, ranking by the
        re-weighted SNR (on by default); off ranks by the raw SNR.
    veto_bins, veto_domain
        Pieces of the chi-squared (8) and their split ("time" slices or
        "frequency" bands).
    tolerance_s : float
        Timing allowance added to the light-travel time between detectors.
    n_slides : int
        Time slides for the background (capped by what the data can hold).
    slide_step_s : float or None
        Slide step (default: largest coincidence window + longest template +
        cluster window, rounded up to 0.1 s).
    f_low, f_high : float
        Band of whitening and filter in Hz (f_high default 0.8 x Nyquist).
    psd_seglen_s : float
        PSD segment length (and whitening-filter length) in seconds.
    gate_threshold : float or None
        Gate at this many whitened-noise standard deviations (default 100;
        ``math.inf`` disables gating).
    dq_level : str
        GWOSC data-quality level required of file data.
    gps_start, gps_end : float or None
        Only templates starting in this window make triggers.
    stretch_s : float or None
        Strain longer than about two stretches is searched stretch by
        stretch (:mod:`ringsearch.search.stretches`): each reads, conditions
        and filters about this many seconds, so memory does not grow with
        the data; each estimates its own PSD and makes its own time slides.
        None searches the whole series at once.
    """

    mass: tuple[float, float] = (20.0, 200.0)
    spin: tuple[float, float] = (0.0, 0.99)
    n_overtones: int | None = None
    min_match: float = 0.97
    bank_seed: int = 0
    snr_threshold: float | Mapping[str, float] = 5.0
    cluster_window_s: float | None = None
    veto: bool = True
    veto_bins: int = DEFAULT_BINS
    veto_domain: str = DEFAULT_DOMAIN
    tolerance_s: float = TIMING_TOLERANCE_S
    n_slides: int = DEFAULT_SLIDES
    slide_step_s: float | None = None
    f_low: float = 20.0
    f_high: float | None = None
    psd_seglen_s: float = 4.0
    gate_threshold: float | None = None
    dq_level: str = "CBC_CAT2"
    gps_start: float | None = None
    gps_end: float | None = None
    stretch_s: float | None = STRETCH_S

    def validated(self, bank: Bank | None = None) -> SearchConfig:
        """A checked copy (defaults filled in); InputError naming the first bad value.

        Examples
        --------
        >>> SearchConfig(n_slides=10).validated().n_overtones
        0
        """
        from ringsearch.search.bank import _check_overtones, _check_range, _check_seed

        thr = self.snr_threshold
        values = list(thr.values()) if isinstance(thr, Mapping) else [thr]
        for v in values:
            if not (isinstance(v, int | float) and math.isfinite(v) and v > 0):
                raise InputError(f"SNR threshold must be a positive number, got {v!r}.")
        if isinstance(thr, Mapping):
            thr = {str(k): float(v) for k, v in thr.items()}
        else:
            thr = float(thr)
        if isinstance(self.n_slides, bool) or int(self.n_slides) != self.n_slides or \
                self.n_slides < 0:
            raise InputError(f"number of time slides must be an integer >= 0, "
                             f"got {self.n_slides!r}.")
        for name, v in (("--gps-start", self.gps_start), ("--gps-end", self.gps_end)):
            if v is not None and not math.isfinite(float(v)):
                raise InputError(f"{name} must be a finite GPS time in s, got {v}.")
        if self.gps_start is not None and self.gps_end is not None and \
                not float(self.gps_start) < float(self.gps_end):
            raise InputError(f"GPS window {self.gps_start}:{self.gps_end} is empty (start "
                             "must be before end).")
        tol = check_tolerance(self.tolerance_s)
        if self.slide_step_s is not None and not (math.isfinite(float(self.slide_step_s))
                                                  and float(self.slide_step_s) > 0):
            raise InputError(f"time-slide step must be a positive number of seconds, "
                             f"got {self.slide_step_s}.")
        if self.cluster_window_s is not None and not (
                math.isfinite(float(self.cluster_window_s)) and self.cluster_window_s > 0):
            raise InputError(f"cluster window must be a positive number of seconds, "
                             f"got {self.cluster_window_s}.")
        bins = check_bins(self.veto_bins)
        domain = check_domain(self.veto_domain)
        if self.stretch_s is not None and not (math.isfinite(float(self.stretch_s)) and
                                               float(self.stretch_s) >= MIN_STRETCH_S):
            raise InputError(f"stretch length must be at least {MIN_STRETCH_S:g} s "
                             "(stretch_s=None or --stretch 0 searches the whole series at "
                             f"once), got {self.stretch_s}.")
        if not (math.isfinite(float(self.psd_seglen_s)) and self.psd_seglen_s > 0):
            raise InputError(f"PSD segment length must be a positive number of seconds, "
                             f"got {self.psd_seglen_s}.")
        n = self.n_overtones
        if bank is not None:
            if n is not None and int(n) != bank.n_overtones:
                raise InputError(f"the bank was built for {bank.n_overtones} overtone(s), not "
                                 f"the {n} asked for; omit the overtone count or build a new "
                                 "bank.")
            n = bank.n_overtones
        else:
            n = 0 if n is None else n
            _check_range("mass", self.mass, 0.0, math.inf)
            _lo, hi_s = _check_range("spin", self.spin, 0.0, 1.0)
            if hi_s >= 1.0:
                raise InputError(f"spin range upper end must be below 1 (Kerr bound), "
                                 f"got {hi_s}.")
            if not 0.0 < float(self.min_match) < 1.0:
                raise InputError(f"minimal match must lie strictly between 0 and 1, "
                                 f"got {self.min_match}.")
            _check_seed(self.bank_seed)
        _check_overtones(n)
        return replace(self, n_overtones=int(n), snr_threshold=thr, tolerance_s=tol,
                       veto_bins=bins, veto_domain=domain, n_slides=int(self.n_slides),
                       mass=tuple(float(x) for x in self.mass),
                       spin=tuple(float(x) for x in self.spin))

    def threshold_for(self, detector: str) -> float:
        """The trigger threshold of one detector.

        Examples
        --------
        >>> SearchConfig(snr_threshold={"H1": 5.5, "L1": 6.0}).threshold_for("L1")
        6.0
        """
        thr = self.snr_threshold
        if isinstance(thr, Mapping):
            if detector not in thr:
                raise InputError(f"no SNR threshold given for detector {detector}.")
            return float(thr[detector])
        return float(thr)

    def to_dict(self) -> dict:
        """Plain JSON-ready values of every field.

        Examples
        --------
        >>> SearchConfig().to_dict()["n_slides"]
        100
        """
        out = asdict(self)
        if isinstance(self.snr_threshold, Mapping):
            out["snr_threshold"] = dict(self.snr_threshold)
        return out


# --------------------------------------------------------------------------- inputs
def _is_conditioned(x: Any) -> bool:
    return hasattr(x, "filter_response") and hasattr(x, "whitened")


def _given_psd(psds: Mapping[str, Any] | None, det: str) -> Any:
    """The PSD given for a detector (None when none are given); InputError when one is missing."""
    if psds is None:
        return None
    if psds.get(det) is None:
        raise InputError(f"no PSD was given for detector {det} (PSDs given for "
                         f"{', '.join(psds) or 'none'}).")
    return psds[det]


def _combined_psd(psds: Mapping[str, Any]) -> tuple[np.ndarray, np.ndarray]:
    """Network noise for bank placement: 1 / mean(1/S) on the first detector's grid."""
    first = next(iter(psds.values()))
    f = np.asarray(first.frequencies.value, float)
    inv = np.zeros_like(f)
    for psd in psds.values():
        pf, pv = np.asarray(psd.frequencies.value, float), np.asarray(psd.value, float)
        with np.errstate(divide="ignore"):
            inv += np.interp(f, pf, np.where(pv > 0, 1 / pv, 0.0))
    inv /= len(psds)
    good = inv > 0
    return f[good], 1 / inv[good]


@dataclass
class SearchResult:
    """What a search produced; tables are DataFrames a notebook can filter and plot.

    Attributes
    ----------
    config : SearchConfig
        The validated configuration.
    bank : Bank
        The templates (``template_id`` / ``template_index`` columns refer to it).
    conditioned : dict
        Detector -> ConditionedData (data searched in stretches: the stretch
        of the loudest candidate, :mod:`ringsearch.search.stretches`).
    triggers : DataFrame
        Every detector's clustered triggers (columns in :mod:`ringsearch.search.triggers`).
    candidates : DataFrame
        Zero-lag network events (several detectors) or the detector's triggers
        (one), loudest first, with ``network_snr`` and the FAR columns
        ``n_louder_background, far_per_year, ifar_years, far_is_upper_limit``.
    background : DataFrame
        Time-slide network events (``slide`` refers to :attr:`slides`).
    slides : DataFrame
        ``slide``, ``shift_<DET>_s`` and ``live_s`` (coincident seconds) per
        slide, the zero lag as slide 0.
    refused : DataFrame
        Templates a detector's data could not use: ``detector, template_id,
        cond_gram, reason``.
    analysed_s : dict
        Detector -> seconds of valid start times filtered.
    method : str
        How FARs were estimated.
    probes : dict
        Detector -> :class:`~ringsearch.search.probe.Probe`, to evaluate any
        template at any time with the search's own numbers.
    """

    config: SearchConfig
    bank: Bank
    conditioned: dict
    triggers: pd.DataFrame
    candidates: pd.DataFrame
    background: pd.DataFrame
    slides: pd.DataFrame
    refused: pd.DataFrame
    analysed_s: dict
    method: str
    probes: dict = field(default_factory=dict, repr=False)
    extra: dict = field(default_factory=dict, repr=False)
    valid: dict = field(default_factory=dict, repr=False)

    def valid_starts(self) -> dict:
        """Detector -> SegmentList of the start times searched (analysable, template fits,
        inside the GPS window).

        Examples
        --------
        >>> res.valid_starts()["H1"]  # doctest: +SKIP
        """
        return dict(self.valid)

    @property
    def detectors(self) -> list[str]:
        return list(self.analysed_s)

    def analysable(self) -> dict:
        """Detector -> SegmentList of the analysable times of all the data searched.

        Examples
        --------
        >>> res.analysable()["H1"]  # doctest: +SKIP
        """
        if "analysable" in self.extra:
            return dict(self.extra["analysable"])
        return {d: c.analysable for d, c in self.conditioned.items()}

    @property
    def background_s(self) -> float:
        """Seconds of background: the slides' coincident time (one detector: analysed time)."""
        if self.method == SLIDES_METHOD:
            s = self.slides
            return float(s.loc[s["slide"] > 0, "live_s"].sum()) if len(s) else 0.0
        if self.method == AT_TIMES_METHOD:
            return 0.0
        return float(next(iter(self.analysed_s.values()), 0.0))

    def far(self, statistic: Any) -> np.ndarray:
        """FAR per year of a ranking statistic value (background at least as loud, no exclusions).

        Examples
        --------
        >>> res.far([8.0, 10.0])  # doctest: +SKIP
        array([12.1, 0.0])
        """
        stat = np.atleast_1d(np.asarray(statistic, float))
        if self.method == SLIDES_METHOD:
            bg = self.background["network_snr"].to_numpy(float) if len(self.background) \
                else np.empty(0)
        else:
            bg = self.triggers["snr_reweighted"].to_numpy(float)
        return rate_at(stat, bg, self.background_s)

    # ------------------------------------------------------------------ summary
    @property
    def summary(self) -> dict:
        """The JSON-ready summary written as ``summary.json``."""
        if "summary" not in self.extra:
            self.extra["summary"] = _summary(self)
        return self.extra["summary"]

    # ------------------------------------------------------------------ plots
    def plot_snr(self, path: Any, candidate: int = 0, half_width: float = 0.25) -> Path:
        """Projection SNR of a candidate's template against start time, per detector.

        Examples
        --------
        >>> res.plot_snr("snr.png")  # doctest: +SKIP
        """
        from ringsearch.search import plots

        c = self.candidates.iloc[int(candidate)]
        return plots.plot_snr_around(self.conditioned, self.bank, int(c["template_id"]),
                                     float(c["gps"]), path, half_width)

    def plot_whitened(self, path: Any, candidate: int = 0) -> Path:
        """Whitened data with each detector's best-fit ringdown for a candidate.

        Examples
        --------
        >>> res.plot_whitened("fit.png")  # doctest: +SKIP
        """
        from ringsearch.search import plots

        return plots.plot_whitened_fit(self.conditioned, self._candidate_rows(candidate), path)

    def plot_bank(self, path: Any) -> Path:
        """The bank in (mass, spin) and (f, tau), the loudest candidate's template marked.

        Examples
        --------
        >>> res.plot_bank("bank.png")  # doctest: +SKIP
        """
        from ringsearch.search import plots

        mark = int(self.candidates["template_id"].iloc[0]) if len(self.candidates) else None
        return plots.plot_bank(self.bank, path, mark=mark)

    def plot_far(self, path: Any) -> Path:
        """Cumulative background rate against the ranking statistic, candidates on top.

        Examples
        --------
        >>> res.plot_far("far.png")  # doctest: +SKIP
        """
        from ringsearch.search import plots

        bg = self.background if self.method == SLIDES_METHOD else \
            self.triggers.rename(columns={"snr_reweighted": "network_snr"})
        return plots.plot_far(self.candidates, bg, self.background_s, path)

    def _candidate_rows(self, candidate: int) -> dict:
        """Per detector, a trigger-like row of the candidate's template at its peak."""
        c = self.candidates.iloc[int(candidate)]
        ti = int(c["template_index"])
        rows = {}
        for d, probe in self.probes.items():
            gps = float(c["gps"]) if len(self.detectors) == 1 else float(c[f"{d}_gps"])
            if not math.isfinite(gps):
                continue
            pk = probe.at(ti, gps)
            from ringsearch.search.triggers import peak_table

            rows[d] = peak_table([pk], self.bank, d).iloc[0]
        return rows

    # ------------------------------------------------------------------ output
    def write(self, out: Any, plots: bool = True) -> Path:
        """Write the tables, the bank, ``summary.json`` and (optionally) plots into ``out``.

        ``out`` must be new or empty; it is built in a hidden sibling and moved
        into place, so an error leaves nothing behind.  Files:
        ``triggers.parquet``, ``candidates.parquet``, ``background.parquet``,
        ``slides.parquet``, ``refused.parquet``, ``bank.parquet``,
        ``summary.json``, ``plots/*.png`` and, for data searched in stretches,
        ``stretches.parquet`` (owned GPS interval and margin of each).

        Examples
        --------
        >>> res.write("gw150914-search")  # doctest: +SKIP
        """
        from ringsearch.files import atomic_path, staged_directory, write_json

        out = Path(out)
        with staged_directory(out) as stage:
            for name, table in (("triggers", self.triggers), ("candidates", self.candidates),
                                ("background", self.background), ("slides", self.slides),
                                ("refused", self.refused)):
                with atomic_path(stage / f"{name}.parquet") as tmp:
                    table.to_parquet(tmp, index=False)
            if "stretches" in self.extra:
                with atomic_path(stage / "stretches.parquet") as tmp:
                    self.extra["stretches"].to_parquet(tmp, index=False)
            self.bank.save(stage / "bank.parquet")
            summary = dict(self.summary)
            if plots:
                summary["plots"] = self._plots(stage / "plots")
            write_json(stage / "summary.json", summary)
        return out

    def _plots(self, folder: Path) -> list[str]:
        folder.mkdir(parents=True, exist_ok=True)
        made = []
        if len(self.candidates):
            made.append(self.plot_snr(folder / "snr_loudest.png"))
            made.append(self.plot_whitened(folder / "whitened_fit.png"))
            from ringsearch.data.plots import plot_qtransform

            around = float(self.candidates["gps"].iloc[0])
            for d, c in self.conditioned.items():
                made.append(plot_qtransform(c, folder / f"qtransform_{d}.png", around=around,
                                            window=0.5))
        made.append(self.plot_bank(folder / "bank.png"))
        made.append(self.plot_far(folder / "far.png"))
        return [str(Path(p).relative_to(folder.parent)) for p in made]


# --------------------------------------------------------------------------- the engine
class Search:
    """The ringdown search.  ``Search(config).run(data)`` returns a :class:`SearchResult`.

    Parameters
    ----------
    config : SearchConfig, optional
        The search's settings (defaults when None).
    bank : Bank, optional
        Templates to use instead of placing a bank over ``config.mass/spin``.
    **overrides
        Fields of :class:`SearchConfig` to change, e.g. ``n_slides=20``.

    Examples
    --------
    >>> res = Search(mass=(50, 100), spin=(0.5, 0.9)).run(
    ...     ["H-H1_LOSC_4_V2-1126259446-32.hdf5",
    ...      "L-L1_LOSC_4_V2-1126259446-32.hdf5"])  # doctest: +SKIP
    >>> res.candidates[["gps", "network_snr", "far_per_year"]].head()  # doctest: +SKIP
    """

    def __init__(self, config: SearchConfig | None = None, *, bank: Bank | None = None,
                 **overrides: Any):
        cfg = replace(config or SearchConfig(), **overrides)
        self.config = cfg.validated(bank)
        self.bank = bank

    # ------------------------------------------------------------------ steps
    def condition(self, data: Any, *, psds: Mapping[str, Any] | None = None,
                  detector: str | None = None, sample_rate: float | None = None,
                  data_start: float | None = None) -> dict:
        """Paths / strain series / conditioned data -> ``{detector: ConditionedData}``.

        ``psds`` (detector -> FrequencySeries) whitens with given PSDs instead
        of estimating them.  ``detector``, ``sample_rate`` and ``data_start``
        describe files that do not describe themselves (file paths only).

        Examples
        --------
        >>> conds = Search().condition(["H-H1_LOSC_4_V2-1126259446-32.hdf5"])  # doctest: +SKIP
        """
        from gwpy.segments import Segment, SegmentList

        cfg = self.config
        items = self._strain_items(data, detector, sample_rate, data_start)
        conds: dict = {}
        for det, item in items.items():
            if _is_conditioned(item):
                conds[det] = item
                continue
            ts, segs = item if isinstance(item, tuple) else (item, None)
            conds[det] = self.condition_one(ts, segs, _given_psd(psds, det))
        if cfg.gps_start is not None or cfg.gps_end is not None:
            for det, c in conds.items():
                t0 = float(c.t0)
                t1 = t0 + c.whitened.size / float(c.sample_rate)
                a = t0 if cfg.gps_start is None else float(cfg.gps_start)
                b = t1 if cfg.gps_end is None else float(cfg.gps_end)
                if not a < b:
                    raise InputError(f"GPS window {a}:{b} is empty (start must be before "
                                     "end).")
                if b <= t0 or a >= t1:
                    raise InputError(f"GPS window {a}:{b} lies outside the {det} data "
                                     f"({t0}:{t1}).")
                if abs(c.analysable & SegmentList([Segment(a, b)])) <= 0:
                    raise InputError(f"GPS window {a}:{b} holds no analysable {det} data.")
        for det, c in conds.items():
            if abs(c.analysable) <= 0:
                raise InputError(f"no analysable time is left in the {det} data after data "
                                 "quality, gating and the GPS window.")
        return conds

    def condition_one(self, strain: Any, segments: Any = None, psd: Any = None) -> Any:
        """One detector's strain conditioned as this search conditions it.

        Examples
        --------
        >>> cond = Search().condition_one(strain, segs)  # doctest: +SKIP
        """
        from ringsearch.data.condition import condition

        cfg = self.config
        return condition(strain, f_low=cfg.f_low, f_high=cfg.f_high, psd=psd,
                         seglen=cfg.psd_seglen_s, analysable=segments,
                         gate_threshold=cfg.gate_threshold)

    def _strain_items(self, data: Any, detector: str | None, sample_rate: float | None,
                      data_start: float | None) -> dict:
        """Paths or a mapping -> ``{det: item}`` (items: series, (series, segments) or
        conditioned data)."""
        if isinstance(data, Mapping):
            if detector is not None or sample_rate is not None or data_start is not None:
                raise InputError("detector, sample_rate and data_start describe strain files, "
                                 "so they do not apply to strain given as a mapping "
                                 "{detector: strain}.")
            return dict(data)
        from ringsearch.data.io import read_detectors

        paths = [data] if isinstance(data, str | bytes) or hasattr(data, "__fspath__") \
            else list(data)
        if not paths:
            raise InputError("no strain files given.")
        return dict(read_detectors(paths, dq_level=self.config.dq_level, detector=detector,
                                   sample_rate=sample_rate, gps_start=data_start))

    def estimate_psds(self, data: Any, *, detector: str | None = None,
                      sample_rate: float | None = None,
                      data_start: float | None = None) -> dict:
        """The PSDs this search would estimate from ``data`` (paths or strain series).

        Pass them to :meth:`run` (``psds=``) to whiten other data with them, e.g.
        data with injections with the PSD of the same data before injection.

        Examples
        --------
        >>> psds = Search().estimate_psds(["H-H1_LOSC_4_V2-1126259446-32.hdf5"])  # doctest: +SKIP
        """
        from ringsearch.data.condition import conditioning_psd

        out = {}
        for det, item in self._strain_items(data, detector, sample_rate, data_start).items():
            if _is_conditioned(item):
                out[det] = item.psd
                continue
            ts, segs = item if isinstance(item, tuple) else (item, None)
            out[det] = conditioning_psd(ts, self.config.psd_seglen_s, segs)
        return out

    def make_bank(self, conds: Mapping[str, Any], progress: bool = False) -> Bank:
        """The given bank, or one placed over the box with the detectors' combined PSD.

        Examples
        --------
        >>> bank = Search(mass=(50, 80), spin=(0.5, 0.8)).make_bank(conds)  # doctest: +SKIP
        """
        if self.bank is not None:
            return self.bank
        return self.place_bank({d: c.psd for d, c in conds.items()},
                               max(float(c.f_low) for c in conds.values()),
                               min(float(c.f_high) for c in conds.values()), progress)

    def place_bank(self, psds: Mapping[str, Any], f_low: float, f_high: float,
                   progress: bool = False) -> Bank:
        """The given bank, or one placed over the box with the combined noise of ``psds``.

        Examples
        --------
        >>> bank = Search(mass=(50, 80)).place_bank(psds, 20.0, 1638.4)  # doctest: +SKIP
        """
        if self.bank is not None:
            return self.bank
        cfg = self.config
        return Bank.from_box(cfg.mass, cfg.spin, cfg.n_overtones, cfg.min_match,
                             psd=_combined_psd(psds), f_low=f_low, f_high=f_high,
                             seed=cfg.bank_seed, progress=progress)

    def _gps_window(self) -> tuple[float, float] | None:
        cfg = self.config
        if cfg.gps_start is None and cfg.gps_end is None:
            return None
        return (-1e12 if cfg.gps_start is None else float(cfg.gps_start),
                1e12 if cfg.gps_end is None else float(cfg.gps_end))

    def _valid(self, cond: Any, bank: Bank) -> Any:
        from gwpy.segments import Segment, SegmentList

        segs = valid_starts(cond, float(bank.duration_s.max()))
        window = self._gps_window()
        if window is not None:
            segs = segs & SegmentList([Segment(*window)])
        return segs.coalesce()

    def probes(self, conds: Mapping[str, Any], bank: Bank) -> dict:
        """One :class:`~ringsearch.search.probe.Probe` per detector, set up as this search's.

        Examples
        --------
        >>> probes = Search().probes(conds, bank)  # doctest: +SKIP
        """
        cfg = self.config
        mm = float(bank.meta.get("min_match", cfg.min_match))
        mismatch = mismatch_allowance(mm) if cfg.veto else 0.0
        f, tau, longest = bank.f_hz, bank.tau_s, float(bank.duration_s.max())
        return {d: Probe(c, f, tau, longest_s=longest,
                         veto_bins=cfg.veto_bins if cfg.veto else None,
                         veto_domain=cfg.veto_domain, mismatch=mismatch)
                for d, c in conds.items()}

    def triggers(self, conds: Mapping[str, Any], bank: Bank, probes: Mapping[str, Probe],
                 progress: bool = False, regions: Mapping[str, Any] | None = None,
                 return_contenders: bool = False) -> tuple:
        """Every detector's triggers with ids, the refused templates and the analysed time.

        With ``regions`` (detector -> SegmentList of start times) only those
        start times are filtered (near a region's edges the clustering can
        differ from the whole series': see :mod:`ringsearch.search.attimes`).
        With ``return_contenders`` a fourth item maps each detector to the
        refined peaks its clustering chose from
        (:func:`~ringsearch.search.triggers.detector_triggers`).

        Examples
        --------
        >>> trig, refused, analysed = search.triggers(conds, bank, probes)  # doctest: +SKIP
        """
        cfg = self.config
        window = self.cluster_window(bank)
        edge = bank.on_box_edge()
        tables, refused, analysed, contenders = [], [], {}, {}
        for d, c in conds.items():
            thr = cfg.threshold_for(d)
            peaks, tmpl = filter_peaks(c, bank.f_hz, bank.tau_s, thr * GRID_MARGIN,
                                       window / 2, weighted=probes[d].weighted,
                                       grams=probes[d].grams, groups=probes[d].groups,
                                       progress=progress,
                                       gps_window=self._gps_window(),
                                       regions=None if regions is None else regions.get(d, []))
            analysed[d] = float(tmpl.attrs["analysed_s"])
            bad = tmpl[tmpl.refused != ""]
            refused.append(pd.DataFrame({
                "detector": d, "template_id": bank.table.template_id.to_numpy()[bad.index],
                "cond_gram": bad.cond_gram.to_numpy(float),
                "reason": bad.refused.to_numpy(str)}))
            table = detector_triggers(probes[d], peaks, bank, thr, window,
                                      tmpl.cond_gram.to_numpy(float), edge,
                                      return_contenders=return_contenders)
            if return_contenders:
                table, contenders[d] = table
            tables.append(table)
        trig = pd.concat(tables, ignore_index=True)
        trig = trig.sort_values(["gps", "detector"], kind="stable").reset_index(drop=True)
        trig.insert(0, "trigger_id", np.arange(len(trig), dtype=np.int64))
        refused_t = pd.concat(refused, ignore_index=True)
        if return_contenders:
            return trig, refused_t, analysed, contenders
        return trig, refused_t, analysed

    def cluster_window(self, bank: Bank) -> float:
        """The clustering window in seconds (configured, or from the bank).

        Examples
        --------
        >>> Search(cluster_window_s=0.1).cluster_window(bank)  # doctest: +SKIP
        0.1
        """
        cw = self.config.cluster_window_s
        return float(cw) if cw is not None else default_cluster_window(bank)

    def slide_step(self, detectors: list[str], bank: Bank) -> float:
        """The time-slide step: configured, or coincidence window + longest template + cluster
        window, rounded up to 0.1 s.

        Examples
        --------
        >>> Search().slide_step(["H1", "L1"], bank)  # doctest: +SKIP
        0.4
        """
        cfg = self.config
        widest = max(coincidence_windows(detectors, cfg.tolerance_s).values())
        longest = float(bank.duration_s.max())
        min_step = widest + longest
        if cfg.slide_step_s is None:
            return math.ceil((min_step + self.cluster_window(bank)) * 10) / 10
        if cfg.slide_step_s <= min_step:
            raise InputError(f"time-slide step {cfg.slide_step_s} s must exceed the "
                             f"coincidence window plus the longest template ({min_step:.3g} s).")
        return float(cfg.slide_step_s)

    # ------------------------------------------------------------------ the whole search
    def run(self, data: Any, *, progress: bool = False,
            psds: Mapping[str, Any] | None = None,
            background_exclude: Mapping[str, Any] | None = None,
            at: Mapping[str, Any] | None = None,
            detector: str | None = None, sample_rate: float | None = None,
            data_start: float | None = None) -> SearchResult:
        """Search strain for ringdowns and rank candidates by false-alarm rate.

        Parameters
        ----------
        data : paths, ``{det: TimeSeries}``, ``{det: (TimeSeries, SegmentList)}`` or
            ``{det: ConditionedData}``
            Strain of one or several detectors.
        progress : bool
            Progress bars on stderr.
        psds : mapping detector -> FrequencySeries, optional
            Whiten with these PSDs instead of estimating them.
        background_exclude : mapping detector -> SegmentList, optional
            Times kept out of the time-slide background (not out of the zero
            lag), e.g. around known signals or injections; the slides'
            coincident time shrinks accordingly.
        at : mapping detector -> SegmentList, optional
            Return only the candidates anchored at these times (e.g. near
            injections), searching short regions around them: they are those
            of the whole-series search, certified region by region and
            searched wider where not (:mod:`ringsearch.search.attimes`).  The
            triggers are those the candidates refer to.  No time slides are
            made and no FAR is given: campaigns take it from a background
            searched once.
        detector, sample_rate, data_start : optional
            For strain files that do not describe themselves (file paths only).

        Returns
        -------
        SearchResult
            For strain longer than about two ``config.stretch_s``, searched
            stretch by stretch (:mod:`ringsearch.search.stretches`); conditioned
            data and ``at=`` are always searched whole.

        Examples
        --------
        >>> res = Search(n_slides=20).run(files)  # doctest: +SKIP
        """
        cfg = self.config
        if at is None and cfg.stretch_s is not None and not (
                isinstance(data, Mapping) and any(_is_conditioned(x) for x in data.values())):
            sources = self.sources(data, detector, sample_rate, data_start)
            if n_stretches(sources, cfg.stretch_s, self._gps_window()) > 1:
                given = None if psds is None else {d: _given_psd(psds, d) for d in sources}
                fields = search_stretches(self, sources, psds=given,
                                          background_exclude=background_exclude,
                                          progress=progress)
                return SearchResult(cfg, **fields)
            data = {d: src.read(0, src.n_samples) for d, src in sources.items()}
            detector = sample_rate = data_start = None
        conds = self.condition(data, psds=psds, detector=detector, sample_rate=sample_rate,
                               data_start=data_start)
        bank = self.make_bank(conds, progress=progress)
        dets = list(conds)
        probes = self.probes(conds, bank)
        valid = {d: self._valid(c, bank) for d, c in conds.items()}
        if at is not None:
            return self._at_times(conds, bank, probes, at, valid, progress)
        trig, refused, analysed = self.triggers(conds, bank, probes, progress=progress)
        extra: dict[str, Any] = {}
        if len(dets) == 1:
            cands, slides = self.single_detector_candidates(trig, dets[0], analysed[dets[0]])
            return SearchResult(cfg, bank, conds, trig, cands, empty_events(dets), slides,
                                refused, analysed, SINGLE_METHOD, probes, extra, valid)
        zero_plan = slide_plan(valid, 0, 1.0)[0]
        zero = network_events(probes, trig, zero_plan, cfg.tolerance_s,
                              self.cluster_window(bank), bank, bank.on_box_edge())
        plan, background = self.time_slides(probes, trig, valid, bank, background_exclude,
                                            progress)
        slides = slide_table(dets, [zero_plan, *plan])
        extra["slide_step_s"] = self.slide_step(dets, bank)
        cands = self.ranked(zero, background, slides, dets, extra)
        extra["coincident_time_s"] = zero_plan.live_s
        return SearchResult(cfg, bank, conds, trig, cands, background, slides, refused,
                            analysed, SLIDES_METHOD, probes, extra, valid)

    def sources(self, data: Any, detector: str | None = None, sample_rate: float | None = None,
                data_start: float | None = None) -> dict:
        """Paths or ``{det: series | (series, segments)}`` -> ``{det: StrainSource}``.

        Files are opened, not read (HDF5 strain is read stretch by stretch).

        Examples
        --------
        >>> Search().sources(["H-H1_LOSC_4_V2-1126259446-32.hdf5"])["H1"].n_samples
        ... # doctest: +SKIP
        131072
        """
        from ringsearch.data.sources import StrainSource, check_same_grid

        if isinstance(data, Mapping):
            self._strain_items(data, detector, sample_rate, data_start)  # argument checks
            out = {}
            for det, item in data.items():
                ts, segs = item if isinstance(item, tuple) else (item, None)
                out[det] = StrainSource.from_series(ts, segs)
                out[det].detector = str(det)
            check_same_grid(list(out.values()))
            return out
        from ringsearch.data.io import open_detectors

        paths = [data] if isinstance(data, str | bytes) or hasattr(data, "__fspath__") \
            else list(data)
        if not paths:
            raise InputError("no strain files given.")
        return open_detectors(paths, dq_level=self.config.dq_level, detector=detector,
                              sample_rate=sample_rate, gps_start=data_start)

    def single_detector_candidates(self, trig: pd.DataFrame, det: str,
                                   analysed_s: float) -> tuple[pd.DataFrame, pd.DataFrame]:
        """One detector's candidates (its triggers, FAR from the others) and slides table."""
        cands = single_detector_far(trig, analysed_s, column="snr_reweighted")
        cands.insert(2, "network_snr", cands["snr_reweighted"])
        cands = cands.sort_values("network_snr", ascending=False,
                                  kind="stable").reset_index(drop=True)
        slides = pd.DataFrame({"slide": [0], f"shift_{det}_s": [0.0], "live_s": [analysed_s]})
        return cands, slides

    def time_slides(self, probes: Mapping[str, Probe], trig: pd.DataFrame,
                    valid: Mapping[str, Any], bank: Bank,
                    background_exclude: Mapping[str, Any] | None = None,
                    progress: bool = False) -> tuple[list, pd.DataFrame]:
        """The time slides that fit the valid start times, and their network events.

        Examples
        --------
        >>> plan, background = search.time_slides(probes, trig, valid, bank)  # doctest: +SKIP
        """
        cfg = self.config
        dets = list(valid)
        if background_exclude:
            from gwpy.segments import Segment, SegmentList

            bg_valid = {d: (valid[d] - SegmentList(Segment(*s) for s in
                                                   background_exclude.get(d, []))).coalesce()
                        for d in dets}
        else:
            bg_valid = valid
        step = self.slide_step(dets, bank)
        try:
            span0 = slide_plan(bg_valid, 0, step)[0].span
            n_fit = max_distinct_slides(span0[1] - span0[0], step, len(dets))
        except InputError:
            n_fit = 0
        n_use = min(cfg.n_slides, n_fit)
        plan = slide_plan(bg_valid, n_use, step)[1:] if n_use else []
        background = (network_events(probes, trig, plan, cfg.tolerance_s,
                                     self.cluster_window(bank), bank, bank.on_box_edge(),
                                     progress=progress)
                      if plan else empty_events(dets))
        return plan, background

    def ranked(self, zero: pd.DataFrame, background: pd.DataFrame, slides: pd.DataFrame,
               dets: list[str], extra: dict) -> pd.DataFrame:
        """Zero-lag events with their FAR from the background, loudest first.

        ``slides`` is the table of :func:`slide_table`; ``extra`` receives the
        slide figures of the summary (and a note when no slide fits).
        """
        step = extra.get("slide_step_s")
        n_use = int((slides["slide"] > 0).sum())
        t_bg = float(slides.loc[slides["slide"] > 0, "live_s"].sum())
        if n_use > 0 and t_bg > 0:
            cands = assign_far(zero, background, t_bg, dets)
        else:
            cands = zero.copy()
            for col in FAR_COLUMNS:
                cands[col] = pd.Series(dtype=float)
            extra["note"] = ("the coincident data is too short for any time slide of "
                             f"{step} s; no FAR is given")
        extra.update(requested_slides=self.config.n_slides, n_slides=n_use)
        return cands.sort_values("network_snr", ascending=False,
                                 kind="stable").reset_index(drop=True)


    def _at_times(self, conds, bank, probes, at, valid, progress) -> SearchResult:
        """The zero-lag candidates anchored at requested times (see :mod:`.attimes`)."""
        dets = list(conds)
        out = search_at_times(self, conds, bank, probes, at, valid, progress=progress)
        analysed = out["analysed"]
        slides = pd.DataFrame({"slide": [0], **{f"shift_{d}_s": [0.0] for d in dets},
                               "live_s": [min(analysed.values())]})
        extra = {"note": "searched at requested times only: no time slides, no FAR",
                 "at_times_rounds": out["rounds"]}
        return SearchResult(self.config, bank, conds, out["triggers"], out["candidates"],
                            empty_events(dets), slides, out["refused"], analysed,
                            AT_TIMES_METHOD, probes, extra, valid)


def slide_table(dets: list[str], plan: list) -> pd.DataFrame:
    """``slide``, ``shift_<DET>_s`` and ``live_s`` of the zero lag and each slide of a plan.

    Examples
    --------
    >>> from ringsearch.search.network import slide_plan
    >>> slide_table(["H1", "L1"], slide_plan({"H1": [(0, 40)], "L1": [(0, 40)]}, 1, 10.0))
       slide  shift_H1_s  shift_L1_s  live_s
    0      0         0.0         0.0    40.0
    1      1         0.0        10.0    40.0
    """
    return pd.DataFrame({"slide": [s.index for s in plan],
                         **{f"shift_{d}_s": [float(s.shifts[d]) for s in plan] for d in dets},
                         "live_s": [float(s.live_s) for s in plan]})


# --------------------------------------------------------------------------- summary
def _trigger_record(row: pd.Series) -> dict:
    return {"trigger_id": int(row.trigger_id), "gps": float(row.gps), "snr": float(row.snr),
            "snr_reweighted": float(row.snr_reweighted), "chisq": float(row.chisq),
            "chisq_dof": int(row.chisq_dof), "template_id": int(row.template_id),
            "mass": float(row.mass_msun), "spin": float(row.spin), "f_hz": float(row.f220_hz),
            "tau_s": float(row.tau220_s), "on_box_edge": bool(row.on_box_edge)}


def _summary(res: SearchResult) -> dict:
    cfg = res.config
    dets = res.detectors
    bank = res.bank
    trig = res.triggers
    by_id = trig.set_index("trigger_id", drop=False)
    veto_text = "re-weighted SNR rho_hat" if cfg.veto else "projection SNR rho"
    sig: dict[str, Any] = {"method": res.method, "background_time_s": res.background_s}
    if res.method == SLIDES_METHOD:
        sig.update({"n_slides": int(res.extra.get("n_slides", 0)),
                    "requested_slides": int(res.extra.get("requested_slides", 0)),
                    "slide_step_s": res.extra.get("slide_step_s"),
                    "coincident_time_s": res.extra.get("coincident_time_s"),
                    "timing_tolerance_s": cfg.tolerance_s,
                    "coincidence_window_s": {f"{a}-{b}": light_travel_time(a, b) + cfg.tolerance_s
                                             for i, a in enumerate(dets) for b in dets[i + 1:]},
                    "n_background": int(len(res.background)),
                    "network_statistic": (
                        f"sqrt of the sum over detectors of the squared {veto_text} of one "
                        "template: the anchor trigger's, and in every other detector that "
                        "template's refined peak within the light-travel time plus the timing "
                        "tolerance (no detector left out)")})
        if "note" in res.extra:
            sig["note"] = res.extra["note"]
    elif len(dets) > 1:
        sig["network_statistic"] = (
            f"sqrt of the sum over detectors of the squared {veto_text} of one template "
            "within the light-travel time plus the timing tolerance")
        sig["note"] = res.extra.get("note")
    else:
        sig["network_statistic"] = f"single-detector {veto_text}"
    mm = float(bank.meta.get("min_match", cfg.min_match))
    sig["veto"] = ({"bins": int(cfg.veto_bins), "domain": cfg.veto_domain,
                    "statistic": "chi-squared of the projection split into p equal-share "
                    f"{'time slices' if cfg.veto_domain == 'time' else 'frequency bands'}, "
                    "dof 2(N+1)(p-1) at most (Allen 2005, PRD 71, 062001, adapted), at the "
                    "refined start time",
                    "reweighting": "rho / [(1 + chi2_r^3)/2]^(1/6) for chi2_r > 1 (Babak et "
                    "al. 2013, PRD 87, 024033), chi2_r = chisq / (dof + m rho^2) with the "
                    "bank's mismatch allowance m = 1/MM^2 - 1",
                    "mismatch_allowance": mismatch_allowance(mm)}
                   if cfg.veto else None)
    out: dict[str, Any] = {
        "detectors": dets,
        "loudest": {d: loudest(trig[trig.detector == d]) for d in dets},
        "n_triggers": {d: int((trig.detector == d).sum()) for d in dets},
        "significance": sig,
        "segments": {d: [[float(s[0]), float(s[1])] for s in segs]
                     for d, segs in res.analysable().items()},
        "analysed_s": res.analysed_s,
        "bank": bank.summary(),
        "refused_templates": {d: res.refused[res.refused.detector == d]
                              .drop(columns="detector").to_dict("records") for d in dets},
        "cluster_window_s": float(cfg.cluster_window_s if cfg.cluster_window_s is not None
                                  else default_cluster_window(bank)),
        "parameters": cfg.to_dict(),
        "amplitude_convention": ("h(t) = sum_n Re[A_n exp(-i 2 pi f_n (t - gps))] "
                                 "exp(-(t - gps)/tau_n), A_n = amp22n_re + i amp22n_im"),
        "tables": {"triggers.parquet": "one row per clustered trigger; trigger_id",
                   "candidates.parquet": "zero-lag candidates; <DET>_trigger_id refer to "
                   "triggers.parquet, template_id to bank.parquet",
                   "background.parquet": "time-slide events; slide refers to slides.parquet",
                   "slides.parquet": "shift per detector and coincident seconds per slide",
                   "refused.parquet": "templates a detector's data could not use"},
    }
    if "stretches" in res.extra:
        st = res.extra["stretches"]
        out["stretches"] = {
            "n_stretches": int(len(st)), "stretch_s": res.extra["stretch_s"],
            "conditioned_stretch": res.extra.get("conditioned_stretch"),
            "margin_windows": [float(x) for x in st["margin_windows"]],
            "note": ("searched stretch by stretch: each stretch whitened with its own PSD "
                     "(unless PSDs were given) and slid its own data; triggers and "
                     "candidates certified equal to the whole series' at every boundary; "
                     "FARs from the pooled background")}
    rows = []
    for _, r in res.candidates.head(50).iterrows():
        row: dict[str, Any] = {
            "gps": float(r["gps"]), "network_snr": float(r["network_snr"]),
            "far_per_year": r.get("far_per_year"), "ifar_years": r.get("ifar_years"),
            "far_is_upper_limit": (bool(r["far_is_upper_limit"])
                                   if pd.notna(r.get("far_is_upper_limit")) else None),
            "on_box_edge": bool(r["on_box_edge"])}
        if row["on_box_edge"]:
            row["note"] = ("the best template lies on the edge of the bank's box: its mass "
                           "and spin are a boundary value, not an estimate")
        ti = int(r["template_index"])
        t = bank.table.iloc[ti]
        row["template"] = {"template_id": int(t.template_id), "mass": float(t.mass_msun),
                           "spin": float(t.spin), "f_hz": float(t.f220_hz),
                           "tau_s": float(t.tau220_s), "n_overtones": bank.n_overtones}
        if len(dets) > 1:
            row["anchor_detector"] = str(r["anchor_detector"])
            row["detectors"] = {}
            for d in dets:
                tid = int(r[f"{d}_trigger_id"])
                row["detectors"][d] = {
                    "network_template": {"gps": float(r[f"{d}_gps"]),
                                         "snr": float(r[f"{d}_snr"]),
                                         "snr_reweighted": float(r[f"{d}_snr_reweighted"]),
                                         "chisq": float(r[f"{d}_chisq"]),
                                         "chisq_dof": int(r[f"{d}_chisq_dof"])},
                    "trigger": _trigger_record(by_id.loc[tid]) if tid >= 0 else None}
        else:
            row["detector"] = dets[0]
            row["trigger"] = _trigger_record(r)
            row.update({k: row["trigger"][k] for k in ("snr", "snr_reweighted", "chisq",
                                                       "chisq_dof", "trigger_id")})
        rows.append(row)
    out["candidates"] = rows
    out["loudest_candidate"] = rows[0] if rows else None
    if not rows:
        out["note"] = ("no candidate: no trigger reached the threshold"
                       if not len(trig) else "no coincident candidate")
    if "mass_range_msun" in bank.meta:
        # bank report: Monte Carlo coverage with a seed independent of the placement's
        cov = bank.coverage(500, seed=int(bank.meta.get("seed", 0)) + 1)
        out["bank"]["coverage"] = {
            "n_points": int(len(cov)), "fraction_covered": float(cov.covered.mean()),
            "min_fitting_factor": float(cov.fitting_factor.min()),
            "definition": "fitting factor minimised over mode amplitudes, uniform (M, chi)"}
    from ringsearch.files import json_safe

    return json_safe(out)
