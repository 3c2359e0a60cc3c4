"""Reading and writing strain: open data, joining files, data quality, bad input."""

from __future__ import annotations

import shutil

import h5py
import numpy as np
import pytest
from gwpy.timeseries import TimeSeries

from ringsearch.data.io import (
    analysable_segments,
    detector_from_filename,
    finite_segments,
    read_detectors,
    read_strain,
    read_strain_with_quality,
    write_gwosc_hdf5,
)
from ringsearch.data.noise import gaussian_noise
from ringsearch.data.psd import estimate_psd
from ringsearch.errors import InputError


def _segs(sl):
    return [(float(a), float(b)) for a, b in sl]


# ------------------------------------------------------------------ open data (GW150914)

def test_gw150914_files_read_with_right_span_rate_and_detector(gw150914_files):
    import ringsearch

    for det, path in gw150914_files.items():
        strain = ringsearch.read_strain(path)
        # Shipped README / GWOSC file name: GPS 1126259446, 32 s, 4096 Hz.
        assert strain.name == det and str(strain.channel) == f"{det}:STRAIN"
        assert float(strain.t0.value) == 1126259446.0
        assert float(strain.duration.value) == 32.0
        assert float(strain.sample_rate.value) == 4096.0
        assert np.all(np.isfinite(strain.value))
        # Same samples as gwpy's own GWOSC reader (reference library).
        ref = TimeSeries.read(path, format="hdf5.gwosc")
        assert np.array_equal(strain.value, ref.value)


def test_gw150914_asd_level(gw150914_files):
    for path in gw150914_files.values():
        psd = ringsearch_estimate(path)
        f = psd.frequencies.value
        band = (f >= 100) & (f <= 300)
        med = np.median(np.sqrt(psd.value[band]))
        # Early advanced-detector era (O1) sensitivity, about 8e-24 /rtHz in these files.
        assert 5e-24 < med < 2e-23  # common practice


def ringsearch_estimate(path):
    import ringsearch

    return ringsearch.estimate_psd(ringsearch.read_strain(path), seglen=4.0)


def test_gw150914_quality_segments(gw150914_files):
    # Both files pass every DQ category for all 32 s.  L1 carries a continuous-wave
    # hardware injection throughout (Injmask 23: bit NO_CW_HW_INJ clear), which must not
    # remove the data from a transient search.
    data = read_detectors(list(gw150914_files.values()))
    assert list(data) == ["H1", "L1"]
    for _det, (_strain, segs) in data.items():
        assert _segs(segs) == [(1126259446.0, 1126259478.0)]
    with h5py.File(gw150914_files["L1"]) as f:
        assert int(f["quality/injections/Injmask"][0]) == 23
    assert _segs(analysable_segments(gw150914_files["L1"], dq_level="BURST_CAT3")) == \
        [(1126259446.0, 1126259478.0)]


# ------------------------------------------------------------------ synthetic round trips

@pytest.fixture
def sim():
    return gaussian_noise("design", 8.0, 1024, 21, gps_start=1000000000.5, detector="L1")


def test_write_read_round_trip(tmp_path, sim):
    path = write_gwosc_hdf5(sim, tmp_path / "sim.hdf5")
    back = read_strain(path)
    assert back.name == "L1"
    assert float(back.t0.value) == 1000000000.5
    assert back.value.tobytes() == sim.value.tobytes()
    # gwpy's GWOSC reader reads our layout too.
    ref = TimeSeries.read(path, format="hdf5.gwosc")
    assert np.array_equal(ref.value, sim.value)
    # Same seed, same bytes through the file.
    again = write_gwosc_hdf5(gaussian_noise("design", 8.0, 1024, 21, gps_start=1000000000.5,
                                            detector="L1"), tmp_path / "again.hdf5")
    assert read_strain(again).value.tobytes() == back.value.tobytes()
    # An explicit detector overrides the file's.
    assert read_strain(path, detector="V1").name == "V1"
    assert not list(tmp_path.glob(".*tmp"))  # nothing half-written left


def test_contiguous_files_join_and_gaps_stay_nan(tmp_path):
    x = gaussian_noise("design", 12.0, 512, 4, gps_start=100.0)
    a, b, c = x.crop(100, 104), x.crop(104, 108), x.crop(108, 112)
    pa = write_gwosc_hdf5(a, tmp_path / "H-H1_A-100-4.hdf5")
    pb = write_gwosc_hdf5(b, tmp_path / "H-H1_B-104-4.hdf5")
    pc = write_gwosc_hdf5(c, tmp_path / "H-H1_C-108-4.hdf5")
    joined = read_strain([pc, pa, pb])  # order of the list does not matter
    assert np.array_equal(joined.value, x.value)
    gappy, segs = read_strain_with_quality([pa, pc])
    assert float(gappy.duration.value) == 12.0
    assert np.all(np.isnan(gappy.value[4 * 512:8 * 512]))
    assert _segs(finite_segments(gappy)) == [(100.0, 104.0), (108.0, 112.0)]
    assert _segs(segs) == [(100.0, 104.0), (108.0, 112.0)]


def test_data_quality_and_injection_bits(tmp_path, sim):
    x = gaussian_noise("design", 8.0, 256, 9, gps_start=200.0)
    dq = np.full(8, 127, dtype=np.uint32)
    dq[2] &= ~np.uint32(1 << 2)  # CBC_CAT2 fails in [202, 203)
    dq[5] = 0  # no data flag at all in [205, 206)
    inj = np.full(8, 31, dtype=np.uint32)
    inj[3] &= ~np.uint32(1 << 0)  # a CBC hardware injection in [203, 204)
    inj[6] &= ~np.uint32(1 << 3)  # a continuous-wave injection: does not matter
    path = write_gwosc_hdf5(x, tmp_path / "dq.hdf5", dq_mask=dq, inj_mask=inj)
    assert _segs(analysable_segments(path)) == [(200.0, 202.0), (204.0, 205.0), (206.0, 208.0)]
    assert _segs(analysable_segments(path, dq_level="CBC_CAT1")) == \
        [(200.0, 203.0), (204.0, 205.0), (206.0, 208.0)]
    assert _segs(analysable_segments(path, dq_level="DATA", injections="keep")) == \
        [(200.0, 205.0), (206.0, 208.0)]
    assert _segs(analysable_segments(path, dq_level="NONE", injections="keep")) == \
        [(200.0, 208.0)]
    with pytest.raises(InputError, match="no data-quality bit named CBC_CAT9"):
        analysable_segments(path, dq_level="CBC_CAT9")
    with pytest.raises(InputError, match="injections"):
        analysable_segments(path, injections="maybe")


def test_text_files(tmp_path, sim):
    one = tmp_path / "H-H1_TXT-0-8.txt"
    np.savetxt(one, sim.value)
    s = read_strain(one, sample_rate=1024, gps_start=1000000000.5)
    assert s.name == "H1" and np.allclose(s.value, sim.value, rtol=1e-15)
    two = tmp_path / "strain.dat"
    np.savetxt(two, np.column_stack([sim.times.value, sim.value]), fmt="%.17g")
    s2 = read_strain(two, detector="L1")
    assert float(s2.sample_rate.value) == 1024.0 and s2.name == "L1"
    assert float(s2.t0.value) == pytest.approx(1000000000.5, abs=1e-6)
    with pytest.raises(InputError, match="sample rate .*GPS start"):
        read_strain(one)
    with pytest.raises(InputError, match="cannot tell which detector"):
        read_strain(two)
    with pytest.raises(InputError, match="not the 2048 Hz given"):
        read_strain(two, detector="L1", sample_rate=2048)
    uneven = tmp_path / "uneven.txt"
    np.savetxt(uneven, [[0.0, 1e-21], [1.0, 1e-21], [3.0, 1e-21]])
    with pytest.raises(InputError, match="unevenly spaced"):
        read_strain(uneven, detector="H1")


def test_detector_from_gwosc_names():
    assert detector_from_filename("H-H1_LOSC_4_V2-1126259446-32.hdf5") == "H1"
    assert detector_from_filename("L-L1_GWOSC_4KHZ_R1-1126256640-4096.hdf5") == "L1"
    assert detector_from_filename("mydata.hdf5") is None


# ------------------------------------------------------------------ bad input

def test_missing_and_non_strain_files(tmp_path):
    with pytest.raises(InputError, match=r"nothere\.hdf5 does not exist"):
        read_strain(tmp_path / "nothere.hdf5")
    other = tmp_path / "other.hdf5"
    with h5py.File(other, "w") as f:
        f["x"] = np.arange(3)
    with pytest.raises(InputError, match="not a GWOSC strain file"):
        read_strain(other)
    garbage = tmp_path / "garbage.hdf5"
    garbage.write_bytes(b"this is not hdf5 at all" * 10)
    with pytest.raises(InputError, match="garbage.hdf5 is not a readable HDF5 file"):
        read_strain(garbage)
    words = tmp_path / "words.txt"
    words.write_text("hello strain\n")
    with pytest.raises(InputError, match="not a text table of numbers"):
        read_strain(words, detector="H1")
    empty = tmp_path / "empty.txt"
    empty.write_text("")
    with pytest.raises(InputError, match="empty"):
        read_strain(empty, detector="H1")
    with pytest.raises(InputError, match="no strain files"):
        read_strain([])


def test_two_dimensional_strain_is_refused(tmp_path):
    """Shapes (N, 2) and (2, N) with Npoints equal to the flattened size (found by an
    independent trial to end in a numpy broadcast error) name the file and the shape."""
    from ringsearch.data.io import open_detectors

    for shape in [(64, 2), (2, 64)]:
        path = tmp_path / f"H-H1_BAD-{shape[0]}.hdf5"
        with h5py.File(path, "w") as f:
            d = f.create_dataset("strain/Strain", data=np.full(shape, 1e-21))
            d.attrs.update({"Xstart": 0.0, "Xspacing": 1 / 64, "Npoints": 128})
        expected = rf"shape \({shape[0]}, {shape[1]}\).*one-dimensional"
        for reader in (read_strain, open_detectors):
            with pytest.raises(InputError, match=expected):
                reader(path)


def test_truncated_file(tmp_path, sim):
    full = write_gwosc_hdf5(sim, tmp_path / "full.hdf5")
    cut = tmp_path / "cut.hdf5"
    data = full.read_bytes()
    cut.write_bytes(data[: len(data) // 2])
    with pytest.raises(InputError, match="cut.hdf5"):
        read_strain(cut)


def test_truncated_open_data_copy(tmp_path, gw150914_files):
    cut = tmp_path / "H-H1_LOSC_4_V2-1126259446-32.hdf5"
    shutil.copy(gw150914_files["H1"], cut)
    cut.write_bytes(cut.read_bytes()[:600_000])
    with pytest.raises(InputError, match=r"H-H1_LOSC_4_V2-1126259446-32\.hdf5"):
        read_strain(cut)


def test_all_nan_zero_and_misscaled(tmp_path):
    base = gaussian_noise("design", 4.0, 256, 1)
    for name, values, match in [
        ("nan.hdf5", np.full(base.size, np.nan), "no finite strain"),
        ("zero.hdf5", np.zeros(base.size), "only zeros"),
        ("scaled.hdf5", base.value * 1e21, "not in strain units"),
    ]:
        ts = TimeSeries(values, t0=0, sample_rate=256, name="H1")
        path = write_gwosc_hdf5(ts, tmp_path / name)
        with pytest.raises(InputError, match=match):
            read_strain(path)


def test_inconsistent_file_sets(tmp_path):
    h = write_gwosc_hdf5(gaussian_noise("design", 4.0, 256, 1, gps_start=0.0),
                         tmp_path / "h.hdf5")
    h512 = write_gwosc_hdf5(gaussian_noise("design", 4.0, 512, 1, gps_start=4.0),
                            tmp_path / "h512.hdf5")
    l512 = write_gwosc_hdf5(gaussian_noise("design", 4.0, 512, 1, detector="L1"),
                            tmp_path / "l512.hdf5")
    overlap = write_gwosc_hdf5(gaussian_noise("design", 4.0, 256, 2, gps_start=2.0),
                               tmp_path / "overlap.hdf5")
    shifted = write_gwosc_hdf5(gaussian_noise("design", 4.0, 256, 2, gps_start=8.001),
                               tmp_path / "shifted.hdf5")
    with pytest.raises(InputError, match="sampled at 512 Hz but file .*256 Hz"):
        read_strain([h, h512])
    with pytest.raises(InputError, match="different detectors"):
        read_strain([h, l512])
    with pytest.raises(InputError, match="overlap"):
        read_strain([h, overlap])
    with pytest.raises(InputError, match="misaligned"):
        read_strain([h, shifted])
    with pytest.raises(InputError, match="all detectors need one rate"):
        read_detectors([h, l512])


def test_too_short_for_psd_segment(tmp_path):
    path = write_gwosc_hdf5(gaussian_noise("design", 2.0, 256, 1), tmp_path / "short.hdf5")
    with pytest.raises(InputError, match="PSD segment length 4 s"):
        estimate_psd(read_strain(path), seglen=4.0)


def test_gwf_without_frame_library_names_the_extra(tmp_path, monkeypatch):
    """Without a frame library the error names the extra to install."""
    import sys

    for name in ("lalframe", "framel", "LDAStools"):   # makes each import fail
        monkeypatch.setitem(sys.modules, name, None)
    frame = tmp_path / "H-H1_SIM-0-4.gwf"
    frame.write_bytes(b"IGWD" + b"\0" * 100)
    with pytest.raises(InputError, match="'frames' extra"):
        read_strain(frame)


def test_gwf_round_trip_through_frame_library(tmp_path):
    """A GWF frame written by gwpy reads back sample for sample, detector from the channel."""
    pytest.importorskip("lalframe", reason="the 'frames' extra is not installed")
    from gwpy.timeseries import TimeSeries

    values = np.random.default_rng(5).normal(size=4096 * 4) * 1e-21
    original = TimeSeries(values, sample_rate=4096, t0=1_000_000_000,
                          name="L1:GDS-CALIB_STRAIN", channel="L1:GDS-CALIB_STRAIN")
    path = tmp_path / "frame-1000000000-4.gwf"   # no detector in the file name
    original.write(str(path))
    strain = read_strain(path)
    assert strain.name == "L1"
    assert float(strain.t0.value) == 1_000_000_000
    assert float(strain.sample_rate.value) == 4096
    np.testing.assert_array_equal(strain.value, values)
    broken = tmp_path / "H-H1_BROKEN-0-4.gwf"
    broken.write_bytes(path.read_bytes()[:200])
    with pytest.raises(InputError, match="truncated or corrupt"):
        read_strain(broken)


def test_write_rejects_bad_masks(tmp_path, sim):
    with pytest.raises(InputError, match="dq_mask has 3 values"):
        write_gwosc_hdf5(sim, tmp_path / "x.hdf5", dq_mask=[1, 2, 3])
    assert not (tmp_path / "x.hdf5").exists()
    # the reader picks the format by suffix, so HDF5 bytes in x.txt could not be read back
    with pytest.raises(InputError, match=r"\.hdf5"):
        write_gwosc_hdf5(sim, tmp_path / "x.txt")
    (tmp_path / "d.hdf5").mkdir()
    with pytest.raises(InputError, match="folder"):
        write_gwosc_hdf5(sim, tmp_path / "d.hdf5")
    assert not (tmp_path / "x.txt").exists()
