"""Seeded draw of injection parameters and their placement in analysable time.

The data are cut into *chunks* (a stretch of strain, filtered once per
template overtone count).  Each chunk offers *slots*: times spaced by
``injections.spacing_s`` inside the chunk (away from its padded edges) and
away from the avoided windows (known events).  :func:`plan_campaign` picks
the slots, draws every injection's parameters with one seeded
:class:`numpy.random.Generator` and returns two tables: the chunks and the
injections.  The same spec gives bit-identical tables.

File data can be reused (``data.reuse = R``): each stretch then hosts R
independent rounds of injections, one round per chunk, so a short stretch of
open data still supports a campaign of hundreds of injections.

A listed campaign (``injections.file``) draws nothing: each row goes to the
chunk that holds its ``gps`` at least ``data.pad_s`` from the chunk's edges.
Synthetic chunks are then laid out around the rows: a chunk starts
``data.pad_s`` before the earliest row not yet covered (on the sample grid
from ``data.gps_start``) and takes every row up to ``data.pad_s`` before its
end, so chunks exist only where rows fall (two may overlap in time; their
noise is independent).  Either way the injection table has the schema of
:mod:`ringsearch.data.injections` plus ``chunk``, and passes
:func:`~ringsearch.data.injections.check_injection_table`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import pandas as pd

from ringsearch.campaign.spec import CampaignSpec, file_sha256
from ringsearch.data.injections import check_injection_table, read_injection_table
from ringsearch.data.segments import as_segments
from ringsearch.errors import InputError

#: Stream labels mixed into the seed so every random stream is independent.
STREAM_DRAW = 0
STREAM_NOISE = 1


def rng_for(seed: int, stream: int, *index: int) -> np.random.Generator:
    """The generator of one random stream of a campaign (draws, noise of chunk i, ...).

    Examples
    --------
    >>> float(rng_for(1, 0).random()) == float(rng_for(1, 0).random())
    True
    """
    return np.random.default_rng([int(seed), int(stream), *map(int, index)])


def sample(dist: dict, rng: np.random.Generator, n: int) -> np.ndarray:
    """Draw ``n`` values from a normalised distribution dict (see ``spec.DISTRIBUTIONS``).

    ``{"dist": "isotropic"}`` is not handled here: the caller knows which angle it is.

    Examples
    --------
    >>> x = sample({"dist": "uniform", "low": 1.0, "high": 2.0}, np.random.default_rng(0), 5)
    >>> bool(((x >= 1) & (x <= 2)).all())
    True
    """
    kind = dist["dist"]
    if kind == "fixed":
        return np.full(n, float(dist["value"]))
    if kind == "uniform":
        return rng.uniform(dist["low"], dist["high"], n)
    if kind == "loguniform":
        return np.exp(rng.uniform(math.log(dist["low"]), math.log(dist["high"]), n))
    if kind == "powerlaw":
        lo, hi, k = dist["low"], dist["high"], dist["index"]
        u = rng.random(n)
        if abs(k + 1) < 1e-12:
            return lo * (hi / lo) ** u
        a, b = lo ** (k + 1), hi ** (k + 1)
        return (a + u * (b - a)) ** (1.0 / (k + 1))
    if kind == "normal":
        return rng.normal(dist["mean"], dist["sigma"], n)
    raise InputError(f"unknown distribution {kind!r}.")


def _angle(dist: dict, name: str, rng: np.random.Generator, n: int) -> np.ndarray:
    if dist["dist"] != "isotropic":
        return sample(dist, rng, n)
    if name == "ra":
        return rng.uniform(0.0, 2 * np.pi, n)
    if name == "dec":
        return np.arcsin(rng.uniform(-1.0, 1.0, n))
    if name == "inclination":
        return np.arccos(rng.uniform(-1.0, 1.0, n))
    # polarisation angle: the response is pi-periodic in psi.
    return rng.uniform(0.0, np.pi, n)


def _clear_of(times: np.ndarray, half_width: float, windows) -> np.ndarray:
    """True where ``[t - half_width, t + half_width]`` does not overlap an avoided window."""
    from gwpy.segments import Segment

    avoid = as_segments(windows)
    return np.array([not avoid.intersects_segment(Segment(t - half_width, t + half_width))
                     for t in times], dtype=bool)


def listed_injections(spec: CampaignSpec) -> pd.DataFrame:
    """The rows of a listed campaign's ``injections.file``, checked and normalised.

    Raises InputError when the file is gone or its bytes changed since the spec
    was read (its SHA-256 is part of the configuration hash).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from ringsearch.campaign.spec import spec_from_dict
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (folder / "l.csv").write_text("gps,mass,spin,injected_overtones,ra,dec,"
    ...     "inclination,polarization,target_snr\\n1300000010,60,0.7,0,1,0.2,0.4,0.1,9\\n")
    >>> spec = spec_from_dict({"campaign": {"seed": 1},
    ...     "data": {"source": "synthetic", "detectors": ["H1"], "chunk_s": 16},
    ...     "injections": {"file": "l.csv"}, "search": {"mass": [50, 70], "spin": [0.6, 0.8]},
    ...     "threshold": {"snr": 6}}, base=folder)
    >>> listed_injections(spec)["target_snr"].tolist()
    [9.0]
    """
    inj = spec.injections
    path = inj["file"]
    try:
        digest = file_sha256(path)
    except OSError:
        raise InputError(f"the injection list {path} of campaign {spec.source} cannot be "
                         f"read any more.") from None
    if digest != inj["file_sha256"]:
        raise InputError(f"the injection list {path} changed after campaign {spec.source} "
                         f"was read; load the campaign again.")
    return read_injection_table(path)


def _listed_stretches(spec: CampaignSpec, times: np.ndarray) -> list[tuple[float, float]]:
    """Synthetic chunks laid out around listed times (see the module docstring)."""
    data = spec.data
    pad, length, fs, t0 = data["pad_s"], data["chunk_s"], data["sample_rate"], data["gps_start"]
    out: list[tuple[float, float]] = []
    for t in np.sort(times):
        if out and t <= out[-1][1] - pad + 1e-9:
            continue
        a = t0 + math.floor((t - pad - t0) * fs) / fs
        out.append((a, a + length))
    return out


def data_chunks(spec: CampaignSpec, segments: Sequence[Sequence[tuple[float, float]]] | None
                = None) -> pd.DataFrame:
    """Cut the analysable data into chunks and list each chunk's injection slots.

    Parameters
    ----------
    spec : CampaignSpec
    segments : list of list of (start, end), optional
        Analysable GPS segments per detector (file data).  Ignored for
        synthetic data, whose stretch is ``data.duration_s`` long (or just
        long enough for the injections when that is not given, or laid out
        around the rows of a listed campaign).

    Returns
    -------
    pandas.DataFrame
        One row per data stretch: ``data_index, gps_start, gps_end, n_slots``
        and ``slots`` (array of slot GPS times; for a listed campaign, the
        listed times the stretch holds at least ``data.pad_s`` from its edges).

    Examples
    --------
    >>> from ringsearch.campaign.spec import spec_from_dict
    >>> spec = spec_from_dict({"campaign": {"seed": 1},
    ...     "data": {"source": "synthetic", "detectors": ["H1"], "chunk_s": 16},
    ...     "injections": {"count": 10, "mass": 60, "spin": 0.7, "spacing_s": 2,
    ...                    "loudness": {"by": "snr", "snr": 8}},
    ...     "search": {"mass": [50, 70], "spin": [0.6, 0.8]}, "threshold": {"snr": 6}})
    >>> int(data_chunks(spec)["n_slots"].sum()) >= 10
    True
    """
    data, inj = spec.data, spec.injections
    chunk_s, pad, spacing = data["chunk_s"], data["pad_s"], inj["spacing_s"]
    per_chunk = int(math.floor((chunk_s - 2 * pad) / spacing + 1e-9))
    listed = listed_injections(spec)["gps"].to_numpy() if "file" in inj else None
    if data["source"] == "synthetic" and listed is not None:
        stretches = _listed_stretches(spec, listed)
    elif data["source"] == "synthetic":
        if data["duration_s"] is None:
            n_chunks = max(1, math.ceil(inj["count"] / max(per_chunk, 1)))
        else:
            n_chunks = int(math.floor(data["duration_s"] / chunk_s + 1e-9))
            if n_chunks < 1:
                raise InputError(f"'data.duration_s' = {data['duration_s']} s is shorter than "
                                 f"one chunk ('data.chunk_s' = {chunk_s} s).")
        t0 = data["gps_start"]
        stretches = [(t0 + i * chunk_s, t0 + (i + 1) * chunk_s) for i in range(n_chunks)]
    else:
        if segments is None:
            raise InputError("file data need their analysable segments to place injections.")
        common = as_segments(segments[0])
        for segs in segments[1:]:
            common &= as_segments(segs)
        if data.get("gps_start") is not None or data.get("gps_end") is not None:
            lo = data.get("gps_start") or -np.inf
            hi = data.get("gps_end") or np.inf
            common &= as_segments([(lo, hi)])
        stretches = []
        for seg in common:
            a, b = float(seg[0]), float(seg[1])
            length = b - a
            if length < 2 * pad + spacing:
                continue
            n = max(1, int(math.floor(length / chunk_s + 1e-9)))
            step = length / n
            stretches.extend((a + i * step, a + (i + 1) * step) for i in range(n))
    rows = []
    for i, (a, b) in enumerate(stretches):
        if listed is not None:
            slots = np.sort(listed[(listed >= a + pad - 1e-9) & (listed <= b - pad + 1e-9)])
            rows.append({"data_index": i, "gps_start": a, "gps_end": b,
                         "n_slots": int(slots.size), "slots": slots})
            continue
        k = int(math.floor((b - a - 2 * pad) / spacing + 1e-9))
        slots = a + pad + spacing * (np.arange(k) + 0.5)
        # Drop slots whose spacing interval touches an avoided window.
        keep = _clear_of(slots, spacing / 2, data["avoid"])
        rows.append({"data_index": i, "gps_start": a, "gps_end": b,
                     "n_slots": int(keep.sum()), "slots": slots[keep]})
    return pd.DataFrame(rows, columns=["data_index", "gps_start", "gps_end", "n_slots", "slots"])


def plan_campaign(spec: CampaignSpec, segments=None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Choose the chunks and draw every injection.

    Parameters
    ----------
    spec : CampaignSpec
    segments : list of list of (start, end), optional
        Analysable GPS segments per detector, for file data.

    Returns
    -------
    chunks : pandas.DataFrame
        ``chunk, data_index, round, gps_start, gps_end, n_injections``: one
        row per unit of work.
    injections : pandas.DataFrame
        One row per injection: ``injection_id, chunk, gps`` (geocentre
        arrival of the ringdown start, s), ``mass`` (Msun, detector frame),
        ``spin``, ``injected_overtones``, ``phase_0`` and ``ratio_n``,
        ``phase_n`` for each overtone n (amplitude relative to the
        fundamental, phase in rad), ``ra, dec, inclination, polarization``
        (rad), and either ``target_snr`` or ``distance_mpc`` and ``epsilon``.

    Raises
    ------
    InputError
        If the data cannot hold ``injections.count`` injections at the
        requested spacing; for a listed campaign, if a row lies in no chunk
        (at least ``data.pad_s`` from its edges), within half of
        ``injections.spacing_s`` of an avoided window, or closer than
        ``injections.spacing_s`` to another row.

    Examples
    --------
    >>> from ringsearch.campaign.spec import spec_from_dict
    >>> spec = spec_from_dict({"campaign": {"seed": 1},
    ...     "data": {"source": "synthetic", "detectors": ["H1"], "chunk_s": 16},
    ...     "injections": {"count": 10, "mass": 60, "spin": 0.7, "spacing_s": 2,
    ...                    "loudness": {"by": "snr", "snr": 8}},
    ...     "search": {"mass": [50, 70], "spin": [0.6, 0.8]}, "threshold": {"snr": 6}})
    >>> chunks, inj = plan_campaign(spec)
    >>> len(inj), int(chunks["n_injections"].sum())
    (10, 10)
    """
    data, inj = spec.data, spec.injections
    stretches = data_chunks(spec, segments)
    if "file" in inj:
        chunks, injections = _plan_listed(spec, stretches)
        return with_background_units(spec, chunks, stretches), injections
    rounds = data["reuse"]
    capacity = int(stretches["n_slots"].sum()) * rounds
    count = inj["count"]
    if count > capacity:
        raise InputError(
            f"'injections.count' = {count} is more than the data can hold: "
            f"{capacity} slots at 'injections.spacing_s' = {inj['spacing_s']} s "
            f"(with 'data.reuse' = {rounds}); add data, raise data.reuse or lower the count.")
    rng = rng_for(spec.seed, STREAM_DRAW)
    # Use as few rounds of reuse as the count needs (fuller chunks, less filtering),
    # then choose `count` of their (round, stretch, slot) triples without replacement.
    per_round = int(stretches["n_slots"].sum())
    all_slots = []
    for r in range(min(rounds, math.ceil(count / max(per_round, 1)))):
        for row in stretches.itertuples():
            for t in row.slots:
                all_slots.append((r, row.data_index, float(t)))
    chosen = np.sort(rng.choice(len(all_slots), size=count, replace=False))
    picked = [all_slots[i] for i in chosen]
    # One unit of work per (round, stretch) that received injections.
    keys = sorted({(r, d) for r, d, _ in picked})
    chunk_of = {key: i for i, key in enumerate(keys)}
    by_index = stretches.set_index("data_index")
    chunk_rows = []
    for (r, d), i in chunk_of.items():
        chunk_rows.append({"chunk": i, "data_index": d, "round": r,
                           "gps_start": float(by_index.loc[d, "gps_start"]),
                           "gps_end": float(by_index.loc[d, "gps_end"]),
                           "n_injections": 0})
    chunks = pd.DataFrame(chunk_rows)
    n = count
    table: dict[str, np.ndarray] = {
        "injection_id": np.arange(n),
        "chunk": np.array([chunk_of[(r, d)] for r, d, _ in picked], dtype=np.int64),
        "gps": np.array([t for _, _, t in picked]),
    }
    jitter = inj["jitter_s"]
    if jitter > 0:
        table["gps"] = table["gps"] + rng.uniform(-jitter, jitter, n)
    table["mass"] = sample(inj["mass"], rng, n)
    table["spin"] = sample(inj["spin"], rng, n)
    # Balanced overtone counts: cycle through the list, then shuffle.
    counts = np.resize(np.asarray(inj["overtones"], dtype=np.int64), n)
    table["injected_overtones"] = rng.permutation(counts)
    table["phase_0"] = sample(inj["phase"], rng, n)
    for k in range(1, max(inj["overtones"]) + 1):
        table[f"ratio_{k}"] = sample(inj["overtone_ratio"], rng, n)
        table[f"phase_{k}"] = sample(inj["overtone_phase"], rng, n)
    for name in ("ra", "dec", "inclination", "polarization"):
        table[name] = _angle(inj[name], name, rng, n)
    if inj["align_to_samples"]:
        # Shift each geocentre time so that the signal starts exactly on a sample
        # of the first detector (exact-template tests need no sub-sample offset).
        from ringsearch.physics.detectors import time_delay_from_geocentre

        fs = data["sample_rate"]
        delay = np.asarray(time_delay_from_geocentre(spec.detectors[0], table["ra"],
                                                     table["dec"], table["gps"]), float)
        table["gps"] = np.round((table["gps"] + delay) * fs) / fs - delay
    loud = inj["loudness"]
    if loud["by"] == "snr":
        table["target_snr"] = sample(loud["snr"], rng, n)
    else:
        table["distance_mpc"] = sample(loud["distance_mpc"], rng, n)
        table["epsilon"] = sample(loud["epsilon"], rng, n)
    chunk = table.pop("chunk")
    injections = check_injection_table(pd.DataFrame(table),
                                       origin=f"the injections drawn for {spec.source}")
    injections.insert(1, "chunk", chunk)
    sizes = injections.groupby("chunk").size()
    chunks["n_injections"] = chunks["chunk"].map(sizes).astype(np.int64)
    return with_background_units(spec, chunks, stretches), injections


def background_chunks_needed(spec: CampaignSpec) -> int:
    """How many noise-only stretches a synthetic campaign searches for its background.

    The FAR at a threshold of rate F is measured from the n background events
    louder than it, with relative standard error ``1/sqrt(n)`` (Poisson);
    ``threshold.background_precision`` = p asks for ``n = 1/p^2``, that is
    ``T = 1 / (p^2 F)`` seconds of background, or ``threshold.background_s``
    seconds when given.  A stretch of ``chunk_s`` gives about
    ``(chunk_s - psd_seglen_s - 1) x slides`` of it (the conditioning drops
    half a whitening filter and a taper at each end).  Campaigns with an SNR threshold
    and no ``background_s`` need none; the count is capped by
    ``threshold.max_background_chunks`` (the results then state the precision
    reached).

    Examples
    --------
    >>> from ringsearch.campaign.spec import spec_from_dict
    >>> spec = spec_from_dict({"campaign": {"seed": 1},
    ...     "data": {"source": "synthetic", "detectors": ["H1", "L1"], "chunk_s": 64},
    ...     "injections": {"count": 10, "mass": 60, "spin": 0.7,
    ...                    "loudness": {"by": "snr", "snr": 8}},
    ...     "search": {"mass": [50, 70], "spin": [0.6, 0.8]},
    ...     "threshold": {"far_per_year": 1e4, "slides": 50, "background_precision": 0.5}})
    >>> background_chunks_needed(spec)
    5
    """
    from ringsearch.physics.units import YEAR_S

    data, th = spec.data, spec.threshold
    if th["background_s"] is not None:
        needed = float(th["background_s"])
    elif th["far_per_year"] is not None:
        needed = YEAR_S / (th["background_precision"] ** 2 * th["far_per_year"])
    else:
        return 0
    per_chunk = max(data["chunk_s"] - data["psd_seglen_s"] - 1.0, 1.0) * max(th["slides"], 1)
    return int(min(math.ceil(needed / per_chunk), th["max_background_chunks"]))


def with_background_units(spec: CampaignSpec, chunks: pd.DataFrame,
                          stretches: pd.DataFrame) -> pd.DataFrame:
    """Add the units that search the data without injections, once (``search.mode`` at-times).

    Every chunk gets ``kind``: ``"injections"``, or ``"background"`` for a unit
    searched whole with its time slides and no injection.  Recorded data:
    one background unit per data stretch used (however many rounds of
    injections reuse it).  Synthetic data: :func:`background_chunks_needed`
    stretches of fresh noise after the injection stretches.  With
    ``search.mode = "full"`` every injection chunk makes its own background.

    Examples
    --------
    >>> chunks = with_background_units(spec, chunks, stretches)  # doctest: +SKIP
    """
    chunks = chunks.copy()
    chunks["kind"] = "injections"
    if spec.search["mode"] != "at-times" or len(spec.detectors) < 2:
        return chunks
    data = spec.data
    rows = []
    if data["source"] == "files":
        by_index = stretches.set_index("data_index")
        for d in sorted(set(chunks["data_index"].astype(int))):
            rows.append({"data_index": d, "gps_start": float(by_index.loc[d, "gps_start"]),
                         "gps_end": float(by_index.loc[d, "gps_end"])})
    else:
        first = int(stretches["data_index"].max()) + 1 if len(stretches) else 0
        chunk_s, t0 = data["chunk_s"], data["gps_start"]
        for j in range(background_chunks_needed(spec)):
            d = first + j
            rows.append({"data_index": d, "gps_start": t0 + d * chunk_s,
                         "gps_end": t0 + (d + 1) * chunk_s})
    n0 = len(chunks)
    extra = pd.DataFrame([{"chunk": n0 + i, "round": -1, "n_injections": 0,
                           "kind": "background", **r} for i, r in enumerate(rows)],
                         columns=list(chunks.columns))
    out = pd.concat([chunks, extra], ignore_index=True) if rows else chunks
    return out.astype({"chunk": np.int64, "data_index": np.int64, "round": np.int64,
                       "n_injections": np.int64})


def _plan_listed(spec: CampaignSpec, stretches: pd.DataFrame
                 ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """:func:`plan_campaign` for ``injections.file``: place each listed row in its chunk."""
    data, spacing, pad = spec.data, spec.injections["spacing_s"], spec.data["pad_s"]
    table = listed_injections(spec)
    gps = table["gps"].to_numpy()
    ids = table["injection_id"].to_numpy()
    where = np.full(gps.size, -1, dtype=np.int64)
    for row in stretches.itertuples():
        inside = (where < 0) & np.isin(gps, row.slots)
        where[inside] = row.data_index
    if (where < 0).any():
        k = int(np.argmax(where < 0))
        raise InputError(f"listed injection {ids[k]} at GPS {gps[k]:.6f} lies in no data chunk "
                         f"at least 'data.pad_s' = {pad:g} s from its edges ({spec.source}).")
    clear = _clear_of(gps, spacing / 2, data["avoid"])
    if not clear.all():
        k = int(np.argmax(~clear))
        raise InputError(f"listed injection {ids[k]} at GPS {gps[k]:.6f} is within half of "
                         f"'injections.spacing_s' = {spacing:g} s of a 'data.avoid' window "
                         f"({spec.source}).")
    order = np.argsort(gps, kind="stable")
    close = np.flatnonzero(np.diff(gps[order]) < spacing - 1e-9)
    if close.size:
        a, b = order[close[0]], order[close[0] + 1]
        raise InputError(f"listed injections {ids[a]} and {ids[b]} (GPS {gps[a]:.6f} and "
                         f"{gps[b]:.6f}) are closer than 'injections.spacing_s' = "
                         f"{spacing:g} s ({spec.source}).")
    used = np.unique(where)
    chunk_of = {int(d): i for i, d in enumerate(used)}
    by_index = stretches.set_index("data_index")
    chunks = pd.DataFrame(
        [{"chunk": i, "data_index": d, "round": 0,
          "gps_start": float(by_index.loc[d, "gps_start"]),
          "gps_end": float(by_index.loc[d, "gps_end"]),
          "n_injections": int((where == d).sum())} for d, i in chunk_of.items()],
        columns=["chunk", "data_index", "round", "gps_start", "gps_end", "n_injections"])
    injections = table.copy()
    injections.insert(1, "chunk", np.array([chunk_of[int(d)] for d in where], dtype=np.int64))
    return chunks, injections
