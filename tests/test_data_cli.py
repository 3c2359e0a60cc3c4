"""The `ringsearch noise` and `ringsearch condition` commands."""

from __future__ import annotations

import json

import numpy as np

from ringsearch.cli import main
from ringsearch.data.io import read_strain


def _noise(tmp_path, name, *extra):
    out = tmp_path / name
    argv = ["noise", "--out", str(out), "--duration", "16", "--sample-rate", "1024",
            "--seed", "5", "--gps-start", "1000000000", *extra]
    assert main(argv) == 0
    return out


def test_noise_writes_reproducible_gwosc_files(tmp_path, capsys):
    a = _noise(tmp_path, "a.hdf5", "--detector", "L1")
    b = _noise(tmp_path, "b.hdf5", "--detector", "L1")
    s = read_strain(a)
    assert s.name == "L1" and float(s.duration.value) == 16.0
    assert float(s.sample_rate.value) == 1024.0 and float(s.t0.value) == 1e9
    assert s.value.tobytes() == read_strain(b).value.tobytes()
    flat = _noise(tmp_path, "flat.hdf5", "--psd", "flat", "--flat-level", "4e-46")
    # White noise of one-sided PSD S has variance S fs / 2 (= 2.05e-43 here); 16384
    # samples: standard error 1.1 %, tolerance 6 %.
    assert abs(np.var(read_strain(flat).value) / (4e-46 * 512) - 1) < 0.06
    asd = tmp_path / "asd.txt"
    asd.write_text("10 1e-22\n100 1e-23\n2000 1e-23\n")
    assert read_strain(_noise(tmp_path, "file.hdf5", "--psd", str(asd))).name == "H1"
    assert "wrote" in capsys.readouterr().out


def test_noise_bad_input(tmp_path, capsys):
    out = tmp_path / "x.hdf5"
    base = ["noise", "--out", str(out), "--seed", "1"]
    assert main([*base, "--duration", "1.00001"]) == 2
    assert main([*base, "--duration", "4", "--psd", "missing.txt"]) == 2
    assert main([*base, "--duration", "4", "--detector", "Hanford"]) == 2
    assert main([*base, "--duration", "4", "--flat-level", "1e-46"]) == 2
    # regressions: each of these was a traceback or a file with a NaN/absurd start time
    assert main([*base, "--duration", "4", "--sample-rate", "inf"]) == 2
    assert main([*base, "--duration", "4", "--gps-start", "nan"]) == 2
    assert main([*base, "--duration", "4", "--gps-start", "-5"]) == 2
    assert main([*base, "--duration", "1e9"]) == 2                      # MemoryError before
    assert main(["noise", "--out", str(tmp_path), "--seed", "1", "--duration", "4"]) == 2
    assert main(["noise", "--out", str(tmp_path / "x.txt"), "--seed", "1",
                 "--duration", "4"]) == 2                       # HDF5 bytes in a .txt file
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 10 and all(line.startswith("ringsearch noise: error:") for line in err)
    assert not out.exists() and not (tmp_path / "x.txt").exists()


def test_condition_writes_plots_and_records(tmp_path, capsys):
    h1 = _noise(tmp_path, "H-H1_SIM-1000000000-16.hdf5")
    l1 = _noise(tmp_path, "L-L1_SIM-1000000000-16.hdf5", "--detector", "L1")
    out = tmp_path / "out"
    assert main(["condition", str(h1), str(l1), "--out", str(out), "--around", "1000000008",
                 "--window", "0.5", "--f-low", "25"]) == 0
    assert (out / "asd.png").stat().st_size > 0
    for det, path in (("H1", h1), ("L1", l1)):
        rec = json.loads((out / det / "conditioning.json").read_text())
        assert rec["detector"] == det and rec["f_low_hz"] == 25.0
        assert rec["f_high_hz"] == 0.8 * 512
        assert rec["files"] == [str(path)]
        assert rec["analysed_segments"] == [[1e9 + 2.5, 1e9 + 13.5]]
        assert rec["gates"] == []
        assert (out / det / "whitened.png").stat().st_size > 0
        assert (out / det / "qtransform.png").stat().st_size > 0
    assert "H1: 11 s analysable" in capsys.readouterr().out


def test_condition_bad_input_leaves_nothing(tmp_path, capsys):
    h1 = _noise(tmp_path, "H-H1_SIM-1000000000-16.hdf5")
    l1_2048 = tmp_path / "L-L1_SIM-1000000000-16.hdf5"
    assert main(["noise", "--out", str(l1_2048), "--duration", "16", "--sample-rate", "2048",
                 "--seed", "1", "--detector", "L1"]) == 0
    out = tmp_path / "out"
    assert main(["condition", str(h1), str(l1_2048), "--out", str(out)]) == 2
    assert main(["condition", str(tmp_path / "none.hdf5"), "--out", str(out)]) == 2
    assert main(["condition", str(h1), "--out", str(out), "--around", "5"]) == 2
    assert main(["condition", str(h1), "--out", str(out), "--seglen", "32"]) == 2
    assert main(["condition", str(h1), "--out", str(out), "--seglen", "nan"]) == 2
    text = tmp_path / "one_column.txt"
    text.write_text("1e-21\n-2e-21\n" * 8)
    assert main(["condition", str(text), "--out", str(out), "--detector", "H1",
                 "--sample-rate", "16", "--gps-start", "nan"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 6
    assert "all detectors need one rate" in err[0]
    assert "does not exist" in err[1]
    assert "--around 5.0 is outside the H1 data" in err[2]
    assert "segment length 32 s" in err[3]
    assert "seglen nan" in err[4]            # used to blame the whitening filter length
    assert "gps_start nan" in err[5]         # used to give a series starting at NaN
    assert not out.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".out")]
