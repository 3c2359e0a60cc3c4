"""``ringsearch search`` command line: outputs, summary contract, bad input leaves nothing."""

from __future__ import annotations

import json

import pandas as pd
import pytest
from conftest import GW150914_GPS

from ringsearch.cli import main


@pytest.mark.filterwarnings("ignore::Warning")
def test_search_writes_contract_outputs(gw150914_files, tmp_path, capsys):
    out = tmp_path / "run"
    files = [str(p) for p in gw150914_files.values()]
    code = main(["search", *files, "--out", str(out), "--mass", "50:100", "--spin", "0.5:0.9",
                 "--min-match", "0.9", "--gps-start", str(GW150914_GPS - 2),
                 "--gps-end", str(GW150914_GPS + 2)])
    assert code == 0
    summary = json.loads((out / "summary.json").read_text())
    for det in ("H1", "L1"):
        loud = summary["loudest"][det]
        assert {"gps", "snr", "mass", "spin", "f_hz", "tau_s", "n_overtones"} <= set(loud)
        assert abs(loud["gps"] - GW150914_GPS) < 0.03
    assert summary["significance"]["method"] == "time slides"
    assert summary["candidates"][0]["far_per_year"] > 0
    trig = pd.read_parquet(out / "triggers.parquet")
    assert {"gps", "detector", "snr", "mass_msun", "spin", "f220_hz", "tau220_s",
            "amp220_re", "amp220_im", "cond_gram", "template_id", "chisq", "chisq_dof",
            "snr_reweighted"} <= set(trig.columns)
    # the veto is on by default: every trigger has a chi-squared, and ranks by re-weighted SNR
    assert trig.chisq.notna().all() and (trig.chisq_dof > 0).all()
    assert (trig.snr_reweighted <= trig.snr + 1e-12).all()
    assert summary["significance"]["veto"]["bins"] == 8
    for name in ("snr_loudest", "whitened_fit", "bank", "far", "qtransform_H1"):
        assert (out / "plots" / f"{name}.png").stat().st_size > 1000
    # reuse the bank
    out2 = tmp_path / "run2"
    assert main(["search", files[0], "--out", str(out2), "--bank", str(out / "bank.parquet"),
                 "--gps-start", str(GW150914_GPS - 2), "--gps-end", str(GW150914_GPS + 2),
                 "--no-plots"]) == 0
    s2 = json.loads((out2 / "summary.json").read_text())
    assert s2["bank"]["n_templates"] == summary["bank"]["n_templates"]
    assert "single detector" in s2["significance"]["method"]
    # --no-veto: raw SNR ranking, no chi-squared
    out3 = tmp_path / "run3"
    assert main(["search", files[0], "--out", str(out3), "--bank", str(out / "bank.parquet"),
                 "--gps-start", str(GW150914_GPS - 2), "--gps-end", str(GW150914_GPS + 2),
                 "--no-plots", "--no-veto"]) == 0
    trig3 = pd.read_parquet(out3 / "triggers.parquet")
    assert trig3.chisq.isna().all() and (trig3.snr_reweighted == trig3.snr).all()
    assert json.loads((out3 / "summary.json").read_text())["significance"]["veto"] is None


@pytest.mark.parametrize("extra, words", [
    (["--mass", "200:100"], "mass range"),
    (["--mass", "abc"], "LO:HI"),
    (["--spin", "0:1.5"], "spin range"),
    (["--min-match", "1.2"], "minimal match"),
    (["--gps-start", "1000000000", "--gps-end", "1000000010"], "outside"),
    (["--overtones", "-1"], "overtones"),
    (["--veto-bins", "1"], "veto bands"),
    # regressions found in review: each used to pass silently or end in a traceback
    (["--mass", "0:10"], "positive"),
    (["--gps-start", "nan"], "--gps-start"),
    (["--tolerance", "-1"], "timing tolerance"),
    (["--slide-step", "nan"], "time-slide step"),
    (["--seed", "-1"], "seed"),
])
def test_bad_input_one_sentence_and_no_output(gw150914_files, tmp_path, capsys, extra, words):
    out = tmp_path / "bad"
    files = [str(p) for p in gw150914_files.values()]
    assert main(["search", *files, "--out", str(out), *extra]) == 2
    err = capsys.readouterr().err
    assert words in err and "Traceback" not in err and err.count("\n") == 1
    assert not out.exists() or not any(out.iterdir())
    assert not any(p.name.startswith(".bad") for p in tmp_path.iterdir())


def test_short_data_and_nonempty_out(tmp_path, capsys):
    import numpy as np

    # 0.3 s of data is shorter than the longest template of the default box plus edges
    txt = tmp_path / "H-H1_SHORT-1000000000-1.txt"
    np.savetxt(txt, np.column_stack([1e9 + np.arange(1228) / 4096.0,
                                     1e-21 * np.random.default_rng(0).standard_normal(1228)]))
    assert main(["search", str(txt), "--out", str(tmp_path / "o"), "--dq-level", "NONE"]) == 2
    assert capsys.readouterr().err.count("\n") == 1
    busy = tmp_path / "busy"
    busy.mkdir()
    (busy / "x").write_text("x")
    assert main(["search", str(txt), "--out", str(busy)]) == 2
    assert "not empty" in capsys.readouterr().err


def test_bank_of_other_overtone_count_is_refused(tmp_path, capsys):
    from ringsearch.search.bank import Bank

    # refused before any data is read, so the data file need not exist
    path = tmp_path / "bank.parquet"
    Bank.from_points([60.0, 70.0], [0.6, 0.7], n_overtones=0).save(path)
    out = tmp_path / "o"
    assert main(["search", str(tmp_path / "absent.hdf5"), "--out", str(out), "--bank", str(path),
                 "--overtones", "1"]) == 2
    err = capsys.readouterr().err
    assert "built for 0 overtone" in err and err.count("\n") == 1
    assert not out.exists()
