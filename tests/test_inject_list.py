"""``ringsearch inject --injections FILE``: every row of a list into strain files."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from ringsearch.cli import main
from ringsearch.data.inject import inject, signal_snr
from ringsearch.data.injections import check_injection_table, make_sources, source_from_row
from ringsearch.data.io import analysable_segments, read_strain, write_gwosc_hdf5
from ringsearch.data.noise import gaussian_noise, resolve_psd

GPS0 = 1_300_000_000.0
FS = 2048.0

#: Three ringdowns of our own scenario: two set by target SNR, one by distance.
LIST = pd.DataFrame({
    "injection_id": [10, 11, 12],
    "gps": [GPS0 + 5.0, GPS0 + 14.2503, GPS0 + 25.5],
    "mass": [70.0, 60.0, 85.0],
    "spin": [0.7, 0.6, 0.8],
    "injected_overtones": [1, 0, 2],
    "ratio_1": [0.8, None, 1.2],
    "ratio_2": [None, None, 0.6],
    "phase_1": [0.3, None, -0.5],
    "phase_0": [0.0, 1.0, 2.0],
    "ra": [1.0, 2.0, 3.0],
    "dec": [0.3, -0.4, 0.9],
    "inclination": [0.5, 1.0, 2.5],
    "polarization": [0.2, 1.0, 2.0],
    "target_snr": [15.0, None, 25.0],
    "distance_mpc": [None, 300.0, None],
    "epsilon": [None, 0.02, None],
})


@pytest.fixture
def sim_files(tmp_path):
    paths = []
    for k, det in enumerate(("H1", "L1")):
        ts = gaussian_noise("design", 32.0, FS, 70 + k, gps_start=GPS0, detector=det)
        paths.append(write_gwosc_hdf5(ts, tmp_path / f"{det[0]}-{det}_SIM-{int(GPS0)}-32.hdf5"))
    return paths


def _run(files, out, list_path, *extra):
    return main(["inject", *map(str, files), "--out", str(out), "--injections", str(list_path),
                 *extra])


def test_list_injection_adds_every_row_with_its_snr(sim_files, tmp_path, capsys):
    list_path = tmp_path / "list.csv"
    LIST.to_csv(list_path, index=False)
    out = tmp_path / "inj"
    assert _run(sim_files, out, list_path, "--psd", "design") == 0
    assert "3 injections" in capsys.readouterr().out
    table = pd.read_parquet(out / "injections.parquet")
    assert table["injection_id"].tolist() == [10, 11, 12]
    rec = json.loads((out / "injection.json").read_text())
    assert rec["injections"] == 3 and sorted(rec["detectors"]) == ["H1", "L1"]
    # the same PSD the command used for --psd design (its 0.125 Hz grid)
    psds = {d: resolve_psd("design", np.arange(0.0, FS / 2 + 0.125, 0.125))
            for d in ("H1", "L1")}
    f_high = 0.8 * FS / 2
    sources, expected = make_sources(check_injection_table(LIST), psds, FS, 20.0, f_high)
    pd.testing.assert_frame_equal(table[expected.columns], expected)
    # distance row: the SNR of the signal as given; target rows: their target
    dist = source_from_row(check_injection_table(LIST).iloc[1])
    for d in ("H1", "L1"):
        assert table[f"snr_opt_{d}"][1] == pytest.approx(
            signal_snr(dist, d, psds[d], FS, 20.0, f_high), rel=1e-12)
    assert table["network_snr"][[0, 2]].tolist() == pytest.approx([15.0, 25.0], rel=1e-9)
    assert table["implied_distance_mpc"][[0, 2]].notna().all()
    for det, path in zip(("H1", "L1"), sim_files, strict=True):
        new_path = out / rec["detectors"][det]["file"]
        new, old = read_strain(new_path), read_strain(path)
        # injected minus original = the three sources' projected signals
        want = inject(old, sources, detector=det)
        np.testing.assert_array_equal(new.value - old.value, want.value - old.value)
        assert np.count_nonzero(new.value - old.value) > 0
        assert analysable_segments([new_path]) == analysable_segments([path])


def test_estimated_psd_leaves_out_every_signal(sim_files, tmp_path):
    list_path = tmp_path / "list.parquet"
    LIST.to_parquet(list_path)
    out = tmp_path / "est"
    assert _run(sim_files, out, list_path) == 0
    table = pd.read_parquet(out / "injections.parquet")
    assert table["network_snr"][[0, 2]].tolist() == pytest.approx([15.0, 25.0], rel=1e-9)
    assert json.loads((out / "injection.json").read_text())["psd"] == "estimate"


def _bad(frame: pd.DataFrame, **changes) -> pd.DataFrame:
    frame = frame.copy()
    for name, value in changes.items():
        frame[name] = value
    return frame


@pytest.mark.parametrize("frame, extra, words", [
    (_bad(LIST, colour=["red", "blue", "green"]), [], ["unknown column 'colour'", "list.csv"]),
    (_bad(LIST, spin=[0.7, 1.0, 0.8]), [], ["'spin'", "row 2", "list.csv"]),
    (_bad(LIST, distance_mpc=[100.0, 300.0, None], epsilon=[0.01, 0.02, None]), [],
     ["row 1", "both loudness kinds"]),
    (LIST.drop(columns="ratio_2"), [], ["'ratio_2'", "row 3"]),
    (_bad(LIST, gps=[GPS0 + 5.0, GPS0 + 14.25, GPS0 + 40.0]), [],
     ["injection 12", "outside the H1 data"]),
    (LIST, ["--mass", "60", "--snr", "10"], ["--mass and --snr", "--injections"]),
    (LIST, ["--plot"], ["--plot"]),
])
def test_bad_list_is_one_sentence_and_leaves_nothing(sim_files, tmp_path, capsys, frame, extra,
                                                    words):
    list_path = tmp_path / "list.csv"
    frame.to_csv(list_path, index=False)
    out = tmp_path / "x"
    assert _run(sim_files, out, list_path, "--psd", "design", *extra) == 2
    err = capsys.readouterr().err.strip()
    assert "Traceback" not in err and err.count("\n") == 0
    message = err.split("error: ", 1)[1]
    assert message.endswith(".") and ". " not in message
    for w in words:
        assert w in message, message
    assert not out.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(
        [*(p.name for p in sim_files), "list.csv"])


def test_single_signal_needs_its_options(sim_files, tmp_path, capsys):
    status = main(["inject", str(sim_files[0]), "--out", str(tmp_path / "y"), "--spin", "0.5",
                   "--snr", "10", "--psd", "design"])
    assert status == 2
    assert "--mass, --gps, --ra, --dec and --psi are required" in capsys.readouterr().err
