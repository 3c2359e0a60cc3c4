"""Checks of the atomic writers in ringsearch.files, in particular the one strict JSON writer."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from ringsearch.files import json_safe, write_json


def _reject_constant(name: str):
    raise ValueError(f"non-JSON constant {name} in the output")


def strict_loads(text: str):
    """``json.loads`` that refuses NaN, Infinity and -Infinity.

    RFC 8259 (The JSON Data Interchange Format), section 6: "Numeric values that cannot
    be represented in the grammar below (such as Infinity and NaN) are not permitted."
    Python's json module accepts them unless ``parse_constant`` raises.
    """
    return json.loads(text, parse_constant=_reject_constant)


def test_strict_loads_rejects_the_tokens_python_writes():
    # the parser used below really catches what json.dumps writes by default
    with pytest.raises(ValueError, match="NaN"):
        strict_loads(json.dumps({"x": math.nan}))
    with pytest.raises(ValueError, match="Infinity"):
        strict_loads(json.dumps([-math.inf]))


def test_write_json_never_writes_nan_or_infinity_tokens(tmp_path):
    obj = {
        "nan": math.nan, "inf": math.inf, "-inf": -math.inf,
        "np_nan": np.float64("nan"), "np32_inf": np.float32("inf"),
        "array": np.array([1.0, np.nan, -np.inf]),
        "nested": {"tuple": (math.nan, 2.0), "list": [[np.inf], {"deep": np.nan}]},
        "finite": 0.5,
    }
    path = write_json(tmp_path / "s.json", obj)
    text = path.read_text()
    for token in ("NaN", "Infinity"):
        assert token not in text
    back = strict_loads(text)
    assert back == {
        "nan": None, "inf": None, "-inf": None, "np_nan": None, "np32_inf": None,
        "array": [1.0, None, None],
        "nested": {"tuple": [None, 2.0], "list": [[None], {"deep": None}]},
        "finite": 0.5,
    }
    assert text.endswith("\n")


def test_numpy_arrays_and_scalars_round_trip(tmp_path):
    values = {
        "int": np.int64(7), "float": np.float64(1.25), "float32": np.float32(0.5),
        "bool": np.bool_(True), "vector": np.arange(3), "matrix": np.eye(2),
        "int_matrix": np.arange(6, dtype=np.int32).reshape(2, 3),
    }
    back = strict_loads(write_json(tmp_path / "n.json", values).read_text())
    for key, value in values.items():
        assert back[key] == np.asarray(value).tolist(), key
    assert type(back["int"]) is int and type(back["bool"]) is bool
    assert type(back["float"]) is float
    np.testing.assert_array_equal(np.array(back["matrix"]), np.eye(2))


def test_json_safe_leaves_plain_values_alone():
    plain = {"a": [1, 2.5, "x", None, True], "b": {"c": -3}}
    assert json_safe(plain) == plain


def test_unserialisable_object_leaves_no_file(tmp_path):
    target = tmp_path / "bad.json"
    with pytest.raises(TypeError):
        write_json(target, {"x": object()})
    assert not target.exists()
    assert list(tmp_path.iterdir()) == []
