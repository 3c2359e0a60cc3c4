"""Read detector strain from the files people have, and write synthetic strain.

Supported inputs
----------------
* GWOSC HDF5 event and bulk files (``strain/Strain`` with ``Xstart`` and
  ``Xspacing``; 1 Hz bitmasks ``quality/simple/DQmask`` and
  ``quality/injections/Injmask`` with their ``*Shortnames``; ``meta/Detector``).
* GWF frame files through gwpy, when a frame library is installed (the
  ``frames`` extra).
* Plain text: one column of strain (give ``sample_rate`` and ``gps_start``) or
  two columns ``time strain``.

Several files of one detector are joined into one series; a gap between files
is kept as NaN, never filled.  Data-quality segments come from the GWOSC
bitmasks: a second is analysable when it passes the chosen DQ level and (by
default) carries no hardware injection, and its strain is finite.

The GWOSC HDF5 layout is small and fixed, so it is read with h5py directly:
that gives the strain, both bitmasks, their bit names and the detector in one
pass with one clear error per bad file (gwpy's reader returns the strain and
the masks through separate calls and raises its own, less specific errors).
GWF goes through gwpy, which wraps the frame libraries.
"""

from __future__ import annotations

import math
import os
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ringsearch.data.segments import segments_from_mask
from ringsearch.errors import InputError, reason

if TYPE_CHECKING:
    from gwpy.timeseries import TimeSeries

#: DQ level used when none is given: the data exist and pass the CBC category-1
#: and category-2 checks (GWOSC bit names).  Ringdowns are compact-binary signals,
#: so the CBC categories are the natural ones.
DEFAULT_DQ_LEVEL = "CBC_CAT2"

#: Levels a user may ask for ("NONE" means: only require finite strain).
DQ_LEVELS = ("NONE", "DATA", "CBC_CAT1", "CBC_CAT2", "CBC_CAT3",
             "BURST_CAT1", "BURST_CAT2", "BURST_CAT3")

#: Largest absolute value accepted as strain.  Calibrated strain, including the
#: low-frequency seismic part, stays below ~1e-17; anything above this is in
#: other units (counts, metres, a mis-scaled export).  # common practice
MAX_STRAIN = 1e-12

#: Hardware-injection bits that must be set ("no injection of this kind") for a
#: second to count as injection-free: the transient kinds.
TRANSIENT_INJECTION_BITS = ("NO_CBC_HW_INJ", "NO_BURST_HW_INJ", "NO_DETCHAR_HW_INJ")

_DETECTOR_RE = re.compile(r"^[A-Z][0-9]$")
# GWOSC file names: "H-H1_LOSC_4_V2-1126259446-32.hdf5", "L-L1_GWOSC_4KHZ_R1-...".
_GWOSC_NAME_RE = re.compile(r"^[A-Z]-([A-Z][0-9])_")
_HDF5_SUFFIXES = {".hdf5", ".h5", ".hdf"}
_TEXT_SUFFIXES = {".txt", ".dat", ".csv", ".gz", ".ascii"}


@dataclass
class _FileStrain:
    """One file's strain and its (optional) 1 Hz quality bitmasks."""

    path: Path
    detector: str
    t0: float
    sample_rate: float
    data: np.ndarray  # or _Hdf5Samples when read lazily
    dq_mask: np.ndarray | None = None
    dq_names: list[str] | None = None
    inj_mask: np.ndarray | None = None
    inj_names: list[str] | None = None
    mask_t0: float = 0.0
    mask_dt: float = 1.0
    #: the detector the file itself names (header, channel or GWOSC file name), if any
    recorded: str | None = None

    @property
    def t1(self) -> float:
        return self.t0 + self.data.size / self.sample_rate


# ----------------------------------------------------------------------------- helpers

#: GPS times accepted as a data start: from the GPS epoch (1980) to 1e10 s
#: (year 2296); beyond that float64 cannot keep sub-sample timing.
GPS_MAX = 1e10


def check_gps(value: float, name: str) -> float:
    """``value`` as a float if it is a usable GPS start time, else InputError naming ``name``.

    Examples
    --------
    >>> check_gps(1126259446, "--gps-start")
    1126259446.0
    >>> check_gps(float("nan"), "--gps-start")
    Traceback (most recent call last):
    ringsearch.errors.InputError: --gps-start nan must be a GPS time in [0, 1e+10) s.
    """
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} {value!r} is not a number.") from None
    if not (math.isfinite(v) and 0.0 <= v < GPS_MAX):
        raise InputError(f"{name} {v!r} must be a GPS time in [0, {GPS_MAX:g}) s.")
    return v


def _check_detector(name: str, where: str) -> str:
    name = str(name).strip()
    if not _DETECTOR_RE.match(name):
        raise InputError(f"{where}: detector {name!r} is not a detector name like 'H1' or 'L1'.")
    return name


def detector_from_filename(path: str | os.PathLike) -> str | None:
    """Detector named by a GWOSC-style file name, or None.

    Examples
    --------
    >>> detector_from_filename("H-H1_LOSC_4_V2-1126259446-32.hdf5")
    'H1'
    >>> detector_from_filename("strain.txt") is None
    True
    """
    m = _GWOSC_NAME_RE.match(Path(path).name)
    return m.group(1) if m else None


def _decode(value) -> str:
    if isinstance(value, bytes):
        return value.decode("ascii", "replace")
    if isinstance(value, np.ndarray):
        return _decode(value.item()) if value.shape == () else str(value)
    return str(value)


#: Samples checked at once when a file's strain is read lazily (32 MB of float64).
_CHECK_BLOCK = 1 << 22


def _check_values(data, path: Path) -> None:
    """Reject strain that is all-NaN, all-zero or obviously not in strain units.

    ``data`` is an array or lazily read samples (:class:`_Hdf5Samples`), checked
    block by block so that memory follows the block."""
    peak, any_finite = 0.0, False
    for a in range(0, int(data.size), _CHECK_BLOCK):
        block = np.asarray(data[a:a + _CHECK_BLOCK], float)
        finite = np.isfinite(block)
        if finite.any():
            any_finite = True
            peak = max(peak, float(np.abs(block[finite]).max()))
    if not any_finite:
        raise InputError(f"file {path} holds no finite strain samples (only NaN or inf).")
    if peak == 0.0:
        raise InputError(f"file {path} holds only zeros, not detector strain.")
    if peak > MAX_STRAIN:
        raise InputError(
            f"file {path} holds values up to {peak:.3g}, far above detector strain "
            f"(of order 1e-21); it is not in strain units."
        )


# ----------------------------------------------------------------------------- readers

class _Hdf5Samples:
    """A GWOSC file's strain samples, read from disk slice by slice when indexed."""

    def __init__(self, path: Path, size: int):
        self.path, self.size = path, int(size)

    def __getitem__(self, index: slice) -> np.ndarray:
        import h5py

        try:
            with h5py.File(self.path, "r") as f:
                return np.asarray(f["strain/Strain"][index], dtype=np.float64)
        except (OSError, KeyError, ValueError) as exc:
            raise InputError(f"file {self.path} could not be read again ({reason(exc)}); "
                             "was it changed or removed during the search?") from None


def _read_hdf5(path: Path, detector: str | None, lazy: bool = False) -> _FileStrain:
    import h5py

    try:
        f = h5py.File(path, "r")
    except OSError as exc:
        raise InputError(f"file {path} is not a readable HDF5 file ({reason(exc)}).") from None
    try:
        with f:
            if "strain/Strain" not in f:
                raise InputError(f"file {path} is not a GWOSC strain file "
                                 "(it has no 'strain/Strain' dataset).")
            dset = f["strain/Strain"]
            try:
                t0 = float(dset.attrs["Xstart"])
                dt = float(dset.attrs["Xspacing"])
            except KeyError:
                raise InputError(f"file {path} lacks the Xstart/Xspacing attributes "
                                 "on strain/Strain.") from None
            if not (dt > 0 and math.isfinite(dt) and math.isfinite(t0)):
                raise InputError(f"file {path} has an invalid sample spacing {dt!r}.")
            if dset.ndim != 1:
                raise InputError(f"file {path} holds strain/Strain of shape {dset.shape}; "
                                 "strain must be one-dimensional.")
            data = _Hdf5Samples(path, int(dset.shape[0])) if lazy else \
                np.asarray(dset[()], dtype=np.float64)
            npts = dset.attrs.get("Npoints")
            if npts is not None and int(npts) != data.size:
                raise InputError(f"file {path} is truncated: strain/Strain holds "
                                 f"{data.size} samples, its header says {int(npts)}.")
            meta_det = _decode(f["meta/Detector"][()]) if "meta/Detector" in f else None
            out = _FileStrain(path=path, detector="", t0=t0, sample_rate=1.0 / dt, data=data)
            if "quality/simple/DQmask" in f:
                dq = f["quality/simple/DQmask"]
                out.dq_mask = np.asarray(dq[()], dtype=np.uint32)
                out.mask_t0 = float(dq.attrs.get("Xstart", t0))
                out.mask_dt = float(dq.attrs.get("Xspacing", 1.0))
                if "quality/simple/DQShortnames" in f:
                    out.dq_names = [_decode(x) for x in f["quality/simple/DQShortnames"][()]]
            if "quality/injections/Injmask" in f:
                out.inj_mask = np.asarray(f["quality/injections/Injmask"][()], dtype=np.uint32)
                if "quality/injections/InjShortnames" in f:
                    out.inj_names = [_decode(x)
                                     for x in f["quality/injections/InjShortnames"][()]]
    except InputError:
        raise
    except (OSError, KeyError, ValueError, TypeError) as exc:
        raise InputError(f"file {path} is corrupt or truncated and cannot be read "
                         f"({reason(exc)}).") from None
    out.detector = _resolve_detector(path, detector, meta_det)
    out.recorded = _recorded_detector(path, meta_det)
    return out


def _recorded_detector(path: Path, from_file: str | None) -> str | None:
    """The detector a file names itself (its header or channel, else its GWOSC name)."""
    for cand in (from_file, detector_from_filename(path)):
        if cand and _DETECTOR_RE.match(cand.strip()):
            return cand.strip()
    return None


def _resolve_detector(path: Path, given: str | None, from_file: str | None) -> str:
    if given is not None:
        return _check_detector(given, f"file {path}")
    found = _recorded_detector(path, from_file)
    if found is not None:
        return found
    raise InputError(f"cannot tell which detector recorded file {path}; "
                     "give the detector explicitly (e.g. detector='H1').")


#: Run in a child process before a GWF file is opened in ours: the frame
#: library crashes the interpreter (segmentation fault) on truncated or corrupt
#: frames instead of raising, so a bad file must not be opened in-process first.
_GWF_PROBE = """
import sys
from gwpy.io.gwf import iter_channel_names
from gwpy.timeseries import TimeSeries
names = list(iter_channel_names(sys.argv[1]))
strain = [n for n in names if "STRAIN" in n.upper()] or names
if strain:
    TimeSeries.read(sys.argv[1], strain[0], format="gwf")
"""


def _have_frame_library() -> bool:
    """Whether one of the frame libraries gwpy can use is importable."""
    from importlib import import_module

    for name in ("lalframe", "framel", "LDAStools.frameCPP"):
        try:
            import_module(name)
            return True
        except ImportError:
            continue
    return False


def _probe_gwf(path: Path) -> None:
    """Raise InputError if reading ``path`` crashes the frame library."""
    import subprocess
    import sys

    try:
        result = subprocess.run([sys.executable, "-c", _GWF_PROBE, str(path)],
                                capture_output=True, timeout=300, check=False)
    except subprocess.TimeoutExpired:
        raise InputError(f"GWF frame file {path} could not be read within 5 minutes.") from None
    if result.returncode < 0:
        raise InputError(f"GWF frame file {path} is truncated or corrupt (the frame "
                         "library crashed reading it).")


def _read_gwf(path: Path, detector: str | None) -> _FileStrain:
    if not _have_frame_library():
        raise InputError(
            f"reading the GWF frame file {path} needs a frame library; install the "
            "'frames' extra (pip install 'ringsearch[frames]')."
        )
    _probe_gwf(path)
    try:
        from gwpy.io.gwf import iter_channel_names
        from gwpy.timeseries import TimeSeries

        names = list(iter_channel_names(str(path)))
    except ImportError:
        raise InputError(
            f"reading the GWF frame file {path} needs a frame library; install the "
            "'frames' extra (pip install 'ringsearch[frames]')."
        ) from None
    except Exception as exc:  # frame libraries raise their own exception types
        raise InputError(f"file {path} is not a readable GWF frame file ({reason(exc)}).") from None
    strain = [n for n in names if "STRAIN" in n.upper()] or names
    if detector is not None:
        strain = [n for n in strain if n.startswith(f"{detector}:")] or strain
    if not strain:
        raise InputError(f"frame file {path} holds no strain channel.")
    channel = strain[0]
    try:
        ts = TimeSeries.read(str(path), channel, format="gwf")
    except Exception as exc:
        raise InputError(f"frame file {path} could not be read ({reason(exc)}).") from None
    prefix = channel.split(":", 1)[0] if ":" in channel else None
    det = _resolve_detector(path, detector, prefix)
    return _FileStrain(path=path, detector=det, t0=float(ts.t0.value),
                       sample_rate=float(ts.sample_rate.value),
                       data=np.asarray(ts.value, dtype=np.float64),
                       recorded=_recorded_detector(path, prefix))


def _read_text(path: Path, detector: str | None, sample_rate: float | None,
               gps_start: float | None) -> _FileStrain:
    try:
        table = np.loadtxt(path, comments="#", ndmin=2, delimiter=None)
    except (ValueError, OSError, EOFError, UnicodeDecodeError) as exc:
        raise InputError(f"file {path} is not a text table of numbers ({reason(exc)}).") from None
    if table.size == 0:
        raise InputError(f"file {path} is empty.")
    if table.shape[1] == 1:
        if sample_rate is None or gps_start is None:
            raise InputError(f"text file {path} has one column, so give both its sample "
                             "rate (--sample-rate) and its GPS start (--data-start).")
        data, t0, fs = table[:, 0], check_gps(gps_start, "gps_start"), float(sample_rate)
    elif table.shape[1] == 2:
        times, data = table[:, 0], table[:, 1]
        if times.size < 2:
            raise InputError(f"text file {path} has fewer than two samples.")
        steps = np.diff(times)
        dt = float(np.median(steps))
        if dt <= 0 or np.max(np.abs(steps - dt)) > 1e-3 * dt:
            raise InputError(f"text file {path} has unevenly spaced times in its first column.")
        fs = 1.0 / dt
        if abs(fs - round(fs)) < 1e-6 * fs:
            fs = float(round(fs))
        if sample_rate is not None and abs(float(sample_rate) - fs) > 1e-6 * fs:
            raise InputError(f"text file {path} is sampled at {fs:g} Hz, "
                             f"not the {float(sample_rate):g} Hz given.")
        t0 = float(times[0]) if gps_start is None else check_gps(gps_start, "gps_start")
    else:
        raise InputError(f"text file {path} has {table.shape[1]} columns; expected one "
                         "(strain) or two (time, strain).")
    if not (fs > 0 and math.isfinite(fs)):
        raise InputError(f"sample rate {fs!r} for file {path} must be positive.")
    det = _resolve_detector(path, detector, None)
    return _FileStrain(path=path, detector=det, t0=t0, sample_rate=fs,
                       data=np.ascontiguousarray(data, dtype=np.float64),
                       recorded=_recorded_detector(path, None))


def _looks_like_hdf5(path: Path) -> bool:
    with open(path, "rb") as fh:
        return fh.read(8) == b"\x89HDF\r\n\x1a\n"


def _load_file(path: str | os.PathLike, detector: str | None = None,
               sample_rate: float | None = None, gps_start: float | None = None,
               lazy: bool = False) -> _FileStrain:
    path = Path(path)
    if not path.exists():
        raise InputError(f"strain file {path} does not exist.")
    if path.is_dir():
        raise InputError(f"strain file {path} is a folder, not a file.")
    if path.stat().st_size == 0:
        raise InputError(f"strain file {path} is empty.")
    suffix = path.suffix.lower()
    if suffix in _HDF5_SUFFIXES or (suffix not in _TEXT_SUFFIXES and suffix != ".gwf"
                                    and _looks_like_hdf5(path)):
        out = _read_hdf5(path, detector, lazy)
    elif suffix == ".gwf":
        out = _read_gwf(path, detector)
    else:
        out = _read_text(path, detector, sample_rate, gps_start)
    if out.data.size == 0:
        raise InputError(f"strain file {path} holds no samples.")
    _check_values(out.data, path)
    return out


def _as_paths(paths) -> list[Path]:
    if isinstance(paths, (str, os.PathLike)):
        return [Path(paths)]
    out = [Path(p) for p in paths]
    if not out:
        raise InputError("no strain files were given.")
    return out


def _check_one_detector(files: list[_FileStrain], detector: str | None) -> None:
    """Refuse one forced detector name for files that name different detectors."""
    if detector is None:
        return
    named = sorted({f.recorded for f in files if f.recorded})
    if len(named) > 1:
        raise InputError(f"detector {detector!r} (--detector) was given for files of several "
                         f"detectors ({', '.join(named)}); give it only when all files come "
                         "from one detector.")


def _load_all(paths, detector, sample_rate, gps_start) -> list[_FileStrain]:
    files = [_load_file(p, detector, sample_rate, gps_start) for p in _as_paths(paths)]
    _check_one_detector(files, detector)
    dets = sorted({f.detector for f in files})
    if len(dets) > 1:
        raise InputError(f"the files hold different detectors ({', '.join(dets)}); read each "
                         "detector separately.")
    rates = {f.sample_rate for f in files}
    if len(rates) > 1:
        first = files[0]
        other = next(f for f in files if f.sample_rate != first.sample_rate)
        raise InputError(f"file {other.path} is sampled at {other.sample_rate:g} Hz but file "
                         f"{first.path} at {first.sample_rate:g} Hz; resample one of them first.")
    return sorted(files, key=lambda f: f.t0)


def _offsets(files: list[_FileStrain]) -> list[int]:
    """Each file's first sample on the first file's grid; refuses overlaps and misalignment."""
    fs = files[0].sample_rate
    t0 = files[0].t0
    offsets = []
    for prev, nxt in zip(files, files[1:], strict=False):
        gap = (nxt.t0 - prev.t1) * fs
        if gap < -1e-3:
            raise InputError(f"files {prev.path} and {nxt.path} overlap in time; "
                             "give each stretch of data once.")
    for f in files:
        off = (f.t0 - t0) * fs
        if abs(off - round(off)) > 1e-3:
            raise InputError(f"file {f.path} does not start on the sample grid of file "
                             f"{files[0].path}; its samples are misaligned.")
        offsets.append(int(round(off)))
    return offsets


def _join(files: list[_FileStrain]):
    from gwpy.timeseries import TimeSeries

    fs = files[0].sample_rate
    t0 = files[0].t0
    offsets = _offsets(files)
    n = offsets[-1] + files[-1].data.size
    data = np.full(n, np.nan)
    for off, f in zip(offsets, files, strict=True):
        data[off:off + f.data.size] = f.data
    det = files[0].detector
    out = TimeSeries(data, t0=t0, sample_rate=fs, name=det, channel=f"{det}:STRAIN")
    out.source_files = [str(f.path) for f in files]  # kept for provenance in outputs
    return out


def read_strain(paths: str | os.PathLike | Iterable[str | os.PathLike],
                detector: str | None = None, sample_rate: float | None = None,
                gps_start: float | None = None) -> TimeSeries:
    """Read one detector's strain from one or more files into one series.

    Parameters
    ----------
    paths : path or sequence of paths
        GWOSC HDF5 (``.hdf5``), GWF (``.gwf``, needs the ``frames`` extra) or
        text files (one column: strain; two columns: GPS time, strain), all
        from the same detector and at the same sample rate.
    detector : str, optional
        Detector name such as ``"H1"``; by default taken from the file
        (``meta/Detector``, the frame channel or a GWOSC file name).  Given,
        it overrides the name of every file, and is refused when the files
        name different detectors.
    sample_rate, gps_start : float, optional
        For one-column text files, which carry neither.

    Returns
    -------
    gwpy.timeseries.TimeSeries
        Float64 strain; ``.name`` is the detector and ``.channel`` is
        ``"<det>:STRAIN"``.  Gaps between files are NaN.

    Raises
    ------
    InputError
        A missing, unreadable, truncated, all-NaN or mis-scaled file; files of
        different detectors or sample rates; overlapping files.

    Examples
    --------
    >>> from ringsearch.data.io import read_strain
    >>> h1 = read_strain("H-H1_LOSC_4_V2-1126259446-32.hdf5")  # doctest: +SKIP
    >>> h1.name, h1.sample_rate.value, h1.duration.value        # doctest: +SKIP
    ('H1', 4096.0, 32.0)
    """
    return _join(_load_all(paths, detector, sample_rate, gps_start))


# ----------------------------------------------------------------------------- quality

def finite_segments(strain, min_duration: float = 0.0):
    """Segments of ``strain`` where every sample is finite (no NaN/inf).

    Parameters
    ----------
    strain : gwpy.timeseries.TimeSeries
    min_duration : float
        Drop segments shorter than this many seconds.

    Returns
    -------
    gwpy.segments.SegmentList
        Half-open ``[start, end)`` GPS segments, coalesced.

    Examples
    --------
    >>> import numpy as np
    >>> from gwpy.timeseries import TimeSeries
    >>> x = np.ones(8) * 1e-21; x[4:6] = np.nan
    >>> list(finite_segments(TimeSeries(x, t0=0, sample_rate=2)))
    [Segment(0.0, 2.0), Segment(3.0, 4.0)]
    """
    fs, dt = float(strain.sample_rate.value), float(strain.dt.value)
    segs = segments_from_mask(np.isfinite(np.asarray(strain.value)), float(strain.t0.value), fs)
    # length from the sample count, free of the rounding of GPS-sized segment ends
    return type(segs)(s for s in segs if round((s[1] - s[0]) * fs) * dt >= min_duration)


def _required_bits(level: str, names: list[str] | None, path: Path) -> list[int]:
    """Bit indices that must be set for ``level`` (a GWOSC DQ short name)."""
    if level == "NONE":
        return []
    names = names or list(DQ_LEVELS[1:])
    want = ["DATA"]
    m = re.match(r"^([A-Z]+)_CAT([0-9])$", level)
    if m:
        want += [f"{m.group(1)}_CAT{k}" for k in range(1, int(m.group(2)) + 1)]
    elif level != "DATA":
        want.append(level)
    missing = [w for w in [level, *want] if w not in names]
    if missing:
        raise InputError(f"file {path} has no data-quality bit named {missing[0]} "
                         f"(it has {', '.join(names)}).")
    return [names.index(w) for w in want]


def _mask_segments(mask: np.ndarray, bits: Sequence[int], t0: float, dt: float):
    """Segments of the bitmask samples (each ``dt`` long) with all of ``bits`` set."""
    need = np.uint32(sum(1 << b for b in bits))
    return segments_from_mask((mask & need) == need, t0, 1.0 / dt)


def _file_quality(f: _FileStrain, dq_level: str, injections: str):
    from gwpy.segments import Segment, SegmentList

    segs = SegmentList([Segment(f.t0, f.t1)])
    if f.dq_mask is not None and dq_level != "NONE":
        bits = _required_bits(dq_level, f.dq_names, f.path)
        segs &= _mask_segments(f.dq_mask, bits, f.mask_t0, f.mask_dt)
    if f.inj_mask is not None and injections == "exclude":
        # GWOSC injection bits are "NO_<kind>_HW_INJ": a set bit means no injection.
        # Only transient kinds matter to a transient search; continuous-wave and
        # stochastic hardware injections run for months (e.g. all of O1 in L1).
        names = f.inj_names or _GWOSC_INJ_NAMES
        bits = [names.index(b) for b in TRANSIENT_INJECTION_BITS if b in names]
        segs &= _mask_segments(f.inj_mask, bits, f.mask_t0, f.mask_dt)
    return segs


def _check_level(dq_level: str, injections: str) -> str:
    level = str(dq_level).upper()
    if not re.match(r"^[A-Z0-9_]+$", level):
        raise InputError(f"dq_level {dq_level!r} is not a GWOSC data-quality name such as "
                         f"{DEFAULT_DQ_LEVEL}.")
    if injections not in ("exclude", "keep"):
        raise InputError(f"injections must be 'exclude' or 'keep', not {injections!r}.")
    return level


def read_strain_with_quality(paths, dq_level: str = DEFAULT_DQ_LEVEL,
                             detector: str | None = None, injections: str = "exclude",
                             sample_rate: float | None = None, gps_start: float | None = None):
    """Read strain and the segments where it may be analysed.

    Parameters
    ----------
    paths, detector, sample_rate, gps_start
        As for :func:`read_strain`.
    dq_level : str
        GWOSC data-quality level a second must pass: ``"DATA"``,
        ``"CBC_CAT1"``, ``"CBC_CAT2"`` (default), ``"CBC_CAT3"``,
        ``"BURST_CAT1"`` ... (a category implies the lower ones and DATA), any
        other bit short name in the file, or ``"NONE"``.  Files without
        bitmasks (text, GWF) count as passing.
    injections : {"exclude", "keep"}
        Drop seconds flagged as holding a transient (CBC, burst or detchar)
        hardware injection (default); continuous-wave and stochastic
        injections, which run for months, are not excluded.

    Returns
    -------
    strain : gwpy.timeseries.TimeSeries
    segments : gwpy.segments.SegmentList
        Seconds passing the DQ level, free of hardware injections and of NaN.

    Examples
    --------
    >>> strain, segs = read_strain_with_quality(["H-H1_LOSC_4_V2-1126259446-32.hdf5"])
    ... # doctest: +SKIP
    >>> segs  # doctest: +SKIP
    [Segment(1126259446.0, 1126259478.0)]
    """
    from gwpy.segments import SegmentList

    level = _check_level(dq_level, injections)
    files = _load_all(paths, detector, sample_rate, gps_start)
    strain = _join(files)
    segs = SegmentList()
    for f in files:
        segs |= _file_quality(f, level, injections)
    segs = segs.coalesce() & finite_segments(strain)
    return strain, segs.coalesce()


def analysable_segments(paths, dq_level: str = DEFAULT_DQ_LEVEL, detector: str | None = None,
                        injections: str = "exclude"):
    """Segments of the files that pass ``dq_level``, hold no hardware injection and no NaN.

    See :func:`read_strain_with_quality` for the arguments.

    Examples
    --------
    >>> analysable_segments(["H-H1_LOSC_4_V2-1126259446-32.hdf5"], "CBC_CAT2")
    ... # doctest: +SKIP
    [Segment(1126259446.0, 1126259478.0)]
    """
    return read_strain_with_quality(paths, dq_level, detector, injections)[1]


# ----------------------------------------------------------------------------- writing

_GWOSC_DQ_NAMES = ["DATA", "CBC_CAT1", "CBC_CAT2", "CBC_CAT3",
                   "BURST_CAT1", "BURST_CAT2", "BURST_CAT3"]
_GWOSC_INJ_NAMES = ["NO_CBC_HW_INJ", "NO_BURST_HW_INJ", "NO_DETCHAR_HW_INJ",
                    "NO_CW_HW_INJ", "NO_STOCH_HW_INJ"]


def write_gwosc_hdf5(strain, path: str | os.PathLike, dq_mask: Iterable[int] | None = None,
                     inj_mask: Iterable[int] | None = None, description: str | None = None):
    """Write strain in the GWOSC HDF5 layout, atomically.

    Parameters
    ----------
    strain : gwpy.timeseries.TimeSeries
        Its ``.name`` (or the channel prefix) is stored as ``meta/Detector``.
    path : path
        Output file; appears whole or not at all.
    dq_mask, inj_mask : sequence of int, optional
        1 Hz bitmasks (one value per started second).  By default every DQ bit
        is set for seconds whose strain is all finite (0 otherwise) and every
        ``NO_*_HW_INJ`` bit is set (no hardware injections).

    Returns
    -------
    pathlib.Path

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from ringsearch.data.noise import gaussian_noise, design_psd
    >>> import numpy as np
    >>> ts = gaussian_noise(design_psd(np.arange(0, 2049.0)), 4, 4096, 1)
    >>> out = write_gwosc_hdf5(ts, pathlib.Path(tempfile.mkdtemp()) / "H-H1_SIM-0-4.hdf5")
    >>> float(read_strain(out).duration.value)
    4.0
    """
    import h5py

    from ringsearch.files import atomic_path

    if Path(path).suffix.lower() not in _HDF5_SUFFIXES:
        raise InputError(f"output file {path} must end in .hdf5, .h5 or .hdf (it is written "
                         "as HDF5 and read back by its suffix).")
    if Path(path).is_dir():
        raise InputError(f"output file {path} is an existing folder.")
    data = np.asarray(strain.value, dtype=np.float64)
    t0 = float(strain.t0.value)
    dt = float(strain.dt.value)
    det = strain.name or (str(strain.channel).split(":", 1)[0] if strain.channel else None)
    det = _check_detector(det or "", f"strain written to {path}")
    nsec = int(math.ceil(data.size * dt - 1e-9))
    if dq_mask is None:
        full = (1 << len(_GWOSC_DQ_NAMES)) - 1
        per = max(1, int(round(1.0 / dt)))
        ok = np.ones(nsec, dtype=bool)
        finite = np.isfinite(data)
        for k in range(nsec):
            ok[k] = finite[k * per:(k + 1) * per].all()
        dq = np.where(ok, full, 0).astype(np.uint32)
    else:
        dq = np.asarray(list(dq_mask), dtype=np.uint32)
    if inj_mask is None:
        inj = np.full(nsec, (1 << len(_GWOSC_INJ_NAMES)) - 1, dtype=np.uint32)
    else:
        inj = np.asarray(list(inj_mask), dtype=np.uint32)
    for name, arr in (("dq_mask", dq), ("inj_mask", inj)):
        if arr.size != nsec:
            raise InputError(f"{name} has {arr.size} values but the strain spans {nsec} "
                             "started seconds.")
    with atomic_path(path) as tmp:
        with h5py.File(tmp, "w") as f:
            s = f.create_dataset("strain/Strain", data=data)
            s.attrs.update({"Xstart": t0, "Xspacing": dt, "Npoints": data.size,
                            "Xunits": "second", "Xlabel": "GPS time", "Ylabel": "Strain",
                            "Yunits": ""})
            for group, arr, names in (("quality/simple", dq, _GWOSC_DQ_NAMES),
                                      ("quality/injections", inj, _GWOSC_INJ_NAMES)):
                key = "DQmask" if group.endswith("simple") else "Injmask"
                short = "DQShortnames" if key == "DQmask" else "InjShortnames"
                m = f.create_dataset(f"{group}/{key}", data=arr)
                m.attrs.update({"Xstart": t0, "Xspacing": 1.0, "Npoints": arr.size,
                                "Bits": len(names), "Xunits": "second"})
                f.create_dataset(f"{group}/{short}", data=np.array(names, dtype="S"))
            meta = f.create_group("meta")
            meta["Detector"] = det
            meta["GPSstart"] = t0
            meta["Duration"] = data.size * dt
            meta["Type"] = "StrainTimeSeries"
            meta["Description"] = description or "Synthetic strain written by ringsearch"
    return Path(path)


def open_detectors(paths, dq_level: str = DEFAULT_DQ_LEVEL, injections: str = "exclude",
                   detector: str | None = None, sample_rate: float | None = None,
                   gps_start: float | None = None) -> dict:
    """Open files of one or more detectors for reading stretch by stretch.

    Like :func:`read_detectors`, with the same checks and segments, but HDF5
    strain stays on disk until a stretch is read
    (:meth:`~ringsearch.data.sources.StrainSource.read`); other formats are
    read whole.  Checking the files reads each once, block by block.

    Returns
    -------
    dict
        ``{detector: StrainSource}`` in the order detectors first appear.

    Examples
    --------
    >>> srcs = open_detectors(["H-H1_LOSC_4_V2-1126259446-32.hdf5"])  # doctest: +SKIP
    >>> srcs["H1"].read(0, 4096)[0].duration  # doctest: +SKIP
    <Quantity 1. s>
    """
    from gwpy.segments import SegmentList

    from ringsearch.data.sources import StrainSource, check_same_grid

    level = _check_level(dq_level, injections)
    files = [_load_file(p, detector, sample_rate, gps_start, lazy=True)
             for p in _as_paths(paths)]
    _check_one_detector(files, detector)
    groups: dict[str, list[_FileStrain]] = {}
    for f in files:
        groups.setdefault(f.detector, []).append(f)
    out = {}
    for det, group in groups.items():
        group.sort(key=lambda f: f.t0)
        other = next((f for f in group if f.sample_rate != group[0].sample_rate), None)
        if other is not None:
            raise InputError(f"file {other.path} is sampled at {other.sample_rate:g} Hz but file "
                             f"{group[0].path} at {group[0].sample_rate:g} Hz; resample one of "
                             "them first.")
        offsets = _offsets(group)
        segs = SegmentList()
        for f in group:
            segs |= _file_quality(f, level, injections)
        out[det] = StrainSource(det, group[0].t0, group[0].sample_rate,
                                offsets[-1] + int(group[-1].data.size),
                                [(o, f.data) for o, f in zip(offsets, group, strict=True)],
                                segs.coalesce(), [str(f.path) for f in group])
    check_same_grid(list(out.values()))
    return out


def read_detectors(paths, dq_level: str = DEFAULT_DQ_LEVEL, injections: str = "exclude",
                   detector: str | None = None, sample_rate: float | None = None,
                   gps_start: float | None = None) -> dict:
    """Read files of one or more detectors, grouped by detector.

    Parameters
    ----------
    paths : sequence of paths
        Strain files in any supported format, of any detectors.
    dq_level, injections
        As for :func:`read_strain_with_quality`.
    detector, sample_rate, gps_start
        As for :func:`read_strain` (``detector`` forces one name for all files,
        so it is refused when the files name different detectors).

    Returns
    -------
    dict
        ``{detector: (TimeSeries, SegmentList)}`` in the order detectors first
        appear; all detectors share one sample rate.

    Raises
    ------
    InputError
        As :func:`read_strain`, and when detectors differ in sample rate.

    Examples
    --------
    >>> data = read_detectors(["H-H1_LOSC_4_V2-1126259446-32.hdf5",
    ...                        "L-L1_LOSC_4_V2-1126259446-32.hdf5"])  # doctest: +SKIP
    >>> sorted(data)                                                  # doctest: +SKIP
    ['H1', 'L1']
    """
    from gwpy.segments import SegmentList

    level = _check_level(dq_level, injections)
    files = [_load_file(p, detector, sample_rate, gps_start) for p in _as_paths(paths)]
    _check_one_detector(files, detector)
    groups: dict[str, list[_FileStrain]] = {}
    for f in files:
        groups.setdefault(f.detector, []).append(f)
    first = next(iter(groups.values()))[0]
    out = {}
    for det, files in groups.items():
        for f in files:
            if f.sample_rate != first.sample_rate:
                raise InputError(f"file {f.path} ({det}) is sampled at {f.sample_rate:g} Hz but "
                                 f"file {first.path} ({first.detector}) at "
                                 f"{first.sample_rate:g} Hz; all detectors need one rate.")
        files.sort(key=lambda f: f.t0)
        strain = _join(files)
        segs = SegmentList()
        for f in files:
            segs |= _file_quality(f, level, injections)
        out[det] = (strain, (segs.coalesce() & finite_segments(strain)).coalesce())
    return out
