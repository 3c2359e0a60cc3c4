"""Injection into real and synthetic strain, SNR tables, and the ``inject`` command."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from gwpy.frequencyseries import FrequencySeries
from gwpy.timeseries import TimeSeries

from ringsearch.cli import main
from ringsearch.data.inject import inject, inject_network, signal_snr, snr_table
from ringsearch.errors import InputError
from ringsearch.physics.ringdown import Mode, RingdownSource, kerr_modes, optimal_snr

GPS0 = 1126259446.0


def _source(t0, **kw):
    base = dict(mass=68.0, spin=0.69, distance=400.0, epsilon=0.02, t0=t0, ra=1.95, dec=-1.27,
                psi=0.8, inclination=2.6, modes=kerr_modes(2, ratios=[1.5, 2.0],
                                                           phases=[0.5, -1.0]))
    base.update(kw)
    return RingdownSource(**base)


def _white(detector, seed, duration=8.0, fs=4096.0, sigma=1e-21, t0=GPS0):
    rng = np.random.default_rng(seed)
    return TimeSeries(rng.normal(0.0, sigma, int(duration * fs)), t0=t0, sample_rate=fs,
                      name=detector, channel=f"{detector}:STRAIN")


def _check_support_only(before, after, signals, detector):
    """Outside every signal's support the samples are bitwise equal; inside, the added
    values are the signals evaluated at the exact sample times."""
    t = before.times.value
    rel = np.arange(t.size) * before.dt.value  # offsets from the start, for full precision
    inside = np.zeros(t.size, bool)
    added = np.zeros(t.size)
    for s in signals:
        a, b = s.support(detector)
        mask = (t >= a) & (t < b)
        inside |= mask
        added[mask] += s.detector_strain(detector, rel[mask], epoch=before.t0.value)
    assert inside.any()
    assert before.value[~inside].tobytes() == after.value[~inside].tobytes()
    np.testing.assert_allclose(after.value[inside] - before.value[inside], added[inside],
                               rtol=0, atol=1e-6 * np.abs(added).max())


def test_injection_into_synthetic_noise_touches_only_the_support():
    from ringsearch.data.noise import gaussian_noise

    h1 = gaussian_noise("design", 8.0, 4096, 11, gps_start=GPS0, detector="H1")
    l1 = gaussian_noise("design", 8.0, 4096, 12, gps_start=GPS0, detector="L1")
    keep = {k: v.value.copy() for k, v in (("H1", h1), ("L1", l1))}
    sigs = [_source(GPS0 + 2.30001), _source(GPS0 + 5.5, mass=30.0, ra=0.3, dec=0.9)]
    out = inject_network([h1, l1], sigs)
    assert sorted(out) == ["H1", "L1"]
    for det, series in (("H1", h1), ("L1", l1)):
        assert series.value.tobytes() == keep[det].tobytes()  # caller's data unchanged
        assert out[det] is not series
        _check_support_only(series, out[det], sigs, det)
        assert out[det].t0 == series.t0 and out[det].name == det
    # each detector sees the signal at its own arrival time
    first = {det: out[det].times.value[np.nonzero(out[det].value - s.value)[0][0]]
             for det, s in (("H1", h1), ("L1", l1))}
    delay = sigs[0].arrival_time("H1") - sigs[0].arrival_time("L1")
    assert first["H1"] - first["L1"] == pytest.approx(delay, abs=1 / 4096)


def test_injection_into_open_data_away_from_the_event(gw150914_files):
    from ringsearch.data.io import read_strain

    h1 = read_strain(gw150914_files["H1"])
    keep = h1.value.copy()
    src = _source(GPS0 + 4.0)  # 12 s before GW150914's merger: detector noise only
    out = inject(h1, src)
    assert h1.value.tobytes() == keep.tobytes()
    _check_support_only(h1, out, [src], "H1")
    # a signal entirely outside the data adds nothing and still returns a copy
    far = inject(h1, _source(GPS0 + 100.0))
    assert far.value.tobytes() == keep.tobytes() and far is not h1


def test_matched_filter_of_injected_signal_has_the_optimal_snr_as_mean():
    # Detection theory: in white Gaussian noise (one-sided PSD S0 = 2 sigma^2 / fs) the
    # normalised matched-filter output z = <d, h> / sqrt(<h, h>) at the true signal is
    # N(rho_opt, 1).  With 60 seeded realisations, |mean - rho| < 4.5 / sqrt(60) and
    # 0.55 < sample variance < 1.6 each fail with probability < 1e-4 (normal and
    # chi-squared(59) tails).
    fs, sigma = 2048.0, 1e-21
    s0 = 2 * sigma**2 / fs
    src = _source(GPS0 + 1.2, distance=60.0, modes=(Mode(2, 2, 0), Mode(2, 2, 1, 1.0, 0.3)))
    psd = FrequencySeries(np.full(1025, s0), df=1.0)
    clean = inject(TimeSeries(np.zeros(int(2 * fs)), t0=GPS0, sample_rate=fs, name="L1"), src)
    rho = optimal_snr(clean, psd, f_low=0.0)
    z = []
    for seed in range(60):
        data = inject(_white("L1", seed, 2.0, fs, sigma), src)
        z.append((2 / s0) / fs * np.dot(data.value, clean.value) / rho)
    z = np.array(z)
    assert 3 < rho < 100
    assert abs(z.mean() - rho) < 4.5 / math.sqrt(z.size)
    assert 0.55 < z.var(ddof=1) < 1.6


def test_snr_table_and_signal_snr():
    f = np.arange(0.0, 2048.25, 0.25)
    psd = FrequencySeries(1e-46 * (1 + (f / 200) ** 2 + (40 / np.maximum(f, 1)) ** 6),
                          frequencies=f)
    sigs = [_source(GPS0 + 1.0), _source(GPS0 + 1.0, distance=800.0)]
    table = snr_table(sigs, {"H1": psd, "L1": psd})
    assert table.columns.tolist() == ["snr_H1", "snr_L1", "snr_network"]
    np.testing.assert_allclose(table.snr_network ** 2, table.snr_H1 ** 2 + table.snr_L1 ** 2)
    # SNR scales as 1 / distance
    assert table.snr_H1[0] / table.snr_H1[1] == pytest.approx(2.0, rel=1e-12)
    assert signal_snr(sigs[0], "H1", psd) == pytest.approx(table.snr_H1[0])


def test_bad_injection_input():
    noise = _white("H1", 0, 1.0, 1024.0)
    with pytest.raises(InputError, match="too low"):
        inject(noise, _source(GPS0 + 0.5, mass=10.0))  # (2,2,2) at ~1.2 kHz > 512 Hz
    with pytest.raises(InputError, match="unknown detector"):
        inject(noise, _source(GPS0 + 0.5), detector="Q3")
    with pytest.raises(InputError, match="not a waveform model"):
        inject(noise, [object()])
    with pytest.raises(InputError, match="same detector"):
        inject_network([noise, noise], _source(GPS0 + 0.5))
    with pytest.raises(InputError, match="detector name"):
        inject(TimeSeries(np.zeros(8), sample_rate=4096), _source(GPS0))
    # a signal far from the data: nothing added by default (campaign chunks), an error when
    # the caller placed it by hand
    far = _source(GPS0 + 100.0)
    assert inject(noise, far).value.tobytes() == noise.value.tobytes()
    with pytest.raises(InputError, match="does not overlap"):
        inject(noise, far, require_overlap=True)


# --------------------------------------------------------------------------- command line


@pytest.fixture
def sim_files(tmp_path):
    from ringsearch.data.io import write_gwosc_hdf5
    from ringsearch.data.noise import gaussian_noise

    paths = []
    for k, det in enumerate(("H1", "L1")):
        ts = gaussian_noise("design", 16.0, 2048, 40 + k, gps_start=GPS0, detector=det)
        paths.append(write_gwosc_hdf5(ts, tmp_path / f"{det[0]}-{det}_SIM-{int(GPS0)}-16.hdf5"))
    return paths


def test_cli_inject_with_target_snr(sim_files, tmp_path, capsys):
    from ringsearch.data.io import read_strain

    out = tmp_path / "inj"
    status = main(["inject", *map(str, sim_files), "--out", str(out), "--mass", "70",
                   "--spin", "0.7", "--overtones", "1", "--gps", str(GPS0 + 8.25),
                   "--ra", "1.0", "--dec", "0.3", "--psi", "0.2", "--inclination", "0.4",
                   "--snr", "15", "--psd", "design", "--plot"])
    assert status == 0
    rec = json.loads((out / "injection.json").read_text())
    assert rec["network_optimal_snr"] == pytest.approx(15.0, rel=1e-9)
    assert sorted(rec["detectors"]) == ["H1", "L1"]
    assert [m["n"] for m in rec["source"]["modes"]] == [0, 1]
    assert (out / "injection.png").stat().st_size > 0
    for det, path in zip(("H1", "L1"), sim_files, strict=True):
        d = rec["detectors"][det]
        new, old = read_strain(out / d["file"]), read_strain(path)
        diff = new.value - old.value
        t = old.times.value
        assert np.all(diff[t < d["arrival_gps"]] == 0.0)
        assert np.any(diff != 0.0)
    assert "network optimal SNR 15.000" in capsys.readouterr().out


def test_cli_inject_physical_amplitude_matches_api(sim_files, tmp_path):
    out = tmp_path / "phys"
    args = ["inject", str(sim_files[0]), "--out", str(out), "--mass", "60", "--spin", "0.6",
            "--gps", str(GPS0 + 9.0), "--ra", "2", "--dec", "-0.5", "--psi", "1",
            "--distance", "300", "--epsilon", "0.03", "--psd", "design",
            "--extra-mode", "3,3,0:0.2:1.0"]
    assert main(args) == 0
    rec = json.loads((out / "injection.json").read_text())
    src = RingdownSource(60.0, 0.6, 300.0, 0.03,
                         modes=kerr_modes(0, extra={(3, 3, 0): 0.2 * np.exp(1j)}),
                         t0=GPS0 + 9.0, ra=2.0, dec=-0.5, psi=1.0)
    assert rec["source"]["amplitude_220"] == pytest.approx(src.amplitude_220, rel=1e-12)
    assert rec["detectors"]["H1"]["arrival_gps"] == pytest.approx(src.arrival_time("H1"))


@pytest.mark.parametrize("extra, word", [
    (["--spin", "1.2", "--distance", "100", "--epsilon", "0.01"], "spin"),
    (["--spin", "0.5", "--distance", "100"], "--epsilon"),
    (["--spin", "0.5", "--snr", "10", "--distance", "100"], "exactly one"),
    (["--spin", "0.5", "--snr", "10", "--extra-mode", "3,3:1"], "--extra-mode"),
    (["--spin", "0.5", "--distance", "-4", "--epsilon", "0.01"], "distance"),
    (["--spin", "0.5", "--distance", "100", "--epsilon", "0.01", "--mass", "nan"], "mass"),
    # regressions: a --gps outside the data used to write unchanged files and report the SNR
    # of a signal that was never added; a declination of 9 rad was taken as a direction
    (["--spin", "0.5", "--snr", "10", "--gps", "5"], "does not overlap"),
    (["--spin", "0.5", "--snr", "10", "--dec", "9"], "declination"),
])
def test_cli_bad_input_is_one_sentence(sim_files, tmp_path, capsys, extra, word):
    status = main(["inject", str(sim_files[0]), "--out", str(tmp_path / "x"), "--mass", "60",
                   "--gps", str(GPS0 + 5), "--ra", "0", "--dec", "0", "--psi", "0",
                   "--psd", "design", *extra])
    err = capsys.readouterr().err
    assert status == 2
    assert word in err and "Traceback" not in err
    assert not (tmp_path / "x").exists()


def test_cli_inject_into_open_data_with_estimated_psd(gw150914_files, tmp_path):
    from ringsearch.data.io import analysable_segments, read_strain

    out = tmp_path / "open"
    files = [str(gw150914_files["H1"]), str(gw150914_files["L1"])]
    status = main(["inject", *files, "--out", str(out), "--mass", "65", "--spin", "0.67",
                   "--overtones", "1", "--gps", str(GPS0 + 5.123456), "--ra", "1.95",
                   "--dec", "-1.27", "--psi", "0.8", "--inclination", "2.8", "--snr", "20"])
    assert status == 0
    rec = json.loads((out / "injection.json").read_text())
    assert rec["network_optimal_snr"] == pytest.approx(20.0, rel=1e-9)
    # sanity: with the Welch PSD of real noise each detector gets a share of the SNR
    assert 2 < rec["detectors"]["H1"]["optimal_snr"] < 20
    for det in ("H1", "L1"):
        new_path = out / rec["detectors"][det]["file"]
        new, old = read_strain(new_path), read_strain(gw150914_files[det])
        lo = rec["detectors"][det]["arrival_gps"]
        t = old.times.value
        outside = (t < lo) | (t >= lo + 1.0)
        assert new.value[outside].tobytes() == old.value[outside].tobytes()
        # data-quality flags are carried over from the input file
        assert analysable_segments([new_path]) == analysable_segments([gw150914_files[det]])
