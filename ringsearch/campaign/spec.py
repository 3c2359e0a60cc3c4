"""Campaign files: the TOML schema, its validation and the normalised spec.

A campaign file says which data to use (synthetic Gaussian noise or strain
files), which signals to inject and how loud, how to search for them, which
detection threshold to apply, and the seed.  :func:`load_spec` reads it with
Python's :mod:`tomllib`, checks every key and value before any work starts
and returns a :class:`CampaignSpec`.  Any problem raises
:class:`ringsearch.errors.InputError` with one sentence naming the key.

The normalised spec is a plain nested dict (``spec.config``) holding every
value with its default filled in; its SHA-256 (``spec.config_hash``) is what
the output folder records so that a changed campaign is refused on resume.

Injections are either drawn from distributions (``count``, ``mass``,
``spin``, ``loudness``, ...) or listed: ``[injections] file = "list.csv"``
(CSV or Parquet, path relative to the campaign file, schema in
:mod:`ringsearch.data.injections`), with ``spacing_s`` the only other key.
The list is read and checked when the spec is built.  The normalised config
holds its resolved path and the SHA-256 of the file's bytes
(``injections.file_sha256``), not the rows: the config stays small (it goes
to every chunk's worker) and its hash still changes whenever the list does;
:func:`ringsearch.campaign.draw.plan_campaign` reads the rows again and
refuses a file whose bytes no longer match.  ``injections.count`` and
``injections.overtones`` are then derived from the list (number of rows,
distinct ``injected_overtones``).  A search bank given as ``search.bank`` is
recorded the same way (path and ``search.bank_sha256``).

Example campaign file::

    [campaign]
    name = "quick"
    seed = 2026

    [data]
    source = "synthetic"
    detectors = ["H1", "L1"]
    psd = "aligo"
    sample_rate = 2048
    chunk_s = 32

    [injections]
    count = 120
    overtones = [0, 1, 2]
    spacing_s = 2.0
    mass = { dist = "uniform", low = 50, high = 90 }
    spin = { dist = "uniform", low = 0.5, high = 0.8 }
    loudness = { by = "snr", snr = { dist = "uniform", low = 2, high = 16 } }

    [search]
    mass = [40, 110]
    spin = [0.3, 0.9]
    min_match = 0.9
    template_overtones = [0, 1]
    snr_threshold = 5.0    # per-detector trigger threshold of the search engine
    veto = true            # chi-squared signal-consistency veto ...
    veto_bins = 8          # ... in 8 time slices
    tolerance_s = 0.01     # timing allowance added to the light-travel time
    mode = "at-times"      # search around each injection; background searched once

    [threshold]
    snr = 7.0

    [overtones]            # optional: overtone-count evidence per injection
    enabled = true
    max_overtones = 2
    log10_bayes_threshold = 0.5
    snr_prior = [4.0, 200.0]  # prior on the expected network SNR (amplitude scale)

A listed campaign replaces the drawn ``[injections]`` table by::

    [injections]
    file = "my-ringdowns.csv"   # gps, mass, spin, injected_overtones, ratio_n, ...
    spacing_s = 2.0             # listed injections closer than this are refused
"""

from __future__ import annotations

import hashlib
import json
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ringsearch.errors import InputError

#: Detector names the rest of the package knows.
KNOWN_DETECTORS = ("H1", "L1", "V1", "K1")

#: Distribution families and their parameters (all required).
DISTRIBUTIONS: dict[str, tuple[str, ...]] = {
    "fixed": ("value",),
    "uniform": ("low", "high"),
    "loguniform": ("low", "high"),
    # density proportional to x**index on [low, high]; index = 2 is uniform in volume.
    "powerlaw": ("low", "high", "index"),
    "normal": ("mean", "sigma"),
}

_MISSING = object()


@dataclass(frozen=True)
class CampaignSpec:
    """A validated campaign.

    Attributes
    ----------
    config : dict
        Normalised configuration (defaults filled in), JSON-serialisable.
    config_hash : str
        SHA-256 hex digest of the canonical JSON of ``config``.
    source : str
        Where the campaign came from (a file path or ``"<dict>"``).
    text : str
        The original TOML text (empty when built from a dict).
    """

    config: dict
    config_hash: str
    source: str = "<dict>"
    text: str = field(default="", repr=False)

    # Short accessors used all over the campaign layer.
    @property
    def seed(self) -> int:
        return int(self.config["campaign"]["seed"])

    @property
    def data(self) -> dict:
        return self.config["data"]

    @property
    def injections(self) -> dict:
        return self.config["injections"]

    @property
    def search(self) -> dict:
        return self.config["search"]

    @property
    def threshold(self) -> dict:
        return self.config["threshold"]

    @property
    def report(self) -> dict:
        return self.config["report"]

    @property
    def overtones(self) -> dict:
        """The ``[overtones]`` settings; ``{"enabled": False}`` when the table is absent."""
        return self.config.get("overtones", {"enabled": False})

    @property
    def detectors(self) -> list[str]:
        return list(self.config["data"]["detectors"])


class _Table:
    """Reads one TOML table, remembering which keys were used."""

    def __init__(self, table: Any, where: str, origin: str):
        if not isinstance(table, dict):
            raise InputError(f"'{where}' in {origin} must be a table, not {table!r}.")
        self.table = table
        self.where = where
        self.origin = origin
        self.used: set[str] = set()

    def key(self, name: str) -> str:
        return f"{self.where}.{name}" if self.where else name

    def has(self, name: str) -> bool:
        return name in self.table

    def raw(self, name: str, default: Any = _MISSING) -> Any:
        self.used.add(name)
        if name not in self.table:
            if default is _MISSING:
                raise InputError(f"campaign file {self.origin} is missing the key "
                                 f"'{self.key(name)}'.")
            return default
        return self.table[name]

    def number(self, name: str, default: Any = _MISSING, *, lo: float | None = None,
               hi: float | None = None, lo_open: bool = False, hi_open: bool = False,
               integer: bool = False) -> Any:
        value = self.raw(name, default)
        if value is None:
            return None
        return _check_number(value, self.key(name), self.origin, lo=lo, hi=hi,
                             lo_open=lo_open, hi_open=hi_open, integer=integer)

    def string(self, name: str, default: Any = _MISSING, choices: tuple[str, ...] | None = None):
        value = self.raw(name, default)
        if value is None:
            return None
        if not isinstance(value, str):
            raise InputError(f"'{self.key(name)}' in {self.origin} must be a string, "
                             f"not {value!r}.")
        if choices is not None and value not in choices:
            raise InputError(f"'{self.key(name)}' in {self.origin} is {value!r}; "
                             f"choose one of {', '.join(choices)}.")
        return value

    def boolean(self, name: str, default: Any = _MISSING) -> bool:
        value = self.raw(name, default)
        if not isinstance(value, bool):
            raise InputError(f"'{self.key(name)}' in {self.origin} must be true or false, "
                             f"not {value!r}.")
        return value

    def sub(self, name: str, default: Any = _MISSING) -> _Table:
        return _Table(self.raw(name, default), self.key(name), self.origin)

    def finish(self) -> None:
        unknown = sorted(set(self.table) - self.used)
        if unknown:
            allowed = ", ".join(sorted(self.used)) or "none"
            raise InputError(f"unknown key '{self.key(unknown[0])}' in {self.origin} "
                             f"(allowed here: {allowed}).")


def _check_number(value: Any, key: str, origin: str, *, lo=None, hi=None, lo_open=False,
                  hi_open=False, integer=False):
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise InputError(f"'{key}' in {origin} must be a number, not {value!r}.")
    if integer and not (isinstance(value, int) or float(value).is_integer()):
        raise InputError(f"'{key}' in {origin} must be a whole number, not {value!r}.")
    if not math.isfinite(value):
        raise InputError(f"'{key}' in {origin} must be finite, not {value!r}.")
    if lo is not None and (value < lo or (lo_open and value == lo)):
        bound = ">" if lo_open else ">="
        raise InputError(f"'{key}' in {origin} is {value!r} but must be {bound} {lo}.")
    if hi is not None and (value > hi or (hi_open and value == hi)):
        bound = "<" if hi_open else "<="
        raise InputError(f"'{key}' in {origin} is {value!r} but must be {bound} {hi}.")
    return int(value) if integer else float(value)


def _distribution(value: Any, key: str, origin: str, *, lo=None, hi=None, lo_open=False,
                  hi_open=False) -> dict:
    """Normalise a number or a ``{dist = ..., ...}`` table into a distribution dict.

    The support of the distribution must lie inside [lo, hi] (open ends when
    asked): a uniform spin up to 1, or a normal distribution of a mass, is an
    impossible distribution and is refused.
    """
    bounds = dict(lo=lo, hi=hi, lo_open=lo_open, hi_open=hi_open)
    if isinstance(value, int | float) and not isinstance(value, bool):
        return {"dist": "fixed", "value": _check_number(value, key, origin, **bounds)}
    table = _Table(value, key, origin)
    dist = table.string("dist", choices=tuple(DISTRIBUTIONS))
    out: dict[str, Any] = {"dist": dist}
    if dist == "fixed":
        out["value"] = table.number("value", **bounds)
    elif dist in ("uniform", "loguniform", "powerlaw"):
        out["low"] = table.number("low", **bounds)
        out["high"] = table.number("high", **bounds)
        if out["low"] > out["high"]:
            raise InputError(f"'{key}.low' = {out['low']} is above '{key}.high' = "
                             f"{out['high']} in {origin}.")
        if dist in ("loguniform", "powerlaw") and out["low"] <= 0:
            raise InputError(f"'{key}.low' in {origin} must be > 0 for a {dist} "
                             f"distribution, not {out['low']}.")
        if dist == "powerlaw":
            out["index"] = table.number("index", lo=-20, hi=20)
    elif dist == "normal":
        out["mean"] = table.number("mean")
        out["sigma"] = table.number("sigma", lo=0, lo_open=True)
        if lo is not None or hi is not None:
            raise InputError(f"'{key}' in {origin} cannot be a normal distribution: its "
                             f"values must stay within [{lo}, {hi}].")
    table.finish()
    return out


def _int_list(value: Any, key: str, origin: str, lo: int, hi: int) -> list[int]:
    if isinstance(value, int) and not isinstance(value, bool):
        value = [value]
    if not isinstance(value, list) or not value:
        raise InputError(f"'{key}' in {origin} must be a non-empty list of whole numbers.")
    out = [_check_number(v, key, origin, lo=lo, hi=hi, integer=True) for v in value]
    if len(set(out)) != len(out):
        raise InputError(f"'{key}' in {origin} lists a value twice: {value!r}.")
    return sorted(out)


def _range(value: Any, key: str, origin: str, *, lo=None, hi=None, hi_open=False,
           lo_open=False) -> list[float]:
    if isinstance(value, int | float) and not isinstance(value, bool):
        value = [value, value]
    if not isinstance(value, list) or len(value) != 2:
        raise InputError(f"'{key}' in {origin} must be [low, high], not {value!r}.")
    low, high = (_check_number(v, key, origin, lo=lo, hi=hi, lo_open=lo_open,
                               hi_open=hi_open) for v in value)
    if low > high:
        raise InputError(f"'{key}' in {origin} has low {low} above high {high}.")
    return [low, high]


def _windows(value: Any, key: str, origin: str) -> list[list[float]]:
    if not isinstance(value, list):
        raise InputError(f"'{key}' in {origin} must be a list of [gps_start, gps_end] pairs.")
    out = []
    for item in value:
        if not isinstance(item, list) or len(item) != 2:
            raise InputError(f"'{key}' in {origin} must hold [gps_start, gps_end] pairs, "
                             f"not {item!r}.")
        a, b = (_check_number(v, key, origin) for v in item)
        if a >= b:
            raise InputError(f"'{key}' in {origin} has a window [{a}, {b}] that ends "
                             f"before it starts.")
        out.append([a, b])
    return out


def _read_data(t: _Table, origin: str, base: Path) -> dict:
    data: dict[str, Any] = {}
    data["source"] = t.string("source", choices=("synthetic", "files"))
    data["sample_rate"] = t.number("sample_rate", 2048.0, lo=256, hi=65536)
    data["f_low"] = t.number("f_low", 20.0, lo=0, lo_open=True)
    if data["f_low"] >= data["sample_rate"] / 2:
        raise InputError(f"'data.f_low' = {data['f_low']} Hz in {origin} is not below the "
                         f"Nyquist frequency {data['sample_rate'] / 2} Hz.")
    data["chunk_s"] = t.number("chunk_s", 64.0, lo=2, hi=1e5)
    # Seconds at each chunk edge that receive no injection: the conditioning and
    # the filter lose a few seconds at data edges (whitening-filter length).
    data["pad_s"] = t.number("pad_s", 6.0, lo=0)
    if 2 * data["pad_s"] >= data["chunk_s"]:
        raise InputError(f"'data.pad_s' = {data['pad_s']} in {origin} leaves no room in "
                         f"chunks of data.chunk_s = {data['chunk_s']} s.")
    # the default of the search's conditioning (ringsearch.data.condition.condition)
    data["psd_seglen_s"] = t.number("psd_seglen_s", 4.0, lo=0.125)
    data["reuse"] = t.number("reuse", 1, lo=1, hi=100000, integer=True)
    data["avoid"] = _windows(t.raw("avoid", []), "data.avoid", origin)
    # Gate loud transients at the data layer's default threshold, for synthetic data too:
    # the search always gates, and a campaign measures that search.
    data["gating"] = t.boolean("gating", True)
    data["whiten_with"] = t.string("whiten_with", "estimate", choices=("estimate", "model"))
    if data["source"] == "synthetic":
        dets = t.raw("detectors", ["H1", "L1"])
        if isinstance(dets, str):
            dets = [dets]
        if not isinstance(dets, list) or not dets:
            raise InputError(f"'data.detectors' in {origin} must be a list such as "
                             f"[\"H1\", \"L1\"].")
        for d in dets:
            if d not in KNOWN_DETECTORS:
                raise InputError(f"'data.detectors' in {origin} names an unknown detector "
                                 f"{d!r}; known: {', '.join(KNOWN_DETECTORS)}.")
        if len(set(dets)) != len(dets):
            raise InputError(f"'data.detectors' in {origin} lists a detector twice.")
        data["detectors"] = list(dets)
        data["psd"] = t.string("psd", "aligo")
        data["gps_start"] = t.number("gps_start", 1.3e9, lo=0)
        data["duration_s"] = t.number("duration_s", None, lo=0, lo_open=True)
    else:
        if data["whiten_with"] == "model":
            raise InputError(f"'data.whiten_with' = \"model\" in {origin} needs synthetic data "
                             f"(recorded data have no model PSD).")
        files = t.raw("files")
        if not isinstance(files, dict) or not files:
            raise InputError(f"'data.files' in {origin} must be a table of detector = "
                             f"\"path\" (or a list of paths) entries.")
        paths: dict[str, list[str]] = {}
        for det, value in files.items():
            if det not in KNOWN_DETECTORS:
                raise InputError(f"'data.files.{det}' in {origin} is not a known detector "
                                 f"({', '.join(KNOWN_DETECTORS)}).")
            items = [value] if isinstance(value, str) else value
            if not isinstance(items, list) or not all(isinstance(p, str) for p in items):
                raise InputError(f"'data.files.{det}' in {origin} must be a path or a list "
                                 f"of paths.")
            resolved = []
            for p in items:
                path = Path(p).expanduser()
                if not path.is_absolute():
                    path = (base / path).resolve()
                if not path.exists():
                    raise InputError(f"'data.files.{det}' in {origin} names a file that "
                                     f"does not exist: {path}.")
                resolved.append(str(path))
            paths[det] = resolved
        data["files"] = paths
        data["detectors"] = list(paths)
        data["gps_start"] = t.number("gps_start", None, lo=0)
        data["gps_end"] = t.number("gps_end", None, lo=0)
        if (data["gps_start"] is not None and data["gps_end"] is not None
                and data["gps_start"] >= data["gps_end"]):
            raise InputError(f"'data.gps_start' is not before 'data.gps_end' in {origin}.")
    t.finish()
    return data


#: Keys of a drawn ``[injections]`` table that a listed one (``file``) must not have.
_DRAW_KEYS = ("count", "overtones", "jitter_s", "align_to_samples", "mass", "spin",
              "overtone_ratio", "overtone_phase", "phase", "ra", "dec", "inclination",
              "polarization", "loudness")


def _resolve(value: str, base: Path) -> Path:
    path = Path(value).expanduser()
    return path if path.is_absolute() else (base / path).resolve()


def file_sha256(path: str | Path) -> str:
    """SHA-256 hex digest of a file's bytes (how listed injections and banks enter the hash).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "x.csv"
    >>> _ = p.write_bytes(b"")
    >>> file_sha256(p)[:12]
    'e3b0c44298fc'
    """
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def _read_injection_list(t: _Table, origin: str, base: Path, data: dict) -> dict:
    """``[injections] file = ...``: the listed injections, checked now, recorded by hash."""
    import numpy as np

    from ringsearch.data.injections import read_injection_table
    from ringsearch.physics.qnm import mode_f_tau

    for key in t.table:
        if key in _DRAW_KEYS:
            raise InputError(f"'injections.{key}' in {origin} cannot be given with "
                             f"'injections.file' (the list gives every injection).")
    path = _resolve(t.string("file"), base)
    if not path.is_file():
        raise InputError(f"'injections.file' in {origin} names a file that does not exist: "
                         f"{path}.")
    digest = file_sha256(path)
    table = read_injection_table(path)
    inj: dict[str, Any] = {
        "file": str(path), "file_sha256": digest, "count": len(table),
        "overtones": sorted(int(n) for n in table["injected_overtones"].unique()),
        "spacing_s": t.number("spacing_s", 2.0, lo=0, lo_open=True)}
    t.finish()
    fs = data["sample_rate"]
    n_over = table["injected_overtones"].to_numpy()
    for n in range(int(n_over.max()) + 1):
        sel = np.flatnonzero(n_over >= n)
        f = np.atleast_1d(mode_f_tau(table["mass"].to_numpy()[sel],
                                     table["spin"].to_numpy()[sel], 2, 2, n)[0])
        if (f >= fs / 2).any():
            k = int(sel[np.argmax(f >= fs / 2)])
            raise InputError(f"injection {int(table['injection_id'][k])} of {path} puts mode "
                             f"(2,2,{n}) at {float(f[np.argmax(f >= fs / 2)]):.0f} Hz, above "
                             f"the Nyquist frequency {fs / 2:g} Hz of 'data.sample_rate' in "
                             f"{origin}.")
    if data["source"] == "synthetic":
        k = int(table["gps"].to_numpy().argmin())
        first = float(table["gps"][k])
        if data["gps_start"] > first - data["pad_s"]:
            raise InputError(f"'data.gps_start' = {data['gps_start']:.6f} in {origin} must be "
                             f"at or before {first - data['pad_s']:.6f}, the earliest listed "
                             f"injection ({int(table['injection_id'][k])} at GPS {first:.6f}) "
                             f"less 'data.pad_s'.")
    return inj


def _read_injections(t: _Table, origin: str, base: Path, data: dict) -> dict:
    if t.has("file"):
        return _read_injection_list(t, origin, base, data)
    inj: dict[str, Any] = {}
    inj["count"] = t.number("count", lo=1, hi=10_000_000, integer=True)
    inj["overtones"] = _int_list(t.raw("overtones", [0]), "injections.overtones", origin, 0, 7)
    inj["spacing_s"] = t.number("spacing_s", 2.0, lo=0, lo_open=True)
    inj["jitter_s"] = t.number("jitter_s", 0.0, lo=0)
    if inj["jitter_s"] >= inj["spacing_s"]:
        raise InputError(f"'injections.jitter_s' in {origin} must be below "
                         f"'injections.spacing_s'.")
    inj["align_to_samples"] = t.boolean("align_to_samples", False)
    inj["mass"] = _distribution(t.raw("mass"), "injections.mass", origin, lo=0, lo_open=True)
    inj["spin"] = _distribution(t.raw("spin"), "injections.spin", origin, lo=0, hi=1,
                                hi_open=True)
    inj["overtone_ratio"] = _distribution(t.raw("overtone_ratio", 1.0),
                                          "injections.overtone_ratio", origin, lo=0)
    inj["overtone_phase"] = _distribution(
        t.raw("overtone_phase", {"dist": "uniform", "low": 0.0, "high": 2 * math.pi}),
        "injections.overtone_phase", origin)
    inj["phase"] = _distribution(
        t.raw("phase", {"dist": "uniform", "low": 0.0, "high": 2 * math.pi}),
        "injections.phase", origin)
    # Orientation: "isotropic" (the default) or fixed values / distributions.
    for name, lo, hi in (("ra", 0.0, 2 * math.pi), ("dec", -math.pi / 2, math.pi / 2),
                         ("inclination", 0.0, math.pi), ("polarization", 0.0, 2 * math.pi)):
        value = t.raw(name, "isotropic")
        if value == "isotropic":
            inj[name] = {"dist": "isotropic"}
        else:
            inj[name] = _distribution(value, f"injections.{name}", origin, lo=lo, hi=hi)
    loud = t.sub("loudness")
    by = loud.string("by", choices=("snr", "distance"))
    if by == "snr":
        inj["loudness"] = {
            "by": "snr",
            "snr": _distribution(loud.raw("snr"), "injections.loudness.snr", origin,
                                 lo=0, lo_open=True),
        }
    else:
        inj["loudness"] = {
            "by": "distance",
            "distance_mpc": _distribution(loud.raw("distance_mpc"),
                                          "injections.loudness.distance_mpc", origin,
                                          lo=0, lo_open=True),
            "epsilon": _distribution(loud.raw("epsilon", 0.01), "injections.loudness.epsilon",
                                     origin, lo=0, lo_open=True, hi=1),
        }
    loud.finish()
    t.finish()
    return inj


def _read_search(t: _Table, origin: str, base: Path) -> dict:
    s: dict[str, Any] = {}
    s["mass"] = _range(t.raw("mass"), "search.mass", origin, lo=0, lo_open=True)
    s["spin"] = _range(t.raw("spin"), "search.spin", origin, lo=0, hi=1, hi_open=True)
    s["min_match"] = t.number("min_match", 0.95, lo=0.5, hi=1, hi_open=True)
    bank = t.string("bank", None)
    if bank is None:
        s["bank"] = s["bank_sha256"] = None
        s["template_overtones"] = _int_list(t.raw("template_overtones", [0]),
                                            "search.template_overtones", origin, 0, 7)
    else:
        path = _resolve(bank, base)
        if not path.is_file():
            raise InputError(f"'search.bank' in {origin} names a file that does not exist: "
                             f"{path}.")
        s["bank"], s["bank_sha256"] = str(path), file_sha256(path)
        # None: the bank's own overtone count (the worker reads it and checks a given one)
        value = t.raw("template_overtones", None)
        s["template_overtones"] = None if value is None else _int_list(
            value, "search.template_overtones", origin, 0, 7)
        if s["template_overtones"] is not None and len(s["template_overtones"]) != 1:
            raise InputError(f"'search.template_overtones' in {origin} must be omitted or one "
                             f"value with 'search.bank' (a bank has one overtone count).")
    # The search engine's settings; the defaults are those of `ringsearch search`.
    s["snr_threshold"] = t.number("snr_threshold", 5.0, lo=0, lo_open=True)
    s["veto"] = t.boolean("veto", True)
    s["veto_bins"] = t.number("veto_bins", 8, lo=2, hi=1000, integer=True)
    s["veto_domain"] = t.string("veto_domain", "time", choices=("time", "frequency"))
    s["tolerance_s"] = t.number("tolerance_s", 0.01, lo=0, hi=1)
    s["cluster_window_s"] = t.number("cluster_window_s", None, lo=0, lo_open=True)
    s["match_window_s"] = t.number("match_window_s", 0.01, lo=0)
    # "at-times": injection chunks are searched only around each injection and the
    # background comes from searching the data without injections once; "full":
    # every chunk is searched whole, with its own time slides (for checking)
    s["mode"] = t.string("mode", "at-times", choices=("at-times", "full"))
    s["f_high"] = t.number("f_high", None, lo=0, lo_open=True)
    s["max_templates"] = t.number("max_templates", 20000, lo=1, integer=True)
    t.finish()
    return s


def _read_threshold(t: _Table, origin: str) -> dict:
    has_snr, has_far = t.has("snr"), t.has("far_per_year")
    if has_snr == has_far:
        raise InputError(f"'threshold' in {origin} needs exactly one of 'threshold.snr' "
                         f"or 'threshold.far_per_year'.")
    th: dict[str, Any] = {}
    if has_snr:
        th["snr"] = t.number("snr", lo=0, lo_open=True)
        th["far_per_year"] = None
    else:
        th["snr"] = None
        th["far_per_year"] = t.number("far_per_year", lo=0, lo_open=True)
    th["slides"] = t.number("slides", 20, lo=0, hi=100000, integer=True)
    # None: chosen by the search engine (longer than the coincidence window, the
    # longest template and the clustering window)
    th["slide_step_s"] = t.number("slide_step_s", None, lo=0, lo_open=True)
    # background searched once (search.mode = "at-times"): enough synthetic noise-only
    # data for this relative standard error of the FAR at the threshold, or a given
    # amount of background time, capped at max_background_chunks
    th["background_precision"] = t.number("background_precision", 0.3, lo=0, lo_open=True,
                                          hi=1)
    th["background_s"] = t.number("background_s", None, lo=0, lo_open=True)
    th["max_background_chunks"] = t.number("max_background_chunks", 200, lo=1, hi=100000,
                                           integer=True)
    t.finish()
    return th


def _read_report(t: _Table, origin: str) -> dict:
    r: dict[str, Any] = {}
    for name in ("snr_bins", "distance_bins"):
        value = t.raw(name, 10)
        if isinstance(value, int) and not isinstance(value, bool):
            if value < 1 or value > 200:
                raise InputError(f"'report.{name}' in {origin} must be between 1 and 200 "
                                 f"bins, not {value}.")
            r[name] = value
        elif isinstance(value, list) and len(value) >= 2:
            edges = [_check_number(v, f"report.{name}", origin, lo=0) for v in value]
            if any(b <= a for a, b in zip(edges, edges[1:], strict=False)):
                raise InputError(f"'report.{name}' in {origin} must be increasing bin "
                                 f"edges, not {value!r}.")
            r[name] = edges
        else:
            raise InputError(f"'report.{name}' in {origin} must be a number of bins or a "
                             f"list of at least two edges.")
    r["confidence"] = t.number("confidence", 0.9, lo=0.5, hi=1, hi_open=True)
    r["ci_method"] = t.string("ci_method", "wilson", choices=("wilson", "clopper-pearson"))
    t.finish()
    return r


#: Jeffreys' "substantial" evidence, log10 B > 1/2 (Jeffreys, Theory of Probability,
#: 3rd ed. 1961, appendix B -- # common practice); the analysis layer's default too.
DEFAULT_LOG10_BAYES_THRESHOLD = 0.5


def _read_overtones(t: _Table, origin: str, search: dict) -> dict | None:
    """The optional ``[overtones]`` table: overtone-count evidence per injection.

    Returns None when evidence is disabled (the default), so that a campaign
    without the table keeps the configuration hash it always had.  The keys
    are validated even when disabled.
    """
    from ringsearch.analysis.posterior import SNR_PRIOR

    ev: dict[str, Any] = {"enabled": t.boolean("enabled", False)}
    ev["max_overtones"] = t.number("max_overtones", 2, lo=1, hi=7, integer=True)
    ev["log10_bayes_threshold"] = t.number("log10_bayes_threshold",
                                           DEFAULT_LOG10_BAYES_THRESHOLD, lo=-10, hi=100)
    grid = t.raw("grid", [15, 15])
    if isinstance(grid, int) and not isinstance(grid, bool):
        grid = [grid, grid]
    if not isinstance(grid, list) or len(grid) != 2:
        raise InputError(f"'overtones.grid' in {origin} must be [n_mass, n_spin], "
                         f"not {grid!r}.")
    ev["grid"] = [_check_number(g, "overtones.grid", origin, lo=3, hi=400, integer=True)
                  for g in grid]
    ev["mass"] = _range(t.raw("mass", list(search["mass"])), "overtones.mass", origin,
                        lo=0, lo_open=True)
    ev["spin"] = _range(t.raw("spin", list(search["spin"])), "overtones.spin", origin,
                        lo=0, hi=1, hi_open=True)
    for name in ("mass", "spin"):
        if ev["enabled"] and ev[name][0] >= ev[name][1]:
            raise InputError(f"'overtones.{name}' in {origin} must be a range with low below "
                             f"high, not {ev[name]!r} (it defaults to 'search.{name}'; set it "
                             f"when the search box is a single point).")
    ev["start_offset_ms"] = t.number("start_offset_ms", 0.0, lo=-100, hi=100)
    ev["duration_s"] = t.number("duration_s", None, lo=0.005, hi=4.0)
    ev["snr_prior"] = _range(t.raw("snr_prior", list(SNR_PRIOR)), "overtones.snr_prior", origin,
                             lo=0, lo_open=True)
    if ev["snr_prior"][0] >= ev["snr_prior"][1]:
        raise InputError(f"'overtones.snr_prior' in {origin} must be a range with low below "
                         f"high, not {ev['snr_prior']!r}.")
    ev["network"] = t.string("network", "independent", choices=("independent", "coherent"))
    t.finish()
    return ev if ev["enabled"] else None


def spec_from_dict(raw: dict, origin: str = "<dict>", base: str | Path = ".",
                   text: str = "") -> CampaignSpec:
    """Validate a campaign given as a nested dict (the parsed TOML).

    Parameters
    ----------
    raw : dict
        The campaign as parsed from TOML.
    origin : str
        Name used in error messages (usually the file path).
    base : path
        Folder against which relative data file paths are resolved.
    text : str
        Original TOML text, kept for the report.

    Returns
    -------
    CampaignSpec

    Examples
    --------
    >>> spec = spec_from_dict({
    ...     "campaign": {"seed": 1},
    ...     "data": {"source": "synthetic", "detectors": ["H1"]},
    ...     "injections": {"count": 10, "mass": 60, "spin": 0.7,
    ...                    "loudness": {"by": "snr", "snr": 8}},
    ...     "search": {"mass": [50, 70], "spin": [0.6, 0.8]},
    ...     "threshold": {"snr": 6}})
    >>> spec.injections["count"], spec.detectors
    (10, ['H1'])
    """
    top = _Table(raw, "", origin)
    camp = top.sub("campaign", {})
    config: dict[str, Any] = {"campaign": {}}
    config["campaign"]["name"] = camp.string("name", Path(origin).stem)
    config["campaign"]["seed"] = camp.number("seed", lo=0, hi=2**63 - 1, integer=True)
    config["campaign"]["description"] = camp.string("description", "")
    camp.finish()
    base = Path(base)
    config["data"] = _read_data(top.sub("data"), origin, base)
    config["injections"] = _read_injections(top.sub("injections"), origin, base,
                                            config["data"])
    config["search"] = _read_search(top.sub("search"), origin, base)
    config["threshold"] = _read_threshold(top.sub("threshold"), origin)
    config["report"] = _read_report(top.sub("report", {}), origin)
    overtones = _read_overtones(top.sub("overtones", {}), origin, config["search"])
    if overtones is not None:
        config["overtones"] = overtones
    top.finish()
    _cross_checks(config, origin)
    canonical = json.dumps(config, sort_keys=True, separators=(",", ":"))
    digest = hashlib.sha256(canonical.encode()).hexdigest()
    return CampaignSpec(config=config, config_hash=digest, source=origin, text=text)


def _cross_checks(config: dict, origin: str) -> None:
    data, inj, search, th = (config[k] for k in ("data", "injections", "search", "threshold"))
    if search["f_high"] is not None and search["f_high"] > data["sample_rate"] / 2:
        raise InputError(f"'search.f_high' = {search['f_high']} Hz in {origin} is above the "
                         f"Nyquist frequency {data['sample_rate'] / 2} Hz.")
    if data["psd_seglen_s"] > data["chunk_s"]:
        raise InputError(f"'data.psd_seglen_s' = {data['psd_seglen_s']} s in {origin} is longer "
                         f"than a chunk ('data.chunk_s' = {data['chunk_s']} s).")
    if "file" in inj:
        if data["reuse"] != 1:
            raise InputError(f"'data.reuse' in {origin} must be 1 with 'injections.file' "
                             f"(each listed injection is placed once, at its own time).")
        if data.get("duration_s") is not None:
            raise InputError(f"'data.duration_s' in {origin} cannot be given with "
                             f"'injections.file' (synthetic chunks are laid out around the "
                             f"listed injections).")
    usable = data["chunk_s"] - 2 * data["pad_s"]
    if inj["spacing_s"] > usable:
        raise InputError(f"'injections.spacing_s' = {inj['spacing_s']} in {origin} is longer "
                         f"than the usable part of a chunk ({usable} s).")
    if th["far_per_year"] is not None:
        if len(data["detectors"]) < 2:
            raise InputError(f"'threshold.far_per_year' in {origin} needs at least two "
                             f"detectors for time-slide background; use 'threshold.snr'.")
        if th["slides"] < 1:
            raise InputError(f"'threshold.slides' in {origin} must be at least 1 with "
                             f"'threshold.far_per_year'.")


def load_spec(path: str | Path) -> CampaignSpec:
    """Read and validate a campaign TOML file.

    Parameters
    ----------
    path : path
        The campaign file.

    Returns
    -------
    CampaignSpec

    Raises
    ------
    InputError
        If the file is missing, is not valid TOML, or any key or value is wrong.

    Examples
    --------
    >>> spec = load_spec("injections/quick.toml")  # doctest: +SKIP
    >>> spec.config_hash[:8]  # doctest: +SKIP
    '3f1c...'
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(f"campaign file {path} does not exist.")
    text = path.read_text()
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"campaign file {path} is not valid TOML: {exc}.") from None
    return spec_from_dict(raw, origin=str(path), base=path.parent, text=text)
