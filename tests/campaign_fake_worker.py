"""A statistical stand-in for the campaign chunk worker, used only by tests.

It skips the data and the filter: each injection's network statistic is drawn
from the exact detection-theory distribution (rho^2 ~ non-central chi-squared
with 2K degrees of freedom and non-centrality rho_opt^2), so the engine, the
tables and the efficiency code can be tested in milliseconds, apart from the
real search.  Setting RINGSEARCH_FAKE_SLEEP (seconds) slows every chunk down so
a test can kill a run mid-way.
"""

from __future__ import annotations

import os
import time

import numpy as np
import pandas as pd

from ringsearch.campaign.draw import rng_for


def fake_chunk(config: dict, chunk: dict, injections: pd.DataFrame) -> dict[str, pd.DataFrame]:
    time.sleep(float(os.environ.get("RINGSEARCH_FAKE_SLEEP", "0")))
    rng = rng_for(config["campaign"]["seed"], 99, chunk["chunk"])
    dets = config["data"]["detectors"]
    n = len(injections)
    if "target_snr" in injections:
        rho = injections["target_snr"].to_numpy(float)
        dist = 1000.0 / np.maximum(rho, 1e-3)
    else:
        dist = injections["distance_mpc"].to_numpy(float)
        rho = 4000.0 / dist
    share = rng.dirichlet(np.ones(len(dets)), n)
    per = {f"snr_opt_{d}": rho * np.sqrt(share[:, i]) for i, d in enumerate(dets)}
    inj = pd.DataFrame({"injection_id": injections["injection_id"].to_numpy(),
                        **per, "network_snr": rho, "distance_mpc": dist,
                        "f_0_hz": 250.0, "tau_0_s": 0.004})
    rows, bg, live = [], [], []
    for n_tpl in config["search"]["template_overtones"]:
        k = 2 * (n_tpl + 1)
        stat = np.sqrt(rng.noncentral_chisquare(k, rho**2))
        rows.append(pd.DataFrame({
            "injection_id": injections["injection_id"].to_numpy(),
            "template_overtones": n_tpl, "searched": True, "stat": stat,
            "trigger_gps": injections["gps"].to_numpy() + 1e-3,
            "mass": injections["mass"].to_numpy() * 1.01,
            "spin": injections["spin"].to_numpy(), "f_hz": 251.0, "tau_s": 0.004}))
        bg.append(pd.DataFrame({"template_overtones": n_tpl,
                                "stat": np.sqrt(rng.chisquare(k, 50))}))
        live.append(pd.DataFrame({"template_overtones": [n_tpl], "live_time_s": [1e5]}))
    return {"injections": inj, "found": pd.concat(rows, ignore_index=True),
            "background": pd.concat(bg, ignore_index=True),
            "livetime": pd.concat(live, ignore_index=True)}


def dying_chunk(config: dict, chunk: dict, injections: pd.DataFrame) -> dict[str, pd.DataFrame]:
    """Finish chunk 0, then end the worker process abruptly (as the OOM killer would)."""
    if int(chunk["chunk"]) == 0:
        return fake_chunk(config, chunk, injections)
    os._exit(1)
