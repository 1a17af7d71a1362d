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


def prepare_dir(out, force: bool = False, inputs=()) -> Path:
    """Create ``out`` (and parents) or check it may be written; refuse existing results unless ``force``.

    Refused always: a path that is a file, a filesystem root or the home folder (unsafe), and a
    folder that holds one of the run's ``inputs`` (scenario or frame file), which results must
    never overwrite or be mixed with.
    """
    p = Path(out)
    if p.exists() and not p.is_dir():
        raise InputError(f"output {str(p)!r} exists and is not a folder")
    real = p.resolve()
    if real == Path(real.anchor) or real == Path.home().resolve():
        kind = "the filesystem root" if real == Path(real.anchor) else "your home folder"
        raise InputError(f"output folder {str(p)!r} is {kind}; writing results there is unsafe, "
                         f"choose a new folder for --out")
    for f in inputs:
        if f is not None and Path(f).resolve().parent == real:
            raise InputError(f"output folder {str(p)!r} holds the run's input {Path(f).name!r} (scenario or "
                             f"frame file); choose a separate folder for --out so inputs are never overwritten")
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
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    except OSError as exc:
        raise InputError(f"{str(path)!r} cannot be written: {exc.strerror or exc}") from None
    os.close(fd)
    try:
        write(Path(tmp))
        os.replace(tmp, path)
    except BaseException as exc:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        if isinstance(exc, OSError):  # disk full, permissions changed, a folder in the way
            raise InputError(f"{str(path)!r} cannot be written: {exc.strerror or exc}") from None
        raise
    return path


def write_csv(df: pd.DataFrame, path) -> Path:
    return atomic_write(path, lambda t: df.to_csv(t, index=False))


def write_parquet(df: pd.DataFrame, path, rows_per_group: int = 500_000) -> Path:
    """Write ``df`` as Parquet, converting at most ``rows_per_group`` rows at a time.

    Converting a long replicate table in one piece would hold a second full copy of it in
    memory; row groups keep that copy to one group.  A table whose later rows do not fit the
    first group's column types (a column blank at first) is written in one piece instead.
    """
    def write(tmp: Path) -> None:
        if len(df) <= rows_per_group:
            df.to_parquet(tmp, index=False)
            return
        import pyarrow as pa
        import pyarrow.parquet as pq

        first = pa.Table.from_pandas(df.iloc[:rows_per_group], preserve_index=False)
        try:
            with pq.ParquetWriter(tmp, first.schema) as out:
                out.write_table(first)
                for s in range(rows_per_group, len(df), rows_per_group):
                    part = df.iloc[s:s + rows_per_group]
                    out.write_table(pa.Table.from_pandas(part, schema=first.schema, preserve_index=False))
        except (pa.ArrowInvalid, pa.ArrowTypeError):
            df.to_parquet(tmp, index=False)

    return atomic_write(path, write)


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
