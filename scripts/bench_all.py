"""Run every benchmark script under scripts/ (bench_*.py) and print their reports.

Benchmarks compare ratios measured side by side in one run (ours against a
floor such as the bare FFT cost), which survive a noisy machine better than
absolute times.  Run with ``make bench``.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent


def main() -> int:
    scripts = sorted(p for p in HERE.glob("bench_*.py") if p.name != "bench_all.py")
    failed = []
    for script in scripts:
        print(f"\n=== {script.name} ===", flush=True)
        result = subprocess.run([sys.executable, str(script)], check=False)
        if result.returncode != 0:
            failed.append(script.name)
    if failed:
        print(f"\nbenchmarks that failed: {', '.join(failed)}", file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
