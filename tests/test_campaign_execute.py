"""Execution engine: local, process pool and Dask give identical tables; resume is exact.

The chunk worker here is the statistical stand-in of ``campaign_fake_worker``
(passed in explicitly), so these tests exercise the engine alone; the real
search runs in ``test_campaign_search.py``.
"""

from __future__ import annotations

import copy
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from test_campaign_spec import BASE

from ringsearch.campaign import campaign_status, run_campaign, spec_from_dict
from ringsearch.campaign import execute as ex
from ringsearch.errors import InputError

FAKE = "campaign_fake_worker:fake_chunk"
TABLES = ["injections.parquet", "found.parquet", "background.parquet"]
CSVS = ["efficiency.csv", "sigmoid.csv", "threshold.csv"]


def small_spec(**over):
    raw = copy.deepcopy(BASE)
    raw["injections"]["count"] = 60
    raw["data"]["chunk_s"] = 16  # 6 slots per chunk -> 10 chunks
    for k, v in over.items():
        raw[k].update(v)
    return spec_from_dict(raw)


def assert_same_results(a: Path, b: Path) -> None:
    for name in TABLES:
        pd.testing.assert_frame_equal(pd.read_parquet(a / name), pd.read_parquet(b / name))
    for name in CSVS:
        assert (a / name).read_text() == (b / name).read_text(), name


def test_local_run_writes_every_table(tmp_path):
    status = run_campaign(small_spec(), tmp_path / "out", worker=FAKE, progress=False)
    assert status["complete"] and status["assembled"] and status["n_chunks"] == 10
    eff = pd.read_csv(tmp_path / "out" / "efficiency.csv")
    for col in ("injected_overtones", "template_overtones", "bin_lo", "bin_hi", "n_injected",
                "n_found", "efficiency", "ci_lo", "ci_hi", "binned_by"):
        assert col in eff.columns
    assert set(eff["binned_by"]) == {"network_snr", "distance_mpc"}
    found = pd.read_parquet(tmp_path / "out" / "found.parquet")
    assert len(found) == 60 * 2  # every injection, once per template overtone count
    # second call: nothing to do, same tables
    before = (tmp_path / "out" / "found.parquet").read_bytes()
    run_campaign(small_spec(), tmp_path / "out", worker=FAKE, progress=False)
    assert pd.read_parquet(tmp_path / "out" / "found.parquet").equals(
        pd.read_parquet(__import__("io").BytesIO(before)))


def test_process_pool_and_dask_match_in_process(tmp_path):
    spec = small_spec()
    run_campaign(spec, tmp_path / "one", worker=FAKE, progress=False)
    run_campaign(spec, tmp_path / "pool", worker=FAKE, workers=2, progress=False)
    assert_same_results(tmp_path / "one", tmp_path / "pool")
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        run_campaign(spec, tmp_path / "dask", worker=FAKE, scheduler=client, progress=False)
    assert_same_results(tmp_path / "one", tmp_path / "dask")


def test_changed_config_and_foreign_folder_are_refused(tmp_path):
    run_campaign(small_spec(), tmp_path / "out", worker=FAKE, progress=False, max_chunks=2,
                 finalize=False)
    changed = small_spec(campaign={"seed": 8})
    with pytest.raises(InputError, match="different configuration"):
        run_campaign(changed, tmp_path / "out", worker=FAKE, progress=False)
    other = tmp_path / "other"
    other.mkdir()
    (other / "notes.txt").write_text("x")
    with pytest.raises(InputError, match="holds no campaign"):
        run_campaign(small_spec(), other, worker=FAKE, progress=False)
    assert campaign_status(tmp_path / "out")["chunks_done"] == 2


def test_dead_scheduler_fails_fast_with_one_sentence(tmp_path, monkeypatch):
    pytest.importorskip("distributed")
    monkeypatch.setattr(ex, "SCHEDULER_TIMEOUT_S", 2.0)
    with pytest.raises(InputError, match="did not answer"):
        run_campaign(small_spec(), tmp_path / "out", worker=FAKE,
                     scheduler="tcp://127.0.0.1:9", progress=False)
    assert not (tmp_path / "out").exists()  # no work started


def test_resume_after_kill_gives_identical_tables(tmp_path):
    spec_path = tmp_path / "c.toml"
    spec_path.write_text(TOML)
    from ringsearch.campaign import load_spec

    ref = tmp_path / "ref"
    run_campaign(load_spec(spec_path), ref, worker=FAKE, progress=False)
    out = tmp_path / "killed"
    here = Path(__file__).resolve().parent
    env = dict(os.environ, RINGSEARCH_FAKE_SLEEP="0.3",
               PYTHONPATH=os.pathsep.join([str(here), os.environ.get("PYTHONPATH", "")]))
    code = ("import sys; from ringsearch.campaign import load_spec, run_campaign; "
            f"run_campaign(load_spec(sys.argv[1]), sys.argv[2], worker={FAKE!r}, "
            "progress=False)")
    proc = subprocess.Popen([sys.executable, "-c", code, str(spec_path), str(out)], env=env)
    try:
        deadline = time.monotonic() + 60
        while not list((out / "chunks").glob("*.done")) if out.exists() else True:
            assert time.monotonic() < deadline and proc.poll() is None
            time.sleep(0.05)
    finally:
        proc.kill()
        proc.wait()
    done = campaign_status(out)["chunks_done"]
    assert 1 <= done < 10  # killed mid-run
    assert not (out / "efficiency.csv").exists()
    run_campaign(load_spec(spec_path), out, worker=FAKE, progress=False)
    assert_same_results(ref, out)


def test_efficiency_rises_with_snr_within_errors(tmp_path):
    # Non-decreasing within intervals: no later bin's upper limit below an earlier
    # bin's lower limit. 90 % intervals, ~15 bins per curve: chance failure < 1e-3.
    spec = small_spec(injections={"count": 600}, data={"chunk_s": 64})
    run_campaign(spec, tmp_path / "out", worker=FAKE, progress=False)
    eff = pd.read_csv(tmp_path / "out" / "efficiency.csv")
    for _, g in eff[eff["binned_by"] == "network_snr"].groupby(
            ["injected_overtones", "template_overtones"]):
        g = g.sort_values("bin_lo")
        running_lo = np.maximum.accumulate(g["ci_lo"].to_numpy())
        assert (g["ci_hi"].to_numpy() >= running_lo - 1e-12).all()


TOML = """
[campaign]
seed = 3
[data]
source = "synthetic"
detectors = ["H1", "L1"]
chunk_s = 16
pad_s = 2.0
[injections]
count = 60
overtones = [0, 1]
mass = { dist = "uniform", low = 50, high = 80 }
spin = { dist = "uniform", low = 0.3, high = 0.9 }
loudness = { by = "snr", snr = { dist = "uniform", low = 1, high = 15 } }
[search]
mass = [40, 100]
spin = [0.0, 0.95]
template_overtones = [0, 1]
[threshold]
far_per_year = 100.0
"""


def test_dead_worker_process_is_one_sentence_and_resumable(tmp_path):
    # regression: a killed pool process ended `campaign run` in a BrokenProcessPool traceback
    out = tmp_path / "out"
    with pytest.raises(InputError, match="worker process .* died"):
        run_campaign(small_spec(), out, worker="campaign_fake_worker:dying_chunk", workers=2,
                     progress=False)
    run_campaign(small_spec(), out, worker=FAKE, progress=False)  # resumes with a good worker
    run_campaign(small_spec(), tmp_path / "ref", worker=FAKE, progress=False)
    assert_same_results(out, tmp_path / "ref")


def test_script_without_main_guard_is_told_why_its_workers_died(tmp_path):
    # regression: a script calling run_campaign at its top level with workers=2 got
    # "died (killed, or out of memory)": spawned workers re-run the script and die
    script = tmp_path / "unguarded.py"
    script.write_text(
        "import sys\n"
        f"sys.path.insert(0, {str(Path(__file__).parent)!r})\n"
        "from test_campaign_execute import small_spec\n"
        "from ringsearch.campaign import run_campaign\n"
        f"run_campaign(small_spec(), {str(tmp_path / 'out')!r}, "
        f"worker={FAKE!r}, workers=2, progress=False)\n")
    run = subprocess.run([sys.executable, str(script)], capture_output=True, text=True,
                         timeout=300)
    assert run.returncode != 0
    assert "unguarded.py calls run_campaign at its top level" in run.stderr
    assert 'if __name__ == "__main__":' in run.stderr
