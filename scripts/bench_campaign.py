"""Benchmark injection campaigns: throughput and scaling with workers and injections.

Runs the shipped example campaigns (``injections/quick.toml`` and, when the
open data are present, ``injections/gw150914.toml``) with fewer injections,
on 1 and 2 local worker processes, and prints for each run the wall time,
the CPU time spent in chunks, injections processed and found per CPU-second,
and the filtering rate in template-seconds of data per CPU-second (what the
target -- 10,000 injections against ~2,000 templates with 2 overtones, two
detectors, in 30 minutes on 2 cores -- needs).

Usage::

    .venv/bin/python scripts/bench_campaign.py                 # a few minutes
    .venv/bin/python scripts/bench_campaign.py --counts 120 480 --workers 1 2
"""

from __future__ import annotations

import argparse
import json
import shutil
import sys
import tempfile
import time
import tomllib
from pathlib import Path

import pandas as pd
from _bench import Figures, add_options

from ringsearch.campaign import run_campaign, spec_from_dict

ROOT = Path(__file__).resolve().parents[1]


def run_one(example: Path, count: int, workers: int, scratch: Path) -> dict:
    raw = tomllib.loads(example.read_text())
    raw["injections"]["count"] = count
    spec = spec_from_dict(raw, origin=str(example), base=example.parent)
    out = scratch / f"{example.stem}-{count}-{workers}"
    shutil.rmtree(out, ignore_errors=True)
    start = time.perf_counter()
    status = run_campaign(spec, out, workers=workers, progress=False)
    wall = time.perf_counter() - start
    found = pd.read_parquet(out / "found.parquet")
    n_found = int(found.groupby("injection_id")["found"].any().sum())
    chunks = pd.read_parquet(out / "plan" / "chunks.parquet")
    data_s = float((chunks["gps_end"] - chunks["gps_start"]).sum())
    n_templates = 0
    from ringsearch.campaign.worker import campaign_bank, template_overtones

    for n in template_overtones(spec.config):
        n_templates += len(campaign_bank(spec.config, n))
    cpu = status["cpu_s"]
    template_seconds = n_templates * data_s * len(spec.detectors)
    return {
        "example": example.stem, "injections": count, "workers": workers,
        "chunks": status["n_chunks"], "wall_s": round(wall, 2), "chunk_cpu_s": round(cpu, 2),
        "injections_per_cpu_s": round(count / cpu, 3),
        "found_per_cpu_s": round(n_found / cpu, 3),
        "templates": n_templates,
        "template_data_s_per_cpu_s": round(template_seconds / cpu, 1),
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--counts", type=int, nargs="+", default=[60, 120],
                        help="numbers of injections per run (default 60 120)")
    parser.add_argument("--workers", type=int, nargs="+", default=[1, 2],
                        help="worker counts (default 1 2)")
    add_options(parser)
    args = parser.parse_args(argv)
    examples = [ROOT / "injections" / "quick.toml"]
    if args.smoke:
        args.counts = [12]
    open_data = ROOT / "injections" / "gw150914.toml"
    try:
        spec_from_dict(tomllib.loads(open_data.read_text()), origin=str(open_data),
                       base=open_data.parent)
        if not args.smoke:
            examples.append(open_data)
    except ValueError as exc:
        print(f"skipping the open-data example: {exc}", file=sys.stderr)
    rows = []
    with tempfile.TemporaryDirectory(prefix="bench-campaign-") as tmp:
        for example in examples:
            for count in args.counts:
                for workers in args.workers:
                    row = run_one(example, count, workers, Path(tmp))
                    rows.append(row)
                    print(json.dumps(row), flush=True)
    table = pd.DataFrame(rows)
    print()
    print(table.to_string(index=False))
    out = Figures("campaign examples: injections per CPU second, 1 and 2 local workers")
    for row in rows:
        tag = f"{row['example']}_{row['injections']}_w{row['workers']}"
        out.add(f"{tag}_inj_per_cpu_s", row["injections_per_cpu_s"], "1/CPU s",
                f"{row['example']}, {row['injections']} injections, {row['workers']} "
                f"worker(s): injections per CPU second")
        out.add(f"{tag}_wall_s", row["wall_s"], "s",
                f"{row['example']}, {row['injections']} injections, {row['workers']} "
                f"worker(s): wall time")
    out.emit(args)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
