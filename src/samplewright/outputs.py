"""Safe writing of results: refuse to overwrite without ``force``; temporary name, then rename.

An interrupted write leaves the previous file (or none), never a truncated one.
"""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

import pandas as pd

from .errors import InputError

#: files whose presence marks a folder as holding samplewright results
RESULT_FILES = ("run.json", "summary.csv", "replicates.parquet")


def prepare_dir(out, force: bool = False) -> Path:
    """Create ``out`` (and parents) or check it may be written; refuse existing results unless ``force``."""
    p = Path(out)
    if p.exists() and not p.is_dir():
        raise InputError(f"output {str(p)!r} exists and is not a folder")
    if p.is_dir() and any(p.iterdir()) and not force:
        raise InputError(f"output folder {str(p)!r} is not empty; use --force to overwrite its results "
                         f"or choose another --out")
    try:
        p.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"output folder {str(p)!r} cannot be created: {exc.strerror or exc}") from None
    if not os.access(p, os.W_OK):
        raise InputError(f"output folder {str(p)!r} is not writable")
    return p


def atomic_write(path, write) -> Path:
    """Call ``write(tmp_path)`` on a temporary file beside ``path``, then rename it into place."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        write(Path(tmp))
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
    return path


def write_csv(df: pd.DataFrame, path) -> Path:
    return atomic_write(path, lambda t: df.to_csv(t, index=False))


def write_parquet(df: pd.DataFrame, path) -> Path:
    return atomic_write(path, lambda t: df.to_parquet(t, index=False))


def write_json(obj, path) -> Path:
    return atomic_write(path, lambda t: t.write_text(json.dumps(obj, indent=2, default=_jsonable) + "\n"))


def write_text(text: str, path) -> Path:
    return atomic_write(path, lambda t: t.write_text(text, encoding="utf-8"))


def _jsonable(o):
    import numpy as np

    if isinstance(o, np.integer):
        return int(o)
    if isinstance(o, np.floating):
        return float(o)
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, Path):
        return str(o)
    raise TypeError(f"not JSON serialisable: {type(o).__name__}")
