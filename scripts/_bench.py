"""Shared plumbing of the benchmark scripts: common options and the figures they report.

Every ``scripts/bench_*.py`` takes ``--json PATH`` (write its figures there)
and ``--smoke`` (a tiny, fast version for CI), and reports a list of figures
``{"key", "value", "unit", "what"}``.  ``scripts/bench_all.py`` runs each script
several times and keeps the minimum and median of every figure.
"""

from __future__ import annotations

import argparse
import json
import resource
from pathlib import Path


def add_options(parser: argparse.ArgumentParser) -> None:
    """``--json PATH`` and ``--smoke``."""
    parser.add_argument("--json", type=Path, metavar="PATH",
                        help="also write the figures to this JSON file")
    parser.add_argument("--smoke", action="store_true",
                        help="a tiny, fast run (for CI): the figures mean little")


def peak_rss_mb() -> float:
    """Peak resident memory of this process so far, in MB."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


class Figures:
    """Collects a script's figures, prints them and writes them as JSON."""

    def __init__(self, title: str):
        self.title = title
        self.rows: list[dict] = []

    def add(self, key: str, value: float, unit: str, what: str) -> float:
        self.rows.append({"key": key, "value": float(value), "unit": unit, "what": what})
        return float(value)

    def emit(self, args: argparse.Namespace) -> None:
        print(f"{self.title}")
        for r in self.rows:
            print(f"  {r['what']}: {r['value']:.4g} {r['unit']}")
        if args.json:
            Path(args.json).write_text(json.dumps({"title": self.title, "figures": self.rows},
                                                  indent=1))
