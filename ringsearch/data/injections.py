"""Injection lists: the table of ringdowns to inject, its checks, files and sources.

An *injection list* has one row per Kerr ringdown.  ``ringsearch inject
--injections FILE`` adds every row to strain files, and a campaign file with
``[injections] file = "list.csv"`` uses the rows instead of drawing them; a
campaign's drawn plan is a table of the same schema.  The columns (names as
in the file, CSV or Parquet):

=====================  ======  ==========  ==============================================
column                 unit    default     meaning
=====================  ======  ==========  ==============================================
``injection_id``       --      0..n-1      whole number >= 0, unique
``gps``                s       required    GPS time of the ringdown start at the geocentre
``mass``               Msun    required    remnant mass, detector frame, > 0
``spin``               --      required    remnant spin, 0 <= spin <= 0.999 (QNM table)
``injected_overtones`` --      required    N, the highest (2,2,n) overtone, 0..7
``ratio_1..ratio_N``   --      1           ``|A_n / A_0|`` at the start, >= 0
``phase_0``            rad     0           phase of (2,2,0); the azimuth is phase_0 / 2
``phase_1..phase_N``   rad     0           ``arg(A_n / A_0)``
``ra``                 rad     required    right ascension, 0 to 2 pi
``dec``                rad     required    declination, -pi/2 to pi/2
``inclination``        rad     required    spin axis to line of sight, 0 to pi
``polarization``       rad     required    polarisation angle, 0 to 2 pi
``target_snr``         --      --          network optimal SNR of the sampled signal, > 0
``distance_mpc``       Mpc     --          luminosity distance, > 0 (with ``epsilon``)
``epsilon``            --      --          mass fraction radiated in (2,2,0), in (0, 1)
=====================  ======  ==========  ==============================================

Each row sets its loudness in exactly one way: ``target_snr``, or
``distance_mpc`` with ``epsilon`` (a list may mix rows of both kinds; the
other kind's cells are left blank).  The columns ``ratio_1 .. ratio_N`` must
exist up to the largest N of the list; a blank ratio cell means 1 and a blank
phase cell 0.  Any other column is refused.  Rows are counted from 1 (the
first row after a CSV header); CSV lines starting with ``#`` are comments.

:func:`check_injection_table` validates a table and returns it normalised:
defaults filled, ``ratio_k`` and ``phase_k`` present for every k up to the
largest overtone (or the largest such column given), the loudness columns of
the kinds used, sorted by ``injection_id``, ids as int64 and values as
float64.  :func:`make_sources` turns rows into
:class:`~ringsearch.physics.ringdown.RingdownSource` objects, scaling
``target_snr`` rows to their SNR with :func:`ringsearch.data.inject.signal_snr`
(the optimal SNR of the sampled signal, exactly as injected).
"""

from __future__ import annotations

import math
import os
import re
from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from ringsearch.errors import InputError, reason

if TYPE_CHECKING:
    from ringsearch.physics.ringdown import RingdownSource

__all__ = ["COLUMNS", "read_injection_table", "check_injection_table",
           "write_injection_table", "source_from_row", "make_sources"]

#: Highest overtone a list may ask for (``ringsearch.physics.ringdown.MAX_OVERTONE``).
MAX_OVERTONE = 7

#: Columns of the schema other than ``ratio_k`` / ``phase_k`` (k >= 1): unit and default.
COLUMNS: dict[str, tuple[str, str]] = {
    "injection_id": ("", "0..n-1"),
    "gps": ("s", "required"),
    "mass": ("Msun", "required"),
    "spin": ("", "required"),
    "injected_overtones": ("", "required"),
    "phase_0": ("rad", "0"),
    "ra": ("rad", "required"),
    "dec": ("rad", "required"),
    "inclination": ("rad", "required"),
    "polarization": ("rad", "required"),
    "target_snr": ("", "one loudness kind"),
    "distance_mpc": ("Mpc", "one loudness kind"),
    "epsilon": ("", "with distance_mpc"),
}

_REQUIRED = ("gps", "mass", "spin", "injected_overtones", "ra", "dec", "inclination",
             "polarization")
_ANGLES = (("ra", 0.0, 2 * math.pi, "0 to 2 pi"), ("dec", -math.pi / 2, math.pi / 2,
                                                    "-pi/2 to pi/2"),
           ("inclination", 0.0, math.pi, "0 to pi"),
           ("polarization", 0.0, 2 * math.pi, "0 to 2 pi"))
_MODE_COLUMN = re.compile(r"^(ratio|phase)_([0-9]+)$")

#: Reference distance and energy fraction of ``target_snr`` rows before scaling.
SNR_ROW_DISTANCE_MPC = 100.0
SNR_ROW_EPSILON = 0.01


def _suffix_kind(path: Path, what: str) -> str:
    suffix = path.suffix.lower()
    if suffix == ".csv":
        return "csv"
    if suffix in (".parquet", ".pq"):
        return "parquet"
    raise InputError(f"{what} {path} must end in .csv or .parquet, not {suffix or 'nothing'!r}.")


def read_injection_table(path: str | os.PathLike) -> pd.DataFrame:
    """Read an injection list (CSV or Parquet, by suffix), check it and return it normalised.

    Parameters
    ----------
    path : path
        ``.csv`` (lines starting with ``#`` are comments) or ``.parquet``.

    Returns
    -------
    pandas.DataFrame
        The validated table (see :func:`check_injection_table`).

    Raises
    ------
    InputError
        If the file is missing or unreadable, or any column or value is wrong
        (one sentence naming the file, the row and the column).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "list.csv"
    >>> _ = path.write_text("gps,mass,spin,injected_overtones,ratio_1,ra,dec,inclination,"
    ...                     "polarization,target_snr\\n"
    ...                     "1000000010.0,65,0.7,1,0.8,1.0,0.3,0.5,0.2,12\\n")
    >>> table = read_injection_table(path)
    >>> table[["injection_id", "ratio_1", "phase_1", "target_snr"]].to_dict("records")
    [{'injection_id': 0, 'ratio_1': 0.8, 'phase_1': 0.0, 'target_snr': 12.0}]
    """
    path = Path(path)
    kind = _suffix_kind(path, "injection list")
    if not path.is_file():
        raise InputError(f"injection list {path} does not exist.")
    try:
        if kind == "csv":
            frame = pd.read_csv(path, comment="#", skipinitialspace=True)
        else:
            frame = pd.read_parquet(path)
    except pd.errors.EmptyDataError:
        raise InputError(f"injection list {path} is empty.") from None
    except Exception as exc:  # the readers raise many kinds; the file is the problem
        raise InputError(f"injection list {path} cannot be read as {kind.upper()} "
                         f"({reason(exc)}).") from None
    frame.columns = [str(c).strip() for c in frame.columns]
    return check_injection_table(frame, origin=str(path))


def _column_error(col: str, row: int, origin: str, problem: str) -> InputError:
    return InputError(f"column '{col}' of row {row + 1} in {origin} {problem}.")


def _as_float(frame: pd.DataFrame, col: str, origin: str) -> np.ndarray:
    """The column as float64 (blank cells NaN); text that is not a number is an error."""
    series = frame[col]
    if pd.api.types.is_bool_dtype(series):
        raise InputError(f"column '{col}' in {origin} holds true/false values, not numbers.")
    if pd.api.types.is_numeric_dtype(series):
        return series.to_numpy(dtype=float, na_value=np.nan)
    text = series.astype("string").str.strip()
    blank = (text.fillna("") == "").to_numpy(dtype=bool)
    values = pd.to_numeric(text.mask(blank), errors="coerce")
    bad = values.isna().to_numpy(dtype=bool) & ~blank
    if bad.any():
        i = int(np.argmax(bad))
        raise _column_error(col, i, origin, f"holds {series.iloc[i]!r}, which is not a number")
    return values.to_numpy(dtype=float, na_value=np.nan)


def _first(mask: np.ndarray) -> int | None:
    return int(np.argmax(mask)) if mask.any() else None


def _check_range(values: np.ndarray, col: str, origin: str, lo: float | None, hi: float | None,
                 *, lo_open: bool = False, hi_open: bool = False, what: str = "") -> None:
    """Every cell finite and inside the bounds (blank cells must have been handled)."""
    i = _first(np.isnan(values))
    if i is not None:
        raise _column_error(col, i, origin, "is empty")
    i = _first(~np.isfinite(values))
    if i is not None:
        raise _column_error(col, i, origin, f"is {values[i]:g}, which is not finite")
    bad = np.zeros(values.size, bool)
    if lo is not None:
        bad |= (values <= lo) if lo_open else (values < lo)
    if hi is not None:
        bad |= (values >= hi) if hi_open else (values > hi)
    i = _first(bad)
    if i is not None:
        if not what:
            if hi is None:
                what = f"{'>' if lo_open else '>='} {lo:g}"
            else:
                what = f"in {'(' if lo_open else '['}{lo:g}, {hi:g}{')' if hi_open else ']'}"
        raise _column_error(col, i, origin, f"is {values[i]:g} but must be {what}")


def _whole(values: np.ndarray, col: str, origin: str, lo: int, hi: int | None) -> np.ndarray:
    _check_range(values, col, origin, lo, hi,
                 what=f"a whole number from {lo} to {hi}" if hi is not None
                 else f"a whole number >= {lo}")
    i = _first(values != np.round(values))
    if i is not None:
        raise _column_error(col, i, origin, f"is {values[i]:g}, not a whole number")
    return values.astype(np.int64)


def check_injection_table(frame: pd.DataFrame, origin: str = "<table>") -> pd.DataFrame:
    """Check an injection table in memory and return it normalised.

    Parameters
    ----------
    frame : pandas.DataFrame
        One row per ringdown, columns as in the module docstring.
    origin : str
        Name of the table in error messages (a file path, or a description
        such as ``"the injections drawn for quick.toml"``).

    Returns
    -------
    pandas.DataFrame
        A new table: defaults filled, ``ratio_k`` / ``phase_k`` for k = 1..K
        (K the largest overtone or the largest such column given), only the
        loudness columns of the kinds used (``target_snr``; ``distance_mpc``
        and ``epsilon``; NaN in rows of the other kind), sorted by
        ``injection_id`` with a fresh index; ``injection_id`` and
        ``injected_overtones`` int64, everything else float64.

    Raises
    ------
    InputError
        One sentence naming ``origin``, the row (counted from 1) and the column.

    Examples
    --------
    >>> rows = pd.DataFrame({"gps": [2e9 + 4, 2e9], "mass": [60.0, 70.0], "spin": 0.7,
    ...                      "injected_overtones": [0, 2], "ratio_1": 1.5, "ratio_2": [None, 0.5],
    ...                      "ra": 1.0, "dec": 0.2, "inclination": 0.4, "polarization": 0.1,
    ...                      "distance_mpc": 400.0, "epsilon": 0.02, "injection_id": [7, 3]})
    >>> table = check_injection_table(rows)
    >>> table["injection_id"].tolist(), table["ratio_2"].tolist()
    ([3, 7], [0.5, 1.0])
    >>> try:
    ...     check_injection_table(rows.assign(spin=[0.5, 1.0]), "list.csv")
    ... except InputError as exc:
    ...     print(exc)
    column 'spin' of row 2 in list.csv is 1 but must be in [0, 1).
    """
    if not isinstance(frame, pd.DataFrame):
        raise InputError(f"the injection table {origin} must be a table (pandas DataFrame), "
                         f"not {type(frame).__name__}.")
    names = [str(c) for c in frame.columns]
    seen: set[str] = set()
    k_max = 0
    for name in names:
        match = _MODE_COLUMN.match(name)
        dup = re.match(r"^(.+)\.[0-9]+$", name)  # pandas renames a repeated CSV header
        if name in seen or (dup and dup.group(1) in names):
            col = dup.group(1) if dup and dup.group(1) in names else name
            raise InputError(f"column '{col}' appears twice in {origin}.")
        seen.add(name)
        if name in COLUMNS:
            continue
        if match and 1 <= int(match.group(2)) <= MAX_OVERTONE \
                and match.group(2) == str(int(match.group(2))):
            k_max = max(k_max, int(match.group(2)))
            continue
        raise InputError(
            f"unknown column '{name}' in {origin} (known: {', '.join(COLUMNS)}, "
            f"ratio_1..ratio_{MAX_OVERTONE} and phase_1..phase_{MAX_OVERTONE}).")
    frame = frame.set_axis(names, axis=1)
    n = len(frame)
    if n == 0:
        raise InputError(f"the injection table {origin} has no rows.")
    for col in _REQUIRED:
        if col not in frame:
            raise InputError(f"the injection table {origin} has no column '{col}' "
                             f"({COLUMNS[col][0] or 'no unit'}, required).")
    values = {c: _as_float(frame, c, origin) for c in names}
    out: dict[str, np.ndarray] = {}
    if "injection_id" in values:
        ids = _whole(values["injection_id"], "injection_id", origin, 0, None)
        _, first, counts = np.unique(ids, return_index=True, return_counts=True)
        if (counts > 1).any():
            dup_id = int(ids[first[np.argmax(counts > 1)]])
            rows = np.flatnonzero(ids == dup_id)
            raise _column_error("injection_id", int(rows[1]), origin,
                                f"repeats the id {dup_id} of row {rows[0] + 1}")
    else:
        ids = np.arange(n, dtype=np.int64)
    out["injection_id"] = ids
    _check_range(values["gps"], "gps", origin, 0.0, None)
    out["gps"] = values["gps"]
    _check_range(values["mass"], "mass", origin, 0.0, None, lo_open=True)
    out["mass"] = values["mass"]
    n_over = _whole(values["injected_overtones"], "injected_overtones", origin, 0, MAX_OVERTONE)
    from ringsearch.physics.qnm import spin_range

    spin = values["spin"]
    _check_range(spin, "spin", origin, 0.0, 1.0, hi_open=True)
    for k in np.unique(n_over):
        hi = spin_range(2, 2, int(k))[1]
        _check_range(np.where(n_over == k, spin, 0.0), "spin", origin, 0.0, hi,
                     what=f"in [0, {hi:g}] (the QNM table's range for (2,2,n) modes)")
    out["spin"] = spin
    out["injected_overtones"] = n_over
    n_top = int(n_over.max())
    for k in range(1, n_top + 1):
        if f"ratio_{k}" not in values:
            row = int(np.argmax(n_over >= k))
            raise InputError(f"the injection table {origin} has no column 'ratio_{k}' but row "
                             f"{row + 1} has injected_overtones = {n_over[row]} (give "
                             f"|A_n/A_0| for n = 1..N; a blank cell means 1).")
    phase0 = values.get("phase_0", np.zeros(n))
    phase0 = np.where(np.isnan(phase0), 0.0, phase0)
    _check_range(phase0, "phase_0", origin, None, None)
    out["phase_0"] = phase0
    for k in range(1, max(k_max, n_top) + 1):
        ratio = values.get(f"ratio_{k}", np.ones(n))
        ratio = np.where(np.isnan(ratio), 1.0, ratio)
        _check_range(ratio, f"ratio_{k}", origin, 0.0, None)
        phase = values.get(f"phase_{k}", np.zeros(n))
        phase = np.where(np.isnan(phase), 0.0, phase)
        _check_range(phase, f"phase_{k}", origin, None, None)
        out[f"ratio_{k}"], out[f"phase_{k}"] = ratio, phase
    for col, lo, hi, text in _ANGLES:
        _check_range(values[col], col, origin, lo, hi, what=f"from {text} rad")
        out[col] = values[col]
    out.update(_loudness(values, n, origin))
    table = pd.DataFrame(out)
    return table.sort_values("injection_id", kind="stable").reset_index(drop=True)


def _loudness(values: dict[str, np.ndarray], n: int, origin: str) -> dict[str, np.ndarray]:
    if not any(c in values for c in ("target_snr", "distance_mpc", "epsilon")):
        raise InputError(f"the injection table {origin} has no loudness column: give "
                         f"'target_snr', or 'distance_mpc' with 'epsilon'.")
    nan = np.full(n, np.nan)
    snr, dist, eps = (values.get(c, nan) for c in ("target_snr", "distance_mpc", "epsilon"))
    has_snr, has_dist, has_eps = ~np.isnan(snr), ~np.isnan(dist), ~np.isnan(eps)
    i = _first(has_snr & (has_dist | has_eps))
    if i is not None:
        other = "distance_mpc" if has_dist[i] else "epsilon"
        raise InputError(f"row {i + 1} in {origin} gives both loudness kinds, columns "
                         f"'target_snr' and '{other}' (give one of them).")
    i = _first(~has_snr & ~has_dist & ~has_eps)
    if i is not None:
        raise InputError(f"row {i + 1} in {origin} gives no loudness: fill column "
                         f"'target_snr', or 'distance_mpc' with 'epsilon'.")
    i = _first(has_dist & ~has_eps)
    if i is not None:
        raise _column_error("epsilon", i, origin, "is empty but 'distance_mpc' needs it "
                            "(the fraction of the mass radiated in (2,2,0))")
    i = _first(has_eps & ~has_dist)
    if i is not None:
        raise _column_error("distance_mpc", i, origin, "is empty but 'epsilon' is given")
    out = {}
    if has_snr.any():
        _check_range(np.where(has_snr, snr, 1.0), "target_snr", origin, 0.0, None,
                     lo_open=True)
        out["target_snr"] = snr
    if has_dist.any():
        _check_range(np.where(has_dist, dist, 1.0), "distance_mpc", origin, 0.0, None,
                     lo_open=True)
        _check_range(np.where(has_eps, eps, 0.5), "epsilon", origin, 0.0, 1.0,
                     lo_open=True, hi_open=True)
        out["distance_mpc"], out["epsilon"] = dist, eps
    return out


def write_injection_table(frame: pd.DataFrame, path: str | os.PathLike) -> Path:
    """Check ``frame`` and write it, normalised, as CSV or Parquet (by suffix), atomically.

    Parameters
    ----------
    frame : pandas.DataFrame
        An injection table (see :func:`check_injection_table`).
    path : path
        ``.csv`` or ``.parquet``; appears whole or not at all.

    Returns
    -------
    pathlib.Path

    Examples
    --------
    >>> import tempfile, pathlib
    >>> rows = pd.DataFrame({"gps": [2e9], "mass": [60.0], "spin": [0.7],
    ...                      "injected_overtones": [0], "ra": 1.0, "dec": 0.2,
    ...                      "inclination": 0.4, "polarization": 0.1, "target_snr": 9.0})
    >>> path = write_injection_table(rows, pathlib.Path(tempfile.mkdtemp()) / "l.parquet")
    >>> read_injection_table(path).equals(check_injection_table(rows))
    True
    """
    from ringsearch.files import atomic_path

    path = Path(path)
    kind = _suffix_kind(path, "injection list")
    table = check_injection_table(frame, origin=str(path))
    with atomic_path(path) as tmp:
        if kind == "csv":
            table.to_csv(tmp, index=False)
        else:
            table.to_parquet(tmp, index=False, engine="pyarrow")
    return path


def _cell(row: Mapping[str, Any], name: str, default: float | None = None) -> float | None:
    value = row.get(name, default)
    if value is None:
        return default
    value = float(value)
    return default if math.isnan(value) else value


def source_from_row(row: Mapping[str, Any]) -> RingdownSource:
    """The :class:`~ringsearch.physics.ringdown.RingdownSource` of one row, unscaled.

    A ``distance_mpc`` row gets its distance and ``epsilon``; a
    ``target_snr`` row is built at 100 Mpc with epsilon 0.01 (scale it with
    :func:`make_sources`).  The (2,2) phase ``phase_0`` is applied as the
    azimuth ``phase_0 / 2`` of the observer around the spin axis.

    Parameters
    ----------
    row : mapping
        One row of a checked table (a dict, or a pandas Series).

    Returns
    -------
    RingdownSource

    Examples
    --------
    >>> src = source_from_row({"gps": 1e9, "mass": 65.0, "spin": 0.7,
    ...     "injected_overtones": 1, "ratio_1": 0.5, "phase_0": 1.0, "ra": 1.0, "dec": 0.2,
    ...     "inclination": 0.4, "polarization": 0.1, "target_snr": 10.0})
    >>> [m.label for m in src.modes], src.distance, src.azimuth
    (['(2,2,0)', '(2,2,1)'], 100.0, 0.5)
    """
    from ringsearch.physics.ringdown import RingdownSource, kerr_modes

    n = int(row["injected_overtones"])
    modes = kerr_modes(n, [_cell(row, f"ratio_{k}", 1.0) for k in range(1, n + 1)],
                       [_cell(row, f"phase_{k}", 0.0) for k in range(1, n + 1)])
    distance = _cell(row, "distance_mpc")
    by_distance = distance is not None
    return RingdownSource(
        float(row["mass"]), float(row["spin"]),
        distance=distance if by_distance else SNR_ROW_DISTANCE_MPC,
        epsilon=_cell(row, "epsilon") if by_distance else SNR_ROW_EPSILON,
        modes=modes, t0=float(row["gps"]), ra=float(row["ra"]), dec=float(row["dec"]),
        psi=float(row["polarization"]), inclination=float(row["inclination"]),
        azimuth=_cell(row, "phase_0", 0.0) / 2.0)  # the (2,2) phase is 2 x azimuth


def make_sources(table: pd.DataFrame, psds: Mapping[str, Any], sample_rate: float,
                 f_low: float, f_high: float | None
                 ) -> tuple[list[RingdownSource], pd.DataFrame]:
    """One source per row, scaled to ``target_snr`` where asked, and its per-row outputs.

    Parameters
    ----------
    table : pandas.DataFrame
        A checked injection table (:func:`check_injection_table`); extra
        columns, such as a campaign's ``chunk``, are ignored.
    psds : mapping of detector name to FrequencySeries
        One-sided PSD per detector, in the order that makes the first one the
        reference for ``arrival_gps``.
    sample_rate : float
        Hz, the rate of the strain the signals go into.
    f_low, f_high : float
        Band of the SNR integral in Hz (``f_high`` None: Nyquist).

    Returns
    -------
    sources : list of RingdownSource
        In the order of the rows; strain scales as 1/distance, so a
        ``target_snr`` row's distance is the one giving that network SNR.
    outputs : pandas.DataFrame
        Per row: ``injection_id``, ``arrival_gps`` (at the first detector),
        ``arrival_gps_<DET>`` and ``snr_opt_<DET>`` for each detector,
        ``network_snr``, ``f_0_hz``, ``tau_0_s`` (the (2,2,0) mode), and
        ``implied_distance_mpc`` (``target_snr`` rows: the distance at epsilon
        0.01) and/or ``mass_source`` (``distance_mpc`` rows, Planck18), NaN in
        rows of the other kind.  Every SNR is that of the sampled signal
        (:func:`ringsearch.data.inject.signal_snr` with ``sample_rate``).

    Raises
    ------
    InputError
        If a mode lies at or above Nyquist, or a ``target_snr`` row has no SNR
        in any detector; the sentence names the injection.

    Examples
    --------
    >>> from gwpy.frequencyseries import FrequencySeries
    >>> psd = FrequencySeries(np.full(8193, 1e-46), df=0.25)
    >>> rows = check_injection_table(pd.DataFrame({"gps": [1e9], "mass": [65.0],
    ...     "spin": [0.7], "injected_overtones": [0], "ra": 1.0, "dec": 0.2,
    ...     "inclination": 0.4, "polarization": 0.1, "target_snr": 12.0}))
    >>> sources, out = make_sources(rows, {"H1": psd, "L1": psd}, 4096.0, 20.0, 1600.0)
    >>> round(float(out["network_snr"][0]), 9), sorted(out.columns)[:3]
    (12.0, ['arrival_gps', 'arrival_gps_H1', 'arrival_gps_L1'])
    """
    from ringsearch.data.inject import signal_snr

    dets = list(psds)
    if not dets:
        raise InputError("make_sources needs the PSD of at least one detector.")
    sources, rows = [], []
    any_snr = any_dist = False
    for r in table.to_dict("records"):
        ident = int(r["injection_id"])
        by_snr = _cell(r, "target_snr") is not None
        try:
            src = source_from_row(r)
            src.check_sample_rate(sample_rate)
        except InputError as exc:
            raise InputError(f"injection {ident} cannot be made ({reason(exc)}).") from None
        snrs = {d: signal_snr(src, d, psds[d], sample_rate, f_low, f_high) for d in dets}
        network = math.sqrt(sum(v * v for v in snrs.values()))
        if by_snr:
            if not network > 0:
                raise InputError(f"injection {ident} has zero SNR in every detector, so it "
                                 f"cannot be scaled to its target_snr.")
            # strain scales as 1/distance at fixed detector-frame mass
            scale = float(r["target_snr"]) / network
            src = src.with_distance(src.distance / scale)
            snrs = {d: v * scale for d, v in snrs.items()}
            network *= scale
        f, tau = src.f_tau()
        arrivals = {d: src.arrival_time(d) for d in dets}
        row = {"injection_id": ident, "arrival_gps": arrivals[dets[0]],
               **{f"arrival_gps_{d}": arrivals[d] for d in dets},
               **{f"snr_opt_{d}": snrs[d] for d in dets},
               "network_snr": network, "f_0_hz": float(f[0]), "tau_0_s": float(tau[0]),
               "implied_distance_mpc": float(src.distance) if by_snr else math.nan,
               "mass_source": math.nan if by_snr else float(src.mass_source)}
        any_snr |= by_snr
        any_dist |= not by_snr
        sources.append(src)
        rows.append(row)
    columns = ["injection_id", "arrival_gps", *(f"arrival_gps_{d}" for d in dets),
               *(f"snr_opt_{d}" for d in dets), "network_snr", "f_0_hz", "tau_0_s"]
    out = pd.DataFrame(rows, columns=[*columns, "implied_distance_mpc", "mass_source"])
    columns += ["implied_distance_mpc"] * any_snr + ["mass_source"] * any_dist
    out = out[columns].astype({"injection_id": np.int64})
    return sources, out
