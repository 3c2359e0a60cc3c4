"""End-to-end demonstration of ringsearch, run by ``make demo``.

It runs the same commands a user would type, in order:

1. the Kerr QNM spectrum of an example remnant;
2. two detectors of synthetic design-sensitivity noise, with a ringdown of
   two overtones injected into them;
3. a template-bank search of that data, and the overtone analysis of the
   loudest candidate;
4. the same search and analysis on the GW150914 open data, when
   ``../shared/data/open-strain`` is present beside the repository;
5. the quick injection campaign (``injections/quick.toml``) and its report.

Every output lands under ``--out`` (default ``demo-output``); the script
prints where.  The scenario (remnant, sky position, seeds) is our own demo
choice, not a published event, except for the GW150914 step.
"""

from __future__ import annotations

import argparse
import json
import shutil
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
OPEN_DATA = ROOT.parent / "shared" / "data" / "open-strain" / "GW150914"
GPS0 = 1_000_000_000  # start of the synthetic data


def ringsearch(*args: str) -> None:
    """Run one ringsearch command, echoing it; stop the demo if it fails."""
    cmd = [sys.executable, "-m", "ringsearch", *map(str, args)]
    print("\n$ ringsearch " + " ".join(map(str, args)), flush=True)
    result = subprocess.run(cmd, cwd=ROOT, check=False)
    if result.returncode != 0:
        raise SystemExit(f"demo: 'ringsearch {args[0]}' failed with exit status "
                         f"{result.returncode}")


def show_summary(path: Path, keys: list[str]) -> None:
    summary = json.loads(path.read_text())
    for key in keys:
        if key in summary:
            print(f"  {key}: {json.dumps(summary[key], default=str)}")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--out", default="demo-output", help="output folder (replaced)")
    parser.add_argument("--skip-campaign", action="store_true", help="stop after the analyses")
    args = parser.parse_args(argv)
    out = (ROOT / args.out).resolve()
    if out.exists():
        shutil.rmtree(out)
    out.mkdir(parents=True)
    start = time.monotonic()

    print("== 1. Kerr QNM spectrum of a 68 Msun, spin 0.69 remnant")
    ringsearch("spectrum", "--spin", "0.69", "--mass", "68",
               "--mode", "2,2,0", "--mode", "2,2,1", "--mode", "2,2,2", "--mode", "3,3,0")

    print("\n== 2. Synthetic two-detector noise with an injected two-overtone ringdown")
    sim = out / "synthetic"
    files = []
    for seed, det in enumerate(("H1", "L1"), start=1):
        path = sim / f"{det[0]}-{det}_DEMO-{GPS0}-64.hdf5"
        ringsearch("noise", "--out", path, "--duration", "64", "--sample-rate", "4096",
                   "--detector", det, "--psd", "design", "--seed", str(seed),
                   "--gps-start", str(GPS0))
        files.append(path)
    gps_inj = GPS0 + 40.25
    ringsearch("inject", *files, "--out", sim / "injected", "--mass", "70", "--spin", "0.7",
               "--overtones", "2", "--gps", str(gps_inj), "--ra", "1.2", "--dec", "0.4",
               "--psi", "0.3", "--inclination", "0.5", "--snr", "30", "--psd", "design",
               "--plot")
    injected = sorted((sim / "injected").glob("*.hdf5"))

    print("\n== 3. Search the injected data, then analyse the loudest candidate")
    ringsearch("search", *injected, "--out", out / "search-synthetic", "--mass", "40:120",
               "--spin", "0:0.95", "--overtones", "1", "--slides", "50")
    show_summary(out / "search-synthetic" / "summary.json", ["loudest"])
    ringsearch("analyse", *injected, "--from-search", out / "search-synthetic",
               "--out", out / "analysis-synthetic", "--mass", "40:120", "--spin", "0:0.95",
               "--max-overtones", "2", "--truth", "70,0.7")
    show_summary(out / "analysis-synthetic" / "summary.json",
                 ["supported_overtones", "log10_bayes", "averaged", "truth"])

    if OPEN_DATA.exists():
        print("\n== 4. GW150914 open data (GWOSC, CC BY 4.0)")
        gw = sorted(OPEN_DATA.glob("*.hdf5"))
        ringsearch("search", *gw, "--out", out / "search-gw150914")
        show_summary(out / "search-gw150914" / "summary.json", ["loudest"])
        ringsearch("analyse", *gw, "--gps", "1126259462.425", "--sky", "1.95,-1.27",
                   "--mass", "40:110", "--out", out / "analysis-gw150914")
        show_summary(out / "analysis-gw150914" / "summary.json",
                     ["supported_overtones", "log10_bayes", "averaged"])
    else:
        print(f"\n== 4. (skipped: no open data at {OPEN_DATA})")

    if not args.skip_campaign:
        print("\n== 5. Quick injection campaign and its report")
        ringsearch("campaign", "run", "injections/quick.toml", "--out", out / "campaign",
                   "--workers", "2")
        ringsearch("campaign", "report", out / "campaign")

    minutes = (time.monotonic() - start) / 60
    print(f"\nDemo finished in {minutes:.1f} min. Outputs are under {out}:")
    for sub in sorted(p for p in out.iterdir() if p.is_dir()):
        print(f"  {sub}/")
    report = out / "campaign" / "report.html"
    if report.exists():
        print(f"Campaign report: {report}")
    print("A search candidate is not a detection claim without background estimation "
          "and review; see README.md.")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
