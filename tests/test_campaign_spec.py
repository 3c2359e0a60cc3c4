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
