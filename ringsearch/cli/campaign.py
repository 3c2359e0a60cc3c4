"""``ringsearch campaign run|status|report``: injection campaigns from the command line."""

from __future__ import annotations

import argparse
import json
import textwrap
import time

from ringsearch.errors import InputError

_EPILOG = """\
examples:
  ringsearch campaign run injections/quick.toml --out out/quick --workers 2
  ringsearch campaign status out/quick
  ringsearch campaign report out/quick
  ringsearch campaign run injections/cluster.toml --out out/big --scheduler tcp://head:8786
  ringsearch campaign run injections/overtones.toml --out out/ov --workers 2 --report

An [overtones] table in the campaign file (enabled = true) adds the evidence for
each overtone count per injection and overtone_efficiency.csv: the fraction of
injections whose data support at least k overtones, against SNR.

Running 'campaign run' again on the same folder resumes: finished chunks are
kept, and a campaign file that changed since the first run is refused.
"""


def _fill(text: str) -> str:
    """Wrap a description for RawDescriptionHelpFormatter (which keeps epilog layout)."""
    return textwrap.fill(text, width=79)


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "campaign",
        help="inject ringdowns, search for them, and measure efficiency per overtone count",
        description=(
            "Injection campaigns: draw ringdowns with a chosen number of overtones from a "
            "TOML campaign file, inject them into synthetic or recorded strain, search for "
            "them with templates of each overtone count, and report efficiency curves, "
            "sensitive distance, parameter recovery and (optionally) how often the data "
            "support the injected overtones."),
        epilog=_EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    sub = parser.add_subparsers(dest="action", metavar="ACTION")
    sub.required = True

    run = sub.add_parser(
        "run", help="run or resume a campaign",
        description=_fill(
            "Run a campaign, or resume it in an existing folder.  The campaign file (TOML) "
            "has the tables [campaign] (name, seed), [data] (synthetic noise from a PSD, or "
            "strain files with 'avoid' windows), [injections] (count, overtone counts, mass in "
            "detector-frame solar masses, spin, overtone ratios, loudness by network SNR or "
            "distance in Mpc, spacing in s), [search] (template box, minimal match, template "
            "overtone counts), [threshold] (snr, or far_per_year from the campaign's own time "
            "slides), and optionally [report] and [overtones]; see injections/*.toml.  The "
            "whole file is checked before any work starts.  Writes injections.parquet, "
            "found.parquet, efficiency.csv, sigmoid.csv, sensitivity.csv and accuracy.csv "
            "in --out."),
        epilog=_EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    run.add_argument("config", metavar="CAMPAIGN.toml", help="campaign file (TOML)")
    run.add_argument("--out", required=True, metavar="DIR",
                     help="output folder: new, empty, or an unfinished run of the same file "
                          "(resumed)")
    where = run.add_mutually_exclusive_group()
    where.add_argument("--workers", type=int, default=1, metavar="N",
                       help="local worker processes, each running one chunk at a time "
                            "(default 1)")
    where.add_argument("--scheduler", metavar="ADDRESS",
                       help="address of a running Dask scheduler, e.g. tcp://host:8786")
    run.add_argument("--no-progress", action="store_true", help="hide the progress bar")
    run.add_argument("--report", action="store_true",
                     help="also write the figures and report.html when the run finishes")
    run.set_defaults(func=_run)

    status = sub.add_parser(
        "status", help="how far a campaign is",
        description=_fill("Print how many chunks and injections of a campaign are done, and the "
                     "CPU time spent in finished chunks (safe to run while the campaign runs)."),
        epilog=("examples:\n  ringsearch campaign status out/quick\n"
                "  ringsearch campaign status out/quick --json   # machine-readable"),
        formatter_class=argparse.RawDescriptionHelpFormatter)
    status.add_argument("out", metavar="DIR", help="campaign output folder")
    status.add_argument("--json", action="store_true", help="print the status as JSON")
    status.set_defaults(func=_status)

    report = sub.add_parser(
        "report", help="figures, CSV tables and report.html",
        description=_fill("Write PNG/PDF figures (DIR/figures/) and a self-contained report.html "
                     "(images embedded, opens offline) for a finished campaign: efficiency "
                     "against network SNR and distance per injected and template overtone "
                     "count with binomial intervals, 50%/90% points, sensitive distance, "
                     "parameter recovery and, with [overtones], overtone-recovery efficiency."),
        epilog=("examples:\n  ringsearch campaign run injections/quick.toml --out out/quick "
                "--workers 2\n  ringsearch campaign report out/quick   # writes "
                "out/quick/report.html"),
        formatter_class=argparse.RawDescriptionHelpFormatter)
    report.add_argument("out", metavar="DIR", help="campaign output folder")
    report.set_defaults(func=_report)


def _run(args) -> int:
    from ringsearch.campaign import load_spec, run_campaign

    if args.workers < 1:
        raise InputError(f"--workers must be at least 1, not {args.workers}.")
    spec = load_spec(args.config)
    start = time.perf_counter()
    status = run_campaign(spec, args.out, workers=args.workers, scheduler=args.scheduler,
                          progress=not args.no_progress)
    print(f"campaign '{status['name']}': {status['chunks_done']}/{status['n_chunks']} chunks, "
          f"{status['injections_done']} injections, {time.perf_counter() - start:.1f} s")
    tables = "injections.parquet, found.parquet, efficiency.csv"
    if spec.overtones["enabled"]:
        tables += ", overtone_efficiency.csv"
    print(f"tables in {args.out} ({tables})")
    if args.report:
        from ringsearch.report import make_report

        print(f"report: {make_report(args.out)}")
    return 0


def _status(args) -> int:
    from ringsearch.campaign import campaign_status

    status = campaign_status(args.out)
    if args.json:
        from ringsearch.files import json_safe

        print(json.dumps(json_safe(status), indent=2, allow_nan=False))
        return 0
    state = ("finished" if status["assembled"] else
             "all chunks done, tables not assembled" if status["complete"] else "unfinished")
    print(f"campaign '{status['name']}' in {args.out}: {state}")
    print(f"  chunks     {status['chunks_done']} / {status['n_chunks']}")
    print(f"  injections {status['injections_done']} / {status['n_injections']}")
    print(f"  CPU time   {status['cpu_s']:.1f} s in finished chunks")
    return 0


def _report(args) -> int:
    from ringsearch.report import make_report

    path = make_report(args.out)
    print(f"report: {path}")
    return 0
