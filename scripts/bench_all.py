"""Run every benchmark script (bench_*.py) several times; write the figures as JSON and a table.

Each figure is reported as the minimum and the median of the repeats (3 by
default), each repeat a fresh process.  Comparisons (the filter against its
FFT floors, one worker against two) are measured side by side inside one run
of one script, which survives a busy machine better than absolute times.
Results go to ``--out`` (default ``bench-results/``): ``bench.json`` and
``bench.md``, both naming the machine.  Run with ``make bench``; ``--smoke``
runs each script once in its tiny mode (what CI does).
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent

#: Further configurations of a script, each run as well (not in smoke mode).
VARIANTS: dict[str, list[list[str]]] = {
    # the filter's targets are for N = 0 and N = 2 banks of about a thousand templates
    "bench_search": [["--overtones", "2", "--min-match", "0.98"]],
}


def machine() -> dict:
    """What the figures were measured on."""
    cpu = ""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    return {"host": platform.node(), "cpu": cpu or platform.processor(),
            "cores": os.cpu_count(), "python": platform.python_version(),
            "load_average": list(os.getloadavg()) if hasattr(os, "getloadavg") else None,
            "date_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())}


def run_script(script: Path, repeats: int, smoke: bool, extra: list[str] | None = None) -> dict:
    """Figures of ``repeats`` runs of one script: per key the values, minimum and median."""
    runs = []
    with tempfile.TemporaryDirectory() as tmp:
        for i in range(repeats):
            out = Path(tmp) / f"{i}.json"
            cmd = [sys.executable, str(script), "--json", str(out), *(extra or [])] + (
                ["--smoke"] * smoke)
            res = subprocess.run(cmd, check=False)
            if res.returncode != 0 or not out.exists():
                raise RuntimeError(f"{script.name} failed (exit status {res.returncode})")
            runs.append(json.loads(out.read_text()))
    figures = []
    for j, row in enumerate(runs[0]["figures"]):
        values = [r["figures"][j]["value"] for r in runs]
        figures.append({**{k: row[k] for k in ("key", "unit", "what")}, "values": values,
                        "min": min(values), "median": statistics.median(values)})
    return {"script": script.name, "title": runs[0]["title"], "repeats": repeats,
            "figures": figures}


def table(results: list[dict], info: dict) -> str:
    """The results as a Markdown table (minimum and median of the repeats)."""
    lines = [f"Measured on {info['host']} ({info['cpu']}, {info['cores']} cores, load "
             f"{info['load_average']}) on {info['date_utc']}.", "",
             "| benchmark | figure | min | median | unit |", "|---|---|---|---|---|"]
    for res in results:
        for f in res["figures"]:
            lines.append(f"| {res['title']} | {f['what']} | {f['min']:.4g} | "
                         f"{f['median']:.4g} | {f['unit']} |")
    return "\n".join(lines) + "\n"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3, help="runs of each script (3)")
    parser.add_argument("--smoke", action="store_true", help="each script once, tiny mode")
    parser.add_argument("--out", type=Path, default=Path("bench-results"),
                        help="folder of bench.json and bench.md (default bench-results/)")
    parser.add_argument("--only", nargs="+", metavar="NAME",
                        help="only these scripts (e.g. bench_search)")
    args = parser.parse_args(argv)
    repeats = 1 if args.smoke else args.repeats
    scripts = sorted(p for p in HERE.glob("bench_*.py") if p.name != "bench_all.py")
    if args.only:
        scripts = [p for p in scripts if p.stem in args.only]
    info = machine()
    results, failed = [], []
    for script in scripts:
        for extra in [[]] + ([] if args.smoke else VARIANTS.get(script.stem, [])):
            print(f"\n=== {script.name} {' '.join(extra)} ({repeats} run"
                  f"{'s' * (repeats > 1)}) ===", flush=True)
            try:
                results.append(run_script(script, repeats, args.smoke, extra))
            except RuntimeError as exc:
                failed.append(str(exc))
    from ringsearch.files import write_json, write_text

    args.out.mkdir(parents=True, exist_ok=True)
    write_json(args.out / "bench.json", {"machine": info, "smoke": args.smoke,
                                         "results": results})
    text = table(results, info)
    write_text(args.out / "bench.md", text)
    print("\n" + text)
    print(f"written: {args.out / 'bench.json'} and {args.out / 'bench.md'}")
    if failed:
        print("benchmarks that failed: " + "; ".join(failed), file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
