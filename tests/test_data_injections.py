"""Injection lists: schema checks, normalisation, files, and the sources they make."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from gwpy.frequencyseries import FrequencySeries

from ringsearch.data.inject import signal_snr
from ringsearch.data.injections import (
    check_injection_table,
    make_sources,
    read_injection_table,
    source_from_row,
    write_injection_table,
)
from ringsearch.errors import InputError
from ringsearch.physics.ringdown import RingdownSource, kerr_modes

GPS0 = 1_300_000_000.0


def rows(**changes) -> pd.DataFrame:
    """Three rows of our own scenario: two overtone counts, both loudness kinds."""
    base = {
        "gps": [GPS0 + 10.0, GPS0 + 4.0, GPS0 + 7.0],
        "mass": [65.0, 80.0, 55.0],
        "spin": [0.7, 0.6, 0.85],
        "injected_overtones": [1, 0, 2],
        "ratio_1": [0.8, np.nan, 1.5],
        "ratio_2": [np.nan, np.nan, 0.5],
        "phase_0": [0.4, 1.0, np.nan],
        "phase_2": [np.nan, np.nan, -1.0],
        "ra": [1.0, 4.0, 2.5],
        "dec": [0.3, -0.9, 0.1],
        "inclination": [0.5, 2.0, 1.2],
        "polarization": [0.2, 3.0, 5.0],
        "target_snr": [12.0, np.nan, 20.0],
        "distance_mpc": [np.nan, 400.0, np.nan],
        "epsilon": [np.nan, 0.02, np.nan],
    }
    base.update(changes)
    return pd.DataFrame(base)


def one_sentence(message: str) -> bool:
    return message.endswith(".") and ". " not in message and "\n" not in message


def test_normalised_table_fills_defaults_and_fixes_dtypes():
    table = check_injection_table(rows())
    assert table["injection_id"].tolist() == [0, 1, 2]
    assert table.columns.tolist() == [
        "injection_id", "gps", "mass", "spin", "injected_overtones", "phase_0", "ratio_1",
        "phase_1", "ratio_2", "phase_2", "ra", "dec", "inclination", "polarization",
        "target_snr", "distance_mpc", "epsilon"]
    assert table["ratio_1"].tolist() == [0.8, 1.0, 1.5]          # blank ratio: 1
    assert table["phase_0"].tolist() == [0.4, 1.0, 0.0]          # blank phase: 0
    assert table["phase_1"].tolist() == [0.0, 0.0, 0.0]          # absent phase column: 0
    assert table["injection_id"].dtype == np.int64
    assert table["injected_overtones"].dtype == np.int64
    assert (table.drop(columns=["injection_id", "injected_overtones"]).dtypes
            == np.float64).all()
    # sorted by injection_id; only the loudness kinds used are kept
    ids = check_injection_table(rows(injection_id=[9, 2, 5]))
    assert ids["injection_id"].tolist() == [2, 5, 9]
    assert ids["mass"].tolist() == [80.0, 55.0, 65.0]
    snr_only = check_injection_table(rows().iloc[[0, 2]].drop(columns=["distance_mpc",
                                                                      "epsilon"]))
    assert "distance_mpc" not in snr_only and "target_snr" in snr_only


@pytest.mark.parametrize("change, words", [
    ({"colour": ["red"] * 3}, ["unknown column 'colour'", "list.csv"]),
    ({"ratio_8": [1.0] * 3}, ["unknown column 'ratio_8'"]),
    ({"spin": [0.7, 1.0, 0.5]}, ["'spin'", "row 2", "list.csv"]),
    ({"spin": [0.7, 0.9995, 0.5]}, ["'spin'", "row 2", "0.999"]),
    ({"mass": [65.0, -1.0, 55.0]}, ["'mass'", "row 2"]),
    ({"mass": [65.0, "heavy", 55.0]}, ["'mass'", "row 2", "not a number"]),
    ({"gps": [GPS0, np.inf, GPS0]}, ["'gps'", "row 2", "finite"]),
    ({"dec": [0.3, 2.0, 0.1]}, ["'dec'", "row 2"]),
    ({"injected_overtones": [1, 0.5, 2]}, ["'injected_overtones'", "row 2", "whole"]),
    ({"injected_overtones": [1, 0, 8]}, ["'injected_overtones'", "row 3"]),
    ({"distance_mpc": [300.0, 400.0, np.nan]}, ["row 1", "both loudness kinds"]),
    ({"target_snr": [12.0, np.nan, np.nan]}, ["row 3", "no loudness"]),
    ({"epsilon": [np.nan, np.nan, np.nan]}, ["'epsilon'", "row 2", "'distance_mpc'"]),
    ({"epsilon": [np.nan, 1.0, np.nan]}, ["'epsilon'", "row 2"]),
    ({"target_snr": [12.0, np.nan, 0.0]}, ["'target_snr'", "row 3"]),
    ({"ratio_1": [0.8, np.nan, -1.0]}, ["'ratio_1'", "row 3"]),
    ({"injection_id": [4, 7, 4]}, ["'injection_id'", "row 3", "row 1"]),
])
def test_bad_values_are_one_sentence_naming_row_and_column(change, words):
    with pytest.raises(InputError) as err:
        check_injection_table(rows(**change), "list.csv")
    message = str(err.value)
    assert one_sentence(message), message
    for w in words:
        assert w in message, message


def test_missing_columns_are_named():
    with pytest.raises(InputError, match="'ratio_2'.*row 3"):
        check_injection_table(rows().drop(columns="ratio_2"), "list.csv")
    with pytest.raises(InputError, match="no column 'ra'"):
        check_injection_table(rows().drop(columns="ra"), "list.csv")
    with pytest.raises(InputError, match="no loudness column"):
        check_injection_table(rows().drop(columns=["target_snr", "distance_mpc", "epsilon"]))
    with pytest.raises(InputError, match="no rows"):
        check_injection_table(rows().iloc[:0])


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_write_and_read_round_trip(tmp_path, suffix):
    path = write_injection_table(rows(), tmp_path / f"list{suffix}")
    assert read_injection_table(path).equals(check_injection_table(rows()))
    assert [p.name for p in tmp_path.iterdir()] == [path.name]  # no temporary left


def test_csv_comments_repeated_header_and_bad_files(tmp_path):
    text = ("# our own three-row scenario\n" + rows().to_csv(index=False))
    (tmp_path / "a.csv").write_text(text)
    assert len(read_injection_table(tmp_path / "a.csv")) == 3
    header, *lines = rows().to_csv(index=False).splitlines()
    (tmp_path / "dup.csv").write_text("\n".join([header + ",mass", *(x + ",1" for x in lines)]))
    with pytest.raises(InputError, match="'mass' appears twice"):
        read_injection_table(tmp_path / "dup.csv")
    with pytest.raises(InputError, match="does not exist"):
        read_injection_table(tmp_path / "none.csv")
    with pytest.raises(InputError, match=r"\.csv or \.parquet"):
        read_injection_table(tmp_path / "list.json")
    (tmp_path / "empty.csv").write_text("")
    with pytest.raises(InputError, match="empty"):
        read_injection_table(tmp_path / "empty.csv")
    (tmp_path / "bad.parquet").write_bytes(b"not parquet")
    with pytest.raises(InputError, match="cannot be read"):
        read_injection_table(tmp_path / "bad.parquet")


def test_source_from_row_uses_the_row_and_the_snr_reference():
    table = check_injection_table(rows())
    src = source_from_row(table.iloc[2])
    assert [m.lmn for m in src.modes] == [(2, 2, 0), (2, 2, 1), (2, 2, 2)]
    assert [m.ratio for m in src.modes] == [1.0, 1.5, 0.5]
    assert [m.phase for m in src.modes] == [0.0, 0.0, -1.0]
    assert (src.distance, src.epsilon) == (100.0, 0.01)          # target_snr row
    assert src.azimuth == 0.0 and src.t0 == GPS0 + 7.0 and src.psi == 5.0
    dist = source_from_row(table.iloc[1])
    assert (dist.distance, dist.epsilon, dist.azimuth) == (400.0, 0.02, 0.5)


def _psd(fs):
    f = np.arange(0.0, fs / 2 + 0.25, 0.25)
    # a smooth coloured spectrum of our own (not a detector's)
    return FrequencySeries(1e-46 * (1 + (f / 300) ** 2 + (40 / np.maximum(f, 1)) ** 4),
                           frequencies=f)


def test_make_sources_snrs_are_those_of_signal_snr():
    # The campaign worker built these sources by hand (RingdownSource at 100 Mpc and
    # epsilon 0.01, azimuth phase_0 / 2) and had its own sampled-signal SNR; make_sources
    # matched its outputs to 3e-7 (the other one padded the signal to 1 s, signal_snr to
    # 4 s).  Here the values are checked against signal_snr directly.
    fs, f_low, f_high = 4096.0, 20.0, 1600.0
    psds = {"H1": _psd(fs), "L1": _psd(fs)}
    table = check_injection_table(rows())
    sources, out = make_sources(table, psds, fs, f_low, f_high)
    assert out["injection_id"].tolist() == [0, 1, 2]
    assert out.columns.tolist() == [
        "injection_id", "arrival_gps", "arrival_gps_H1", "arrival_gps_L1", "snr_opt_H1",
        "snr_opt_L1", "network_snr", "f_0_hz", "tau_0_s", "implied_distance_mpc",
        "mass_source"]
    for k, r in enumerate(table.to_dict("records")):
        n = r["injected_overtones"]
        by_distance = not math.isnan(r["distance_mpc"])
        hand = RingdownSource(
            r["mass"], r["spin"], distance=r["distance_mpc"] if by_distance else 100.0,
            epsilon=r["epsilon"] if by_distance else 0.01,
            modes=kerr_modes(n, [r[f"ratio_{i}"] for i in range(1, n + 1)],
                             [r[f"phase_{i}"] for i in range(1, n + 1)]),
            t0=r["gps"], ra=r["ra"], dec=r["dec"], psi=r["polarization"],
            inclination=r["inclination"], azimuth=r["phase_0"] / 2)
        raw = {d: signal_snr(hand, d, psds[d], fs, f_low, f_high) for d in psds}
        network = math.hypot(*raw.values())
        scale = 1.0 if by_distance else r["target_snr"] / network
        for d in psds:
            assert out[f"snr_opt_{d}"][k] == pytest.approx(raw[d] * scale, rel=1e-12)
            # the scaled source itself has the reported SNR
            assert signal_snr(sources[k], d, psds[d], fs, f_low, f_high) == pytest.approx(
                out[f"snr_opt_{d}"][k], rel=1e-9)
            assert out[f"arrival_gps_{d}"][k] == hand.arrival_time(d)
        assert out["arrival_gps"][k] == out["arrival_gps_H1"][k]
        assert out["network_snr"][k] == pytest.approx(network * scale, rel=1e-12)
        assert out["f_0_hz"][k] == hand.f_tau()[0][0]
        if by_distance:
            assert sources[k] == hand
            assert out["mass_source"][k] == pytest.approx(hand.mass_source, rel=1e-12)
            assert math.isnan(out["implied_distance_mpc"][k])
        else:
            assert out["network_snr"][k] == pytest.approx(r["target_snr"], rel=1e-12)
            # strain scales as 1/distance
            assert sources[k].distance == pytest.approx(100.0 * network / r["target_snr"])
            assert out["implied_distance_mpc"][k] == sources[k].distance
            assert math.isnan(out["mass_source"][k])


def test_make_sources_names_the_injection_it_cannot_make():
    table = check_injection_table(rows(mass=[65.0, 80.0, 12.0]))  # (2,2,0) near 1.5 kHz
    with pytest.raises(InputError, match="injection 2 cannot be made") as err:
        make_sources(table, {"H1": _psd(2048.0)}, 2048.0, 20.0, 800.0)
    assert one_sentence(str(err.value))
