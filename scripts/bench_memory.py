"""Benchmark peak memory of a two-detector search against the data's duration.

Each duration is written as two GWOSC HDF5 files of synthetic design-noise
strain at 4096 Hz (in a process of its own), then searched from the files
in a fresh process, so each peak is the search's alone: the default search
(stretch by stretch when the data span more than about two stretches, with
partial reads) and, up to 4096 s, the whole series at once beside it.  A
small bank is used: the memory of the data path does not depend on the
bank's size, which only sets the CPU time.  Reported: peak resident memory
per duration and mode, and the default search's growth per second of data
between the two longest durations.

Run: ``python scripts/bench_memory.py [--durations 512 4096 14400] [--json out.json]
[--smoke]``; the default includes 4 hours (14,400 s, about 2 min and 1 GB of
temporary files).
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
from pathlib import Path

from _bench import Figures, add_options, peak_rss_mb

#: Longest duration also searched as one whole series (4 hours would need ~4.5 GB).
WHOLE_UP_TO_S = 4096.0


def _paths(folder: Path, duration: float) -> list[Path]:
    return [folder / f"{d[0]}-{d}_SIM-1000000000-{int(duration)}.hdf5" for d in ("H1", "L1")]


def write(folder: Path, duration: float, sample_rate: float) -> None:
    """Two detectors of design noise as GWOSC files, one detector at a time."""
    from ringsearch.data.io import write_gwosc_hdf5
    from ringsearch.data.noise import gaussian_noise

    for i, (det, path) in enumerate(zip(("H1", "L1"), _paths(folder, duration), strict=True)):
        write_gwosc_hdf5(gaussian_noise("design", duration, sample_rate, i + 1, gps_start=1e9,
                                        detector=det), path)


def one(folder: Path, duration: float, stretch_s: float | None) -> dict:
    """The search of one duration's files in this process; returns its peak memory."""
    import time

    from ringsearch.search.bank import Bank
    from ringsearch.search.engine import Search

    bank = Bank.from_points([60.0, 70.0, 80.0], [0.6, 0.7, 0.8])
    t = time.perf_counter()
    res = Search(bank=bank, n_slides=10, stretch_s=stretch_s).run(_paths(folder, duration))
    return {"duration_s": duration, "peak_rss_mb": peak_rss_mb(),
            "wall_s": time.perf_counter() - t,
            "stretches": len(res.extra.get("stretches", [])) or 1}


def _child(*args: str) -> dict:
    res = subprocess.run([sys.executable, str(Path(__file__)), *args],
                         capture_output=True, text=True, check=True)
    return json.loads(res.stdout.strip().splitlines()[-1] or "{}")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--durations", type=float, nargs="+", default=[512.0, 4096.0, 14400.0],
                    help="seconds of data, each searched in a fresh process "
                         "(default 512 4096 14400: 4 hours)")
    ap.add_argument("--sample-rate", type=float, default=4096.0)
    ap.add_argument("--stretch", type=float, default=None,
                    help="stretch length of the default search in s (default: the engine's)")
    ap.add_argument("--one", type=float, help=argparse.SUPPRESS)  # internal: one duration
    ap.add_argument("--folder", type=Path, help=argparse.SUPPRESS)
    ap.add_argument("--mode", choices=("write", "default", "whole"), help=argparse.SUPPRESS)
    add_options(ap)
    args = ap.parse_args(argv)
    if args.one is not None:
        if args.mode == "write":
            write(args.folder, args.one, args.sample_rate)
            print("{}")
        else:
            from ringsearch.search.stretches import STRETCH_S

            stretch = None if args.mode == "whole" else (args.stretch or STRETCH_S)
            print(json.dumps(one(args.folder, args.one, stretch)))
        return 0
    durations = [48.0, 192.0] if args.smoke else list(args.durations)
    stretch = ["--stretch", "64"] if args.smoke else (
        ["--stretch", str(args.stretch)] if args.stretch else [])
    out = Figures(f"memory of a two-detector search at {args.sample_rate:g} Hz")
    peaks = {}
    with tempfile.TemporaryDirectory() as tmp:
        for d in durations:
            common = ["--one", str(d), "--folder", tmp, "--sample-rate", str(args.sample_rate)]
            _child(*common, "--mode", "write")
            row = _child(*common, "--mode", "default", *stretch)
            peaks[d] = row["peak_rss_mb"]
            out.add(f"peak_rss_mb_{int(d)}s", row["peak_rss_mb"], "MB",
                    f"peak memory, {d:g} s of data ({row['stretches']} stretch(es))")
            if d <= WHOLE_UP_TO_S:
                whole = _child(*common, "--mode", "whole")
                out.add(f"peak_rss_mb_{int(d)}s_whole", whole["peak_rss_mb"], "MB",
                        f"peak memory, {d:g} s of data searched as one whole series")
            for p in _paths(Path(tmp), d):
                p.unlink()
    if len(durations) >= 2:
        a, b = sorted(durations)[-2:]
        out.add("growth_mb_per_s", (peaks[b] - peaks[a]) / (b - a), "MB/s",
                f"memory growth per second of data ({a:g} s to {b:g} s)")
    out.emit(args)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
