"""Benchmark injection campaigns: cost per injection, background cost, 1 against 2 workers.

Runs the shipped example campaigns (``injections/quick.toml`` and, when the
open data are present, ``injections/gw150914.toml``) with fewer injections on
1 and 2 local worker processes, and a sample of ``injections/target.toml``
(the project's throughput target: 10,000 injections, a 2,000-template
two-overtone bank, two detectors) with one worker, in whole chunks.  From each run's chunk
markers it separates the CPU time of the chunks holding injections (cost per
injection) from that of the background units searched once without
injections, and for the target it extrapolates: the CPU time of its 10,000
injections plus all its background units, and the wall time on 2 cores;
then it runs ``--scaling-chunks`` chunks of the target with 1 and with 2
workers (wall time, and the chunks' CPU time to tell a busy machine from a
poor scaling).

Usage::

    .venv/bin/python scripts/bench_campaign.py [--counts 60 120] [--workers 1 2]
        [--target-count 52] [--scaling-chunks 8] [--json out.json] [--smoke]
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


def costs(out: Path) -> dict:
    """CPU seconds of the injection chunks and of the background units of a finished run."""
    chunks = pd.read_parquet(out / "plan" / "chunks.parquet").set_index("chunk")
    kind = chunks["kind"] if "kind" in chunks else pd.Series("injections", chunks.index)
    fg = bg = 0.0
    n_bg = 0
    for marker in (out / "chunks").glob("*.done"):
        meta = json.loads(marker.read_text())
        if kind.get(int(meta["chunk"]), "injections") == "background":
            bg += meta["cpu_s"]
            n_bg += 1
        else:
            fg += meta["cpu_s"]
    return {"foreground_cpu_s": fg, "background_cpu_s": bg, "background_chunks": n_bg}


def run_one(example: Path, count: int, workers: int, scratch: Path,
            max_background: int | None = None) -> dict:
    raw = tomllib.loads(example.read_text())
    raw["injections"]["count"] = count
    if max_background is not None:
        raw["threshold"]["max_background_chunks"] = max_background
    spec = spec_from_dict(raw, origin=str(example), base=example.parent)
    out = scratch / f"{example.stem}-{count}-{workers}"
    shutil.rmtree(out, ignore_errors=True)
    start = time.perf_counter()
    status = run_campaign(spec, out, workers=workers, progress=False)
    wall = time.perf_counter() - start
    from ringsearch.campaign.worker import campaign_bank, template_overtones

    n_templates = sum(len(campaign_bank(spec.config, n)) for n in template_overtones(spec.config))
    return {"example": example.stem, "injections": count, "workers": workers,
            "chunks": status["n_chunks"], "wall_s": round(wall, 2),
            "chunk_cpu_s": round(status["cpu_s"], 2), "templates": n_templates,
            **costs(out)}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--counts", type=int, nargs="+", default=[60, 120],
                        help="numbers of injections per run (default 60 120)")
    parser.add_argument("--workers", type=int, nargs="+", default=[1, 2],
                        help="worker counts (default 1 2)")
    parser.add_argument("--target-count", type=int, default=52,
                        help="injections of the target campaign's sample, rounded to whole "
                             "chunks (default 52: two chunks)")
    parser.add_argument("--scaling-chunks", type=int, default=8,
                        help="chunks of the target campaign run with 1 and with 2 workers "
                             "(default 8; 0 skips the comparison)")
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
    out = Figures("campaigns: CPU per injection, background searched once, 1 and 2 workers")
    rows = []
    with tempfile.TemporaryDirectory(prefix="bench-campaign-") as tmp:
        for example in examples:
            for count in args.counts:
                walls = {}
                for workers in args.workers:
                    row = run_one(example, count, workers, Path(tmp),
                                  max_background=1 if args.smoke else None)
                    rows.append(row)
                    print(json.dumps(row), flush=True)
                    walls[workers] = row["wall_s"]
                    tag = f"{row['example']}_{count}_w{workers}"
                    what = f"{row['example']}, {count} injections, {workers} worker(s)"
                    out.add(f"{tag}_fg_cpu_per_injection", row["foreground_cpu_s"] / count,
                            "CPU s", f"{what}: CPU per injection (chunks with injections)")
                    out.add(f"{tag}_bg_cpu_s", row["background_cpu_s"], "CPU s",
                            f"{what}: background searched once "
                            f"({row['background_chunks']} units)")
                    out.add(f"{tag}_inj_per_cpu_s", count / row["chunk_cpu_s"], "1/CPU s",
                            f"{what}: injections per CPU second, background included")
                    out.add(f"{tag}_wall_s", row["wall_s"], "s", f"{what}: wall time")
                if 1 in walls and 2 in walls:
                    out.add(f"{example.stem}_{count}_speedup", walls[1] / walls[2], "x",
                            f"{example.stem}, {count} injections: wall(1 worker) / "
                            "wall(2 workers)")
        if not args.smoke:
            target = ROOT / "injections" / "target.toml"
            raw = tomllib.loads(target.read_text())
            full_count = int(raw["injections"]["count"])
            spec_full = spec_from_dict(raw, origin=str(target), base=target.parent)
            from ringsearch.campaign.draw import background_chunks_needed, plan_campaign

            n_bg_full = background_chunks_needed(spec_full)
            full_chunks, _ = plan_campaign(spec_full)
            n_fg_full = int((full_chunks["n_injections"] > 0).sum())
            per_chunk = int(full_chunks["n_injections"].max())
            # the sample: whole chunks, filled as the full campaign fills them
            count = per_chunk * max(1, round(args.target_count / per_chunk))
            row = run_one(target, count, 1, Path(tmp), max_background=1)
            rows.append(row)
            print(json.dumps(row), flush=True)
            n_fg = row["chunks"] - row["background_chunks"]
            per_fg_chunk = row["foreground_cpu_s"] / n_fg
            per_bg = row["background_cpu_s"] / max(row["background_chunks"], 1)
            total = per_fg_chunk * n_fg_full + per_bg * n_bg_full
            out.add("target_templates", row["templates"], "", "target: templates in the bank")
            out.add("target_fg_cpu_per_injection", row["foreground_cpu_s"] / count, "CPU s",
                    f"target: CPU per injection ({count} measured in {n_fg} chunks of "
                    f"{per_chunk})")
            out.add("target_bg_cpu_per_unit", per_bg, "CPU s",
                    "target: CPU per background unit (64 s, 200 slides)")
            out.add("target_total_cpu_s", total, "CPU s",
                    f"target: {full_count} injections in {n_fg_full} chunks + {n_bg_full} "
                    "background units (extrapolated per chunk)")
            out.add("target_wall_2_cores_min", total / 2 / 60, "min",
                    "target: wall time on 2 cores (extrapolated, perfect scaling)")
            if args.scaling_chunks and 1 in args.workers and 2 in args.workers:
                # 1 against 2 workers on the target itself, the bank placed once beforehand
                n = per_chunk * args.scaling_chunks
                runs = {w: run_one(target, n, w, Path(tmp), max_background=1) for w in (1, 2)}
                for w, r in runs.items():
                    rows.append(r)
                    print(json.dumps(r), flush=True)
                    out.add(f"target_scaling_w{w}_wall_s", r["wall_s"], "s",
                            f"target, {n} injections, {w} worker(s): wall time")
                out.add("target_scaling_speedup", runs[1]["wall_s"] / runs[2]["wall_s"], "x",
                        f"target, {n} injections: wall(1 worker) / wall(2 workers)")
                out.add("target_scaling_cpu_ratio",
                        runs[2]["chunk_cpu_s"] / runs[1]["chunk_cpu_s"], "x",
                        f"target, {n} injections: chunk CPU with 2 workers / with 1 (above 1 "
                        "when the two share a busy machine's cores)")
    print()
    print(pd.DataFrame(rows).to_string(index=False))
    out.emit(args)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
