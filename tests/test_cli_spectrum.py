"""``ringsearch spectrum``: JSON and table output, plot, and one-sentence errors."""

from __future__ import annotations

import json

import pytest

from ringsearch.cli import main


def test_json_output_gw150914_like_remnant(capsys):
    status = main(["spectrum", "--spin", "0.69", "--mass", "68", "--mode", "2,2,0",
                   "--mode", "2,2,1", "--json"])
    assert status == 0
    rows = json.loads(capsys.readouterr().out)
    assert [(r["l"], r["m"], r["n"]) for r in rows] == [(2, 2, 0), (2, 2, 1)]
    for r in rows:
        assert set(r) == {"l", "m", "n", "spin", "omega_re", "omega_im", "f_hz", "tau_s"}
        assert r["spin"] == 0.69
    r0, r1 = rows
    # Abbott et al. (2016), PRL 116, 221101: ~251 Hz, ~4 ms for the GW150914 remnant
    # (# from memory)
    assert abs(r0["f_hz"] - 251.0) < 3.0 and abs(r0["tau_s"] - 4.0e-3) < 0.3e-3
    # Berti, Cardoso & Will (2006) PRD 73 064030 fit for (2,2,0), a few per cent:
    # M omega_R = 1.5251 - 1.1568 (1 - chi)^0.1292   # from memory
    assert abs(r0["omega_re"] / (1.5251 - 1.1568 * 0.31 ** 0.1292) - 1) < 0.03
    # the first overtone is damped about three times faster (Leaver 1985 spectrum;
    # # from memory)
    assert 2.5 < r0["tau_s"] / r1["tau_s"] < 3.5
    assert r1["omega_im"] < r0["omega_im"] < 0


def test_json_without_mass_has_no_physical_units(capsys):
    assert main(["spectrum", "--spin", "0", "--mode", "2,2,0", "--json"]) == 0
    (row,) = json.loads(capsys.readouterr().out)
    assert "f_hz" not in row and "tau_s" not in row
    # Schwarzschild l=2 n=0, Leaver (1985):  # from memory
    assert abs(row["omega_re"] - 0.373672) < 1e-6 and abs(row["omega_im"] + 0.088962) < 1e-6


def test_default_modes_plain_table(capsys):
    assert main(["spectrum", "--spin", "0.5", "--mass", "30"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert "Re(M*omega)" in out[0] and "f [Hz]" in out[0] and "tau [ms]" in out[0]
    assert len([ln for ln in out[1:] if ln.strip().startswith("2")]) == 4


def test_plot_file_written(tmp_path, capsys):
    png = tmp_path / "tracks.png"
    assert main(["spectrum", "--spin", "0.7", "--mass", "50", "--mode", "2,2,0",
                 "--mode", "3,3,0", "--plot", str(png)]) == 0
    assert png.stat().st_size > 1000


@pytest.mark.parametrize(
    ("argv", "fragment"),
    [
        (["--spin", "1.5"], "spin=1.5"),
        (["--spin", "abc"], "--spin 'abc'"),
        (["--spin", "nan"], "--spin 'nan'"),
        (["--spin", "0.5", "--mass", "-1"], "--mass -1"),
        (["--spin", "0.5", "--mode", "2,3,0"], "m=3"),
        (["--spin", "0.5", "--mode", "2,2,9"], "n=9"),
        (["--spin", "0.5", "--mode", "2;2;0"], "--mode '2;2;0'"),
        (["--spin", "0.5", "--mode", "1,0,0"], "l=1"),
        (["--spin", "0.5", "--mass", "nan"], "--mass 'nan'"),
        (["--spin", "0.5", "--plot", "tracks.txt"], "--plot tracks.txt"),  # was a traceback
    ],
)
def test_bad_input_exits_2_with_one_sentence(argv, fragment, capsys):
    assert main(["spectrum", *argv]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("ringsearch spectrum: error: ")
    assert fragment in err
    assert "\n" not in err and "Traceback" not in err
