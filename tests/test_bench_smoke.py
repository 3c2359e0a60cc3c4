"""The benchmarks run (tiny smoke mode) and write their figures; timing itself is never tested."""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

SCRIPTS = Path(__file__).resolve().parents[1] / "scripts"


def test_bench_all_smoke_writes_json_and_table(tmp_path):
    res = subprocess.run([sys.executable, str(SCRIPTS / "bench_all.py"), "--smoke", "--out",
                          str(tmp_path)], capture_output=True, text=True, check=False)
    assert res.returncode == 0, res.stderr[-2000:]
    data = json.loads((tmp_path / "bench.json").read_text())
    names = {r["script"] for r in data["results"]}
    expected = {p.name for p in SCRIPTS.glob("bench_*.py")} - {"bench_all.py"}
    assert names == expected
    for r in data["results"]:
        assert r["figures"], r["script"]
        for f in r["figures"]:
            assert math.isfinite(f["min"]) and f["min"] <= f["median"]
    table = (tmp_path / "bench.md").read_text()
    assert "| benchmark | figure | min | median | unit |" in table
    assert data["machine"]["cores"] >= 1
