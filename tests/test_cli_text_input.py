"""One-column text strain through every command that reads strain.

``search``, ``inject`` and ``analyse`` take ``--sample-rate``, the data-start
option and ``--detector`` (shared with ``condition``), so a file holding only
strain values can be read; without them the command refuses with one
sentence.  The reference for each check is the synthetic strain itself: the
same samples written as a GWOSC HDF5 file, which describes itself, must give
the same numbers.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from ringsearch.cli import main

GPS0 = 1_000_000_000.0
FS = 2048
DURATION = 16.0
#: ringdown start in the analyse test (GPS s)
T_RD = GPS0 + 8.0


@pytest.fixture(scope="module")
def strain(tmp_path_factory):
    """16 s of design-PSD Gaussian noise at 2048 Hz with a loud Kerr (2,2,0) ringdown
    (mass 70, spin 0.7) from ``T_RD``, as one-column text (a name that does not tell
    the detector) and as the same samples in GWOSC HDF5."""
    from ringsearch.data.io import write_gwosc_hdf5
    from ringsearch.data.noise import gaussian_noise
    from ringsearch.physics.qnm import mode_f_tau

    ts = gaussian_noise("design", DURATION, FS, 5, gps_start=GPS0, detector="H1")
    t = ts.times.value - T_RD
    f, tau = mode_f_tau(70.0, 0.7)
    on = t >= 0
    h = np.zeros(t.size)
    h[on] = 2e-21 * np.exp(-t[on] / tau) * np.cos(2 * np.pi * f * t[on] + 0.4)
    ts = ts + h
    ts.name = "H1"
    folder = tmp_path_factory.mktemp("text-strain")
    text = folder / "strain.txt"
    np.savetxt(text, ts.value, fmt="%.17e")   # 17 significant digits: float64 round-trips
    hdf5 = write_gwosc_hdf5(ts, folder / "H-H1_SYNTH-1000000000-16.hdf5")
    return {"text": text, "hdf5": hdf5, "series": ts}


TEXT_OPTIONS = ["--sample-rate", str(FS), "--detector", "H1"]


def _one_sentence_naming(capsys, option: str) -> None:
    err = capsys.readouterr().err
    assert option in err and "Traceback" not in err and err.count("\n") == 1, err


# --------------------------------------------------------------------------------- search

def _search(files, out, *extra):
    # a tiny bank (a handful of templates), no plots: the reading is under test
    return main(["search", *map(str, files), "--out", str(out), "--mass", "60:80",
                 "--spin", "0.6:0.8", "--min-match", "0.8", "--no-plots", *extra])


def test_search_reads_one_column_text(strain, tmp_path):
    out = tmp_path / "run"
    assert _search([strain["text"]], out, *TEXT_OPTIONS, "--data-start", str(GPS0)) == 0
    summary = json.loads((out / "summary.json").read_text())
    # the same samples from the self-describing HDF5 file give the same search
    ref = tmp_path / "ref"
    assert _search([strain["hdf5"]], ref) == 0
    expect = json.loads((ref / "summary.json").read_text())
    assert list(summary["loudest"]) == ["H1"]
    loud, loud_ref = summary["loudest"]["H1"], expect["loudest"]["H1"]
    assert loud is not None and loud_ref is not None
    assert loud["gps"] == pytest.approx(loud_ref["gps"], abs=1e-9)
    assert loud["snr"] == pytest.approx(loud_ref["snr"], rel=1e-9)
    # the loud ringdown is found at its start time (within one 220 damping time, ~4 ms)
    assert abs(loud["gps"] - T_RD) < 0.005


def test_search_without_sample_rate_names_it(strain, tmp_path, capsys):
    out = tmp_path / "bad"
    assert _search([strain["text"]], out, "--detector", "H1", "--data-start", str(GPS0)) == 2
    _one_sentence_naming(capsys, "--sample-rate")
    assert not out.exists() or not any(out.iterdir())


def test_search_gps_start_stays_the_searched_window(strain, tmp_path, capsys):
    # in `search`, --gps-start is the window's start, never the first sample's time, so
    # the text file still lacks its start and the message names --data-start
    assert _search([strain["text"]], tmp_path / "bad", *TEXT_OPTIONS,
                   "--gps-start", str(GPS0)) == 2
    _one_sentence_naming(capsys, "--data-start")


def test_one_detector_name_for_files_of_two_detectors_is_refused(tmp_path, capsys):
    from ringsearch.data.io import write_gwosc_hdf5
    from ringsearch.data.noise import gaussian_noise

    files = [write_gwosc_hdf5(gaussian_noise("design", 8.0, 512, k, gps_start=GPS0,
                                             detector=det),
                              tmp_path / f"{det[0]}-{det}_SIM-1000000000-8.hdf5")
             for k, det in enumerate(("H1", "L1"))]
    for argv in (["search", *map(str, files), "--out", str(tmp_path / "s")],
                 ["condition", *map(str, files), "--out", str(tmp_path / "c")],
                 ["analyse", *map(str, files), "--gps", str(GPS0 + 4), "--out",
                  str(tmp_path / "a")]):
        assert main([*argv, "--detector", "H1"]) == 2
        err = capsys.readouterr().err
        assert "several detectors (H1, L1)" in err and err.count("\n") == 1, err


# --------------------------------------------------------------------------------- inject

def _inject(files, out, *extra):
    return main(["inject", *map(str, files), "--out", str(out), "--mass", "70", "--spin", "0.7",
                 "--gps", str(GPS0 + 4.0), "--ra", "1.0", "--dec", "0.3", "--psi", "0.2",
                 "--snr", "12", "--psd", "design", *extra])


def test_inject_reads_one_column_text(strain, tmp_path):
    from ringsearch.data.io import read_strain

    out = tmp_path / "inj"
    assert _inject([strain["text"]], out, *TEXT_OPTIONS, "--gps-start", str(GPS0)) == 0
    rec = json.loads((out / "injection.json").read_text())
    assert list(rec["detectors"]) == ["H1"]
    assert rec["detectors"]["H1"]["inputs"] == [str(strain["text"])]
    assert rec["network_optimal_snr"] == pytest.approx(12.0, rel=1e-6)
    injected = read_strain(out / rec["detectors"]["H1"]["file"])
    assert injected.name == "H1" and float(injected.t0.value) == GPS0
    assert float(injected.sample_rate.value) == FS and injected.size == strain["series"].size
    # outside the signal's support the input samples come back unchanged (the reference:
    # the synthetic series written to the text file)
    early = slice(0, int(3.0 * FS))
    np.testing.assert_array_equal(injected.value[early], strain["series"].value[early])


def test_inject_without_sample_rate_names_it(strain, tmp_path, capsys):
    out = tmp_path / "bad"
    assert _inject([strain["text"]], out, "--detector", "H1", "--gps-start", str(GPS0)) == 2
    _one_sentence_naming(capsys, "--sample-rate")
    assert not out.exists()


# -------------------------------------------------------------------------------- analyse

def _analyse(files, out, *extra):
    # small grid, one start time, no free-frequency fits (as tests/test_analysis_pipeline.py)
    return main(["analyse", *map(str, files), "--gps", str(T_RD), "--out", str(out),
                 "--max-overtones", "1", "--mass", "40:110", "--grid", "10,10",
                 "--t0-offsets", "0", "--duration", "0.08", "--no-varpro", *extra])


def test_analyse_reads_one_column_text(strain, tmp_path):
    out = tmp_path / "cand"
    assert _analyse([strain["text"]], out, *TEXT_OPTIONS, "--gps-start", str(GPS0)) == 0
    summary = json.loads((out / "summary.json").read_text())
    ref = tmp_path / "ref"
    assert _analyse([strain["hdf5"]], ref) == 0
    expect = json.loads((ref / "summary.json").read_text())
    assert summary["gps"] == T_RD
    assert summary["log10_bayes"]["1:0"] == pytest.approx(expect["log10_bayes"]["1:0"],
                                                          rel=1e-9, abs=1e-9)
    assert summary["mass"] == pytest.approx(expect["mass"], rel=1e-9)


def test_analyse_without_sample_rate_names_it(strain, tmp_path, capsys):
    out = tmp_path / "bad"
    assert _analyse([strain["text"]], out, "--detector", "H1", "--gps-start", str(GPS0)) == 2
    _one_sentence_naming(capsys, "--sample-rate")
    assert not out.exists()


def test_analyse_python_api_takes_the_same_options(strain):
    from ringsearch.analysis.pipeline import prepare_detectors
    from ringsearch.errors import InputError

    data, _, meta = prepare_detectors([strain["text"]], T_RD, 0.05, detector="H1",
                                      sample_rate=FS, data_start=GPS0)
    ref, _, _ = prepare_detectors([strain["hdf5"]], T_RD, 0.05)
    assert list(meta) == ["H1"]
    np.testing.assert_allclose(data[0].values, ref[0].values, rtol=0, atol=1e-30)
    with pytest.raises(InputError, match="do not apply"):
        prepare_detectors([strain["series"]], T_RD, 0.05, detector="H1")
