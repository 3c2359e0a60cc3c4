"""Atomic output: files and folders appear whole or not at all.

Every writer in ringsearch goes through these helpers, so an interrupted run
never leaves a half-written table, figure or output folder behind.
"""

from __future__ import annotations

import contextlib
import math
import os
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import Any


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path next to ``path``; rename it onto ``path`` on success.

    On an exception the temporary file is removed and ``path`` is untouched.

    Examples
    --------
    >>> import pandas as pd, tempfile, pathlib
    >>> out = pathlib.Path(tempfile.mkdtemp()) / "t.csv"
    >>> with atomic_path(out) as tmp:
    ...     pd.DataFrame({"a": [1]}).to_csv(tmp, index=False)
    >>> out.exists()
    True
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    tmp = Path(tmp)
    # mkstemp creates 0600; give the final file the usual permissions (0666 less umask)
    os.chmod(tmp, 0o666 & ~_umask())
    try:
        yield tmp
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_text(path: str | os.PathLike, text: str) -> Path:
    """Write ``text`` to ``path`` atomically and return the path."""
    with atomic_path(path) as tmp:
        tmp.write_text(text)
    return Path(path)


@contextlib.contextmanager
def staged_directory(out: str | os.PathLike) -> Iterator[Path]:
    """Build an output folder in a hidden sibling, then move it into place.

    ``out`` must not exist or be empty.  On success the staged folder replaces
    ``out``; on any exception it is deleted, so ``out`` never holds partial
    results.
    """
    out = Path(out)
    if out.exists() and any(out.iterdir()):
        from ringsearch.errors import InputError

        raise InputError(f"output folder {out} already exists and is not empty.")
    out.parent.mkdir(parents=True, exist_ok=True)
    stage = Path(tempfile.mkdtemp(prefix=f".{out.name}.", suffix=".partial", dir=out.parent))
    os.chmod(stage, 0o777 & ~_umask())
    try:
        yield stage
        if out.exists():
            out.rmdir()
        os.replace(stage, out)
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise


def json_safe(value: Any) -> Any:
    """Plain JSON values: numpy scalars and arrays to Python, NaN and infinities to None.

    ``json.dumps`` would write ``NaN`` and ``Infinity`` tokens, which are not JSON.

    Examples
    --------
    >>> import numpy as np
    >>> json_safe({"a": np.float64(1.5), "b": [float("nan"), np.arange(2)]})
    {'a': 1.5, 'b': [None, [0, 1]]}
    """
    if isinstance(value, dict):
        return {str(k): json_safe(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [json_safe(v) for v in value]
    if hasattr(value, "tolist") and hasattr(value, "dtype"):  # numpy scalars and arrays
        value = value.tolist()
        if isinstance(value, list):
            return json_safe(value)
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if hasattr(value, "__fspath__"):
        return os.fspath(value)
    return value


def write_json(path: str | os.PathLike, obj: Any, indent: int | None = 2,
               sort_keys: bool = False) -> Path:
    """Write ``obj`` as strict JSON (see :func:`json_safe`) atomically; returns the path.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = write_json(pathlib.Path(tempfile.mkdtemp()) / "s.json", {"x": float("nan")})
    >>> p.read_text().strip()
    '{\\n  "x": null\\n}'
    """
    import json

    text = json.dumps(json_safe(obj), indent=indent, sort_keys=sort_keys, allow_nan=False)
    return write_text(path, text + "\n")
