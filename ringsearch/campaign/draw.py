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
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import pandas as pd

from ringsearch.campaign.spec import CampaignSpec
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


def _subtract(segments: list[tuple[float, float]], windows) -> list[tuple[float, float]]:
    out = []
    for a, b in segments:
        pieces = [(a, b)]
        for wa, wb in windows:
            nxt = []
            for pa, pb in pieces:
                if wb <= pa or wa >= pb:
                    nxt.append((pa, pb))
                    continue
                if wa > pa:
                    nxt.append((pa, wa))
                if wb < pb:
                    nxt.append((wb, pb))
            pieces = nxt
        out.extend(pieces)
    return out


def _intersect(per_detector: Sequence[Sequence[tuple[float, float]]]) -> list[tuple[float, float]]:
    common = sorted((float(a), float(b)) for a, b in per_detector[0])
    for segs in per_detector[1:]:
        nxt = []
        for a, b in common:
            for c, d in segs:
                lo, hi = max(a, float(c)), min(b, float(d))
                if hi > lo:
                    nxt.append((lo, hi))
        common = sorted(nxt)
    return common


def data_chunks(spec: CampaignSpec, segments: Sequence[Sequence[tuple[float, float]]] | None
                = None) -> pd.DataFrame:
    """Cut the analysable data into chunks and list each chunk's injection slots.

    Parameters
    ----------
    spec : CampaignSpec
    segments : list of list of (start, end), optional
        Analysable GPS segments per detector (file data).  Ignored for
        synthetic data, whose stretch is ``data.duration_s`` long (or just
        long enough for the injections when that is not given).

    Returns
    -------
    pandas.DataFrame
        One row per data stretch: ``data_index, gps_start, gps_end, n_slots``
        and ``slots`` (array of slot GPS times).

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
    if data["source"] == "synthetic":
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
        common = _intersect(segments)
        if data.get("gps_start") is not None or data.get("gps_end") is not None:
            lo = data.get("gps_start") or -np.inf
            hi = data.get("gps_end") or np.inf
            common = [(max(a, lo), min(b, hi)) for a, b in common if min(b, hi) > max(a, lo)]
        stretches = []
        for a, b in common:
            length = b - a
            if length < 2 * pad + spacing:
                continue
            n = max(1, int(math.floor(length / chunk_s + 1e-9)))
            step = length / n
            stretches.extend((a + i * step, a + (i + 1) * step) for i in range(n))
    rows = []
    for i, (a, b) in enumerate(stretches):
        k = int(math.floor((b - a - 2 * pad) / spacing + 1e-9))
        slots = a + pad + spacing * (np.arange(k) + 0.5)
        # Drop slots whose spacing interval touches an avoided window.
        keep = np.ones(k, bool)
        for wa, wb in data["avoid"]:
            keep &= (slots + spacing / 2 <= wa) | (slots - spacing / 2 >= wb)
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
        requested spacing.

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
    injections = pd.DataFrame(table)
    sizes = injections.groupby("chunk").size()
    chunks["n_injections"] = chunks["chunk"].map(sizes).astype(np.int64)
    return chunks, injections
