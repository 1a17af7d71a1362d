"""Safe writing of results: refuse to overwrite without ``force``; temporary name, then rename.

An interrupted write leaves the previous file (or none), never a truncated one.  New files get
the permissions the user's umask allows (0644 under the usual 022), like any other tool's.

Every CSV file goes through :func:`write_csv`, which guards text cells against spreadsheet
formula injection (see :func:`protect_cell`); :func:`restore_cell` undoes it when a CSV is read back.
"""

from __future__ import annotations

import csv
import json
import os
import secrets
from pathlib import Path

import pandas as pd

from samplewright.errors import InputError


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


def _new_temp(path: Path) -> Path:
    """Create an empty, uniquely named file beside ``path``, mode 0666 less the umask (not mkstemp's 0600)."""
    for _ in range(100):
        tmp = path.with_name(f".{path.name}.{secrets.token_hex(6)}.tmp")
        try:
            fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)  # the kernel applies the umask
        except FileExistsError:
            continue
        os.close(fd)
        return tmp
    raise FileExistsError(f"no free temporary name beside {path.name}")


def atomic_write(path, write) -> Path:
    """Call ``write(tmp_path)`` on a temporary file beside ``path``, then rename it into place.

    The file ends with the permissions of any new file under the user's umask.
    """
    return write_together([(path, write)])[0]


def write_together(items) -> list[Path]:
    """Write several files as one step: each ``write(tmp)`` of ``items`` (pairs of path and
    write function, called in order) fills a temporary file beside its path, and only when
    every one succeeded are they all renamed into place.

    A failure before the renames leaves none of the files (nor any temporary one) behind, so
    files that belong together (a sample and its selection record) never appear one without the
    other.  Each file gets the permissions of a new file under the user's umask.
    """
    temps = []
    try:
        for path, write in items:
            path = Path(path)
            try:
                temps.append((_new_temp(path), path))
            except OSError as exc:
                raise InputError(f"{str(path)!r} cannot be written: {exc.strerror or exc}") from None
            write(temps[-1][0])
        for tmp, path in temps:
            os.replace(tmp, path)
    except BaseException as exc:
        for tmp, _ in temps:
            try:
                os.unlink(tmp)
            except OSError:
                pass
        if isinstance(exc, OSError):  # disk full, permissions changed, a folder in the way
            raise InputError(f"{str(temps[-1][1]) if temps else '?'!r} cannot be written: "
                             f"{exc.strerror or exc}") from None
        raise
    return [path for _, path in temps]


#: first characters that make a spreadsheet read a text cell as a formula ("CSV injection")
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def _formula_like(text: str) -> bool:
    """Would ``text``, less any leading single quotes, start a spreadsheet formula?

    A signed number written as text (``-1.5``) is not a formula and is left alone.
    """
    core = text.lstrip("'")
    if not core.startswith(FORMULA_START):
        return False
    if core[0] in "+-" and core == core.strip():
        try:
            float(core)
            return False
        except ValueError:
            pass
    return True


def protect_cell(value):
    """A text cell that a spreadsheet would run as a formula, prefixed with one single quote.

    The usual protection against formula injection: ``=HYPERLINK("x")`` is written
    ``'=HYPERLINK("x")``.  A text that already starts with quotes before such a character gets
    one more, so that :func:`restore_cell` gives every text back exactly.  Numbers are untouched.

    Examples
    --------
    >>> protect_cell('=1+2'), protect_cell("'=x"), protect_cell('-1.5'), protect_cell(-1.5), protect_cell('a')
    ("'=1+2", "''=x", '-1.5', -1.5, 'a')
    """
    return "'" + value if isinstance(value, str) and _formula_like(value) else value


def restore_cell(value):
    """Undo :func:`protect_cell` on a cell read back from a CSV file written by samplewright."""
    if isinstance(value, str) and value.startswith("'") and _formula_like(value[1:]):
        return value[1:]
    return value


def _text_columns(df: pd.DataFrame) -> list:
    return [c for c in df.columns if not (pd.api.types.is_numeric_dtype(df[c]) or pd.api.types.is_bool_dtype(df[c]))]


def protect_table(df: pd.DataFrame) -> pd.DataFrame:
    """``df`` with :func:`protect_cell` applied to every text cell and column name (a copy when needed)."""
    out = df.rename(columns=protect_cell)
    for c in _text_columns(out):
        out[c] = out[c].astype(object).map(protect_cell)
    return out


def restore_table(df: pd.DataFrame) -> pd.DataFrame:
    """Undo :func:`protect_table` on a table read from CSV (text columns and column names)."""
    out = df.rename(columns=restore_cell)
    for c in _text_columns(out):
        out[c] = out[c].map(restore_cell)
    return out


def write_csv(df: pd.DataFrame, path) -> Path:
    """Write ``df`` as CSV (no index) with formula-like text cells protected (:func:`protect_table`).

    A text cell holding a carriage return is quoted only when the whole file quotes its text
    cells (Python's csv writer quotes line breaks of its own line terminator only), so such a
    table is written with every text cell quoted; any other is written with minimal quoting.
    """
    return atomic_write(path, csv_writer(df))


def csv_writer(df: pd.DataFrame):
    """The function :func:`write_csv` writes ``df`` with, given a (temporary) path: for :func:`write_together`."""
    safe = protect_table(df)
    text = _text_columns(safe)
    has_cr = any(safe[c].map(lambda v: isinstance(v, str) and "\r" in v).any() for c in text) or any(
        isinstance(c, str) and "\r" in c for c in safe.columns)
    quoting = csv.QUOTE_NONNUMERIC if has_cr else csv.QUOTE_MINIMAL
    return lambda t: safe.to_csv(t, index=False, quoting=quoting)


def write_parquet(df: pd.DataFrame, path, rows_per_group: int = 500_000) -> Path:
    """Write ``df`` as Parquet, converting at most ``rows_per_group`` rows at a time.

    Converting a long replicate table in one piece would hold a second full copy of it in
    memory; row groups keep that copy to one group.  A table whose later rows do not fit the
    first group's column types (a column blank at first) is written in one piece instead.
    """
    return atomic_write(path, parquet_writer(df, rows_per_group))


def parquet_writer(df: pd.DataFrame, rows_per_group: int = 500_000):
    """The function :func:`write_parquet` writes ``df`` with, given a (temporary) path."""
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

    return write


class ParquetRows:
    """A Parquet file written piece by piece: each :meth:`write` adds a DataFrame of rows (one row group,
    the types of the first piece) to a temporary file beside ``path`` (named as :func:`atomic_write`'s
    temporary files are, mode 0666 less the umask); :meth:`close` finishes it and returns its path, which
    the caller renames into place.  Only one piece is converted at a time, never the whole table.
    ``dictionary`` names the columns to dictionary-encode (default: the text columns)."""

    def __init__(self, path, dictionary: list[str] | None = None):
        self.target = Path(path)
        self.dictionary = dictionary
        try:
            self.path = _new_temp(self.target)
        except OSError as exc:
            raise InputError(f"{str(self.target)!r} cannot be written: {exc.strerror or exc}") from None
        self.rows = 0
        self._writer = None

    def write(self, df: pd.DataFrame) -> None:
        import pyarrow as pa
        import pyarrow.parquet as pq

        schema = None if self._writer is None else self._writer.schema
        table = pa.Table.from_pandas(df, schema=schema, preserve_index=False)
        if self._writer is None:  # dictionary-encoded: the columns named, else the text columns (a column
            # of distinct numbers gains nothing, and its dictionary costs about 30 MB per 131,072 rows to build)
            keep = self.dictionary if self.dictionary is not None else [
                f.name for f in table.schema if pa.types.is_string(f.type) or pa.types.is_large_string(f.type)]
            self._writer = pq.ParquetWriter(self.path, table.schema, use_dictionary=keep)
        self._writer.write_table(table)
        self.rows += len(df)

    def close(self, empty: pd.DataFrame | None = None) -> Path:
        """Finish the file (``empty``, a table without rows, is written when no piece was)."""
        if self._writer is None:
            (empty if empty is not None else pd.DataFrame()).to_parquet(self.path, index=False)
        else:
            self._writer.close()
            self._writer = None
        return self.path

    def discard(self) -> None:
        """Close and delete the temporary file (a run that failed)."""
        if self._writer is not None:
            try:
                self._writer.close()
            except Exception:  # noqa: BLE001 -- the file goes anyway
                pass
            self._writer = None
        self.path.unlink(missing_ok=True)


def write_json(obj, path) -> Path:
    return atomic_write(path, json_writer(obj))


def json_writer(obj):
    """The function :func:`write_json` writes ``obj`` with, given a (temporary) path."""
    return lambda t: t.write_text(json.dumps(obj, indent=2, default=_jsonable) + "\n")


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
