"""Campaign file validation: every bad key or value is one sentence naming the key."""

from __future__ import annotations

import copy
import re

import pytest

from ringsearch.campaign.spec import load_spec, spec_from_dict
from ringsearch.errors import InputError

BASE = {
    "campaign": {"seed": 7, "name": "t"},
    "data": {"source": "synthetic", "detectors": ["H1", "L1"], "chunk_s": 16, "pad_s": 2.0},
    "injections": {"count": 20, "overtones": [0, 1], "spacing_s": 2.0,
                   "mass": {"dist": "uniform", "low": 50, "high": 80},
                   "spin": {"dist": "uniform", "low": 0.3, "high": 0.9},
                   "loudness": {"by": "snr", "snr": {"dist": "uniform", "low": 1, "high": 15}}},
    "search": {"mass": [40, 100], "spin": [0.0, 0.95], "template_overtones": [0, 1]},
    "threshold": {"snr": 6.0},
}


def variant(path: str, value) -> dict:
    raw = copy.deepcopy(BASE)
    *parents, last = path.split(".")
    node = raw
    for p in parents:
        node = node[p]
    if value is KeyError:
        del node[last]
    else:
        node[last] = value
    return raw


def test_valid_spec_fills_defaults_and_hash_is_stable():
    a = spec_from_dict(copy.deepcopy(BASE))
    b = spec_from_dict(copy.deepcopy(BASE))
    assert a.config_hash == b.config_hash
    assert a.config["report"]["ci_method"] == "wilson"
    assert a.injections["inclination"] == {"dist": "isotropic"}
    c = spec_from_dict(variant("campaign.seed", 8))
    assert c.config_hash != a.config_hash


@pytest.mark.parametrize("path, value, key", [
    ("injections.colour", 3, "injections.colour"),                      # unknown key
    ("data.psd_file", "x", "data.psd_file"),
    ("injections.mass", {"dist": "uniform", "low": 90, "high": 50}, "injections.mass.low"),
    ("injections.spin", {"dist": "uniform", "low": 0.5, "high": 1.0}, "injections.spin"),
    ("injections.spin", 1.0, "injections.spin"),
    ("injections.mass", {"dist": "normal", "mean": 60, "sigma": 5}, "injections.mass"),
    ("injections.mass", {"dist": "gamma", "low": 1}, "injections.mass.dist"),
    ("injections.mass", -5, "injections.mass"),
    ("injections.count", 0, "injections.count"),
    ("injections.count", 2.5, "injections.count"),
    ("injections.overtones", [0, 0], "injections.overtones"),
    ("search.spin", [0.2, 1.0], "search.spin"),
    ("search.mass", [90, 40], "search.mass"),
    ("data.f_low", 5000.0, "data.f_low"),
    ("data.detectors", ["H1", "X9"], "data.detectors"),
    ("data.source", "frames", "data.source"),
    ("threshold.far_per_year", 1.0, "threshold"),                        # both given
    ("campaign.seed", KeyError, "campaign.seed"),
    ("injections.spacing_s", 40.0, "injections.spacing_s"),
])
def test_bad_values_name_the_key(path, value, key):
    with pytest.raises(InputError) as err:
        spec_from_dict(variant(path, value))
    message = str(err.value)
    assert key in message
    assert message.count(". ") == 0 and message.endswith(".")  # one sentence
    assert "\n" not in message


def test_far_threshold_needs_two_detectors():
    raw = variant("threshold", {"far_per_year": 1.0})
    raw["data"]["detectors"] = ["H1"]
    with pytest.raises(InputError, match="threshold.far_per_year"):
        spec_from_dict(raw)


def test_load_spec_reports_bad_toml_and_missing_file(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        load_spec(tmp_path / "nope.toml")
    bad = tmp_path / "bad.toml"
    bad.write_text("[data\nsource = 1")
    with pytest.raises(InputError, match=re.escape(str(bad))):
        load_spec(bad)


def test_missing_data_file_is_named(tmp_path):
    raw = copy.deepcopy(BASE)
    raw["data"] = {"source": "files", "files": {"H1": "missing.hdf5"}}
    with pytest.raises(InputError, match="data.files.H1"):
        spec_from_dict(raw, base=tmp_path)


def test_shipped_examples_validate():
    from pathlib import Path

    for path in sorted(Path(__file__).resolve().parents[1].glob("injections/*.toml")):
        try:
            load_spec(path)
        except InputError as exc:
            if "does not exist" in str(exc) and "data.files" in str(exc):
                continue  # open data absent in a user's clone
            raise


# ------------------------------------------------------------- search-engine settings


def test_new_defaults_are_filled_in():
    spec = spec_from_dict(copy.deepcopy(BASE))
    search = spec.search
    # the defaults of `ringsearch search` (ringsearch/cli/search.py)
    assert search["snr_threshold"] == 5.0 and search["veto"] is True
    assert search["veto_bins"] == 8 and search["veto_domain"] == "time"
    assert search["tolerance_s"] == 0.01 and search["cluster_window_s"] is None
    assert search["bank"] is None and search["bank_sha256"] is None
    assert spec.threshold["slide_step_s"] is None            # chosen by the search engine
    assert spec.data["psd_seglen_s"] == 4.0                  # as condition(seglen=4.0)
    assert spec.data["gating"] is True                       # synthetic data are gated too
    c = spec_from_dict(variant("search.veto_bins", 12))
    assert c.search["veto_bins"] == 12 and c.config_hash != spec.config_hash


@pytest.mark.parametrize("path, value, key", [
    ("search.snr_threshold", 0.0, "search.snr_threshold"),
    ("search.snr_threshold", "high", "search.snr_threshold"),
    ("search.veto", "yes", "search.veto"),
    ("search.veto_bins", 1, "search.veto_bins"),
    ("search.veto_bins", 4.5, "search.veto_bins"),
    ("search.veto_domain", "wavelet", "search.veto_domain"),
    ("search.tolerance_s", -0.001, "search.tolerance_s"),
    ("search.cluster_window_s", 0.0, "search.cluster_window_s"),
    ("search.bank", "no-such-bank.parquet", "search.bank"),
    ("threshold.slide_step_s", 0.0, "threshold.slide_step_s"),
    ("data.psd_seglen_s", 32.0, "data.psd_seglen_s"),
    ("data.gating", "auto", "data.gating"),
])
def test_bad_search_settings_name_the_key(path, value, key):
    with pytest.raises(InputError) as err:
        spec_from_dict(variant(path, value))
    message = str(err.value)
    assert key in message and message.endswith(".") and ". " not in message


def test_bank_path_is_resolved_hashed_and_limits_template_overtones(tmp_path):
    bank = tmp_path / "bank.parquet"
    bank.write_bytes(b"a bank saved by ringsearch search")   # the worker reads it, not the spec
    raw = variant("search.bank", "bank.parquet")
    del raw["search"]["template_overtones"]
    spec = spec_from_dict(raw, base=tmp_path)
    assert spec.search["bank"] == str(bank.resolve())
    assert spec.search["template_overtones"] is None         # the bank's own count
    raw["search"]["template_overtones"] = 1
    assert spec_from_dict(raw, base=tmp_path).search["template_overtones"] == [1]
    bank.write_bytes(b"another bank")
    assert spec_from_dict(raw, base=tmp_path).config_hash != spec.config_hash
    raw["search"]["template_overtones"] = [0, 1]
    with pytest.raises(InputError, match="search.template_overtones"):
        spec_from_dict(raw, base=tmp_path)


# ------------------------------------------------------------- listed injections

LIST_HEADER = "gps,mass,spin,injected_overtones,ratio_1,ra,dec,inclination,polarization,target_snr"


def write_list(folder, times, name="list.csv", spin=0.7):
    """A list of our own scenario: one-overtone ringdowns at the given GPS offsets."""
    lines = [LIST_HEADER] + [f"{1.3e9 + t!r},65.0,{spin},{k % 2},0.8,1.0,0.3,0.5,0.2,{8 + k}"
                             for k, t in enumerate(times)]
    path = folder / name
    path.write_text("\n".join(lines) + "\n")
    return path


def listed(**injections) -> dict:
    raw = copy.deepcopy(BASE)
    raw["injections"] = {"file": "list.csv", "spacing_s": 2.0, **injections}
    return raw


def test_listed_injections_enter_the_config_by_path_and_hash(tmp_path):
    path = write_list(tmp_path, [5.0, 9.0, 30.0])
    spec = spec_from_dict(listed(), base=tmp_path)
    inj = spec.injections
    assert inj["file"] == str(path.resolve()) and len(inj["file_sha256"]) == 64
    assert inj["count"] == 3 and inj["overtones"] == [0, 1] and inj["spacing_s"] == 2.0
    assert spec_from_dict(listed(), base=tmp_path).config_hash == spec.config_hash
    write_list(tmp_path, [5.0, 9.0, 31.0])
    assert spec_from_dict(listed(), base=tmp_path).config_hash != spec.config_hash


@pytest.mark.parametrize("key, value", [
    ("count", 10), ("mass", 60.0), ("spin", 0.7), ("loudness", {"by": "snr", "snr": 8}),
    ("overtones", [0, 1]), ("align_to_samples", True), ("jitter_s", 0.1), ("ra", 1.0),
])
def test_listed_injections_refuse_draw_keys(tmp_path, key, value):
    write_list(tmp_path, [5.0, 9.0])
    with pytest.raises(InputError) as err:
        spec_from_dict(listed(**{key: value}), base=tmp_path)
    message = str(err.value)
    assert f"'injections.{key}'" in message and "injections.file" in message
    assert message.endswith(".") and ". " not in message


def test_listed_injections_name_the_first_offending_key(tmp_path):
    write_list(tmp_path, [5.0])
    raw = copy.deepcopy(BASE)
    raw["injections"] = {"jitter_s": 0.1, "file": "list.csv", "count": 3}
    with pytest.raises(InputError, match="'injections.jitter_s'"):
        spec_from_dict(raw, base=tmp_path)


def test_listed_injection_file_problems(tmp_path):
    with pytest.raises(InputError, match="injections.file.*does not exist"):
        spec_from_dict(listed(), base=tmp_path)
    path = write_list(tmp_path, [5.0, 9.0], spin=1.0)
    with pytest.raises(InputError, match=re.escape(f"column 'spin' of row 1 in {path}")):
        spec_from_dict(listed(), base=tmp_path)
    write_list(tmp_path, [5.0, 9.0])
    for where, value, word in (("data.reuse", 2, "data.reuse"),
                               ("data.duration_s", 64.0, "data.duration_s"),
                               ("data.gps_start", 1.3e9 + 4.0, "data.gps_start"),
                               ("data.sample_rate", 512, "Nyquist")):
        raw = listed()
        section, name = where.split(".")
        raw[section][name] = value
        with pytest.raises(InputError, match=re.escape(word)):
            spec_from_dict(raw, base=tmp_path)
