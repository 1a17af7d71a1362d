"""Reading a frame file into a DataFrame: CSV in the dialects offices write, spreadsheets, Parquet.

CSV: the encoding (UTF-8 with or without BOM, UTF-16 with BOM, else cp1252), the separator
(comma, semicolon, tab or pipe: the one that splits the header and the first 100 rows into the
same number of fields) and the decimal mark (a comma when numeric-looking cells use it and the
separator is not a comma) are read from the file unless stated (the ``[frame]`` keys
``encoding``, ``separator``, ``decimal``; see :data:`samplewright.config.validate.READ_KEYS`).
A CSV file over 1 GiB is refused with a command that streams it to Parquet.  The formula guard
samplewright puts on CSV text cells it writes (:func:`samplewright.files.protect_cell`) is undone.

In every format, text cells that are numbers written with a thousands separator ("1.234,56",
"1,234.56"; the marks read from the cells unless stated) or, only when ``percent`` is true, as a
percentage ("12%" -> 0.12) become numbers; the grouping must be exact (groups of three digits), so
"1,5" never silently becomes 15.

Spreadsheets (.xlsx, .xlsm) are read with openpyxl (the optional extra ``samplewright[excel]``),
formula cells as the values the spreadsheet saved with them.  Parquet is read with pyarrow, only
the columns asked for.  Header names and text labels lose leading and trailing spaces, with a
``warning:``; a header name given twice is refused.
"""

from __future__ import annotations

import codecs
import csv
import errno
import gzip
import io
import os
import re
import stat
import sys
from itertools import islice
from pathlib import Path

import numpy as np
import pandas as pd

from samplewright.config.validate import closest
from samplewright.errors import InputError, show
from samplewright.files import restore_table

#: "looks like a table": the longest column name, and the most of the file read to check it
MAX_NAME = 64
_SNIFF_BYTES = 1 << 20
#: data rows of the sample used to check field counts and guess the decimal mark
_SAMPLE_ROWS = 100
#: a CSV file larger than this is refused with a hint to convert it to Parquet (read whole, a CSV
#: frame takes several times its size in memory; a sanity bound, no published source)
MAX_CSV_BYTES = 1 << 30
SEPARATORS = {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe"}
CSV_SUFFIXES = (".csv", ".txt", ".tsv", ".gz")
PARQUET_SUFFIXES = (".parquet", ".pq")
EXCEL_SUFFIXES = (".xlsx", ".xlsm")

_COMMA_DECIMAL = re.compile(r"[+-]?(\d{1,3}(\.\d{3})+,\d+|\d+,(\d{1,2}|\d{4,}))%?")
_POINT_DECIMAL = re.compile(r"[+-]?(\d{1,3}(,\d{3})+\.\d+|\d+\.(\d{1,2}|\d{4,}))%?")
_GROUPED = {",": re.compile(r"[+-]?\d{1,3}(\.\d{3})+,\d+%?"), ".": re.compile(r"[+-]?\d{1,3}(,\d{3})+\.\d+%?")}


def input_file(path, what: str) -> Path:
    """``path`` as a Path, refused (InputError) unless it names an existing regular file.

    A FIFO, a device (``/dev/zero``, ``/dev/stdin``) or a socket could block or never end
    when read; a symlink loop, a NUL byte in the name and a directory cannot be read at all.
    """
    text = str(path)
    if "\0" in text:
        raise InputError(f"{what} {show(text)} contains a NUL byte; no file can have that name")
    p = Path(text)
    try:
        mode = os.stat(p).st_mode  # follows symlinks
    except FileNotFoundError:
        raise InputError(f"{what} {text!r} does not exist") from None
    except OSError as exc:
        why = "is a symlink loop" if exc.errno == errno.ELOOP else f"cannot be opened: {exc.strerror or exc}"
        raise InputError(f"{what} {text!r} {why}") from None
    if stat.S_ISDIR(mode):
        raise InputError(f"{what} {text!r} is a directory, not a file")
    if not stat.S_ISREG(mode):
        raise InputError(f"{what} {text!r} is not a regular file (a FIFO, device or socket); "
                         f"give a file saved on disk")
    return p


def role_columns(roles: dict) -> list[str]:
    """The frame columns ``roles`` (as in ``FrameSpec.roles``) bind, in a stable order without repeats."""
    names = []
    for key, value in roles.items():
        if key == "domains":  # values of the domain column, not column names
            continue
        names.extend([value] if isinstance(value, str) else list(value or ()))
    return list(dict.fromkeys(n for n in names if isinstance(n, str)))


def label_columns(roles: dict) -> list[str]:
    """The columns ``roles`` bind as labels (stratum, cluster): read as dictionaries from Parquet
    (``read_table(..., labels=)``)."""
    return [roles[r] for r in ("stratum", "cluster") if isinstance(roles.get(r), str)]


def _is_text(series: pd.Series) -> bool:
    return pd.api.types.is_object_dtype(series) or pd.api.types.is_string_dtype(series)


def _is_label_text(series: pd.Series) -> bool:
    """A text column, or a categorical one of text labels (a Parquet text column read as a dictionary)."""
    if isinstance(series.dtype, pd.CategoricalDtype):
        return _is_text(pd.Series(series.cat.categories))
    return _is_text(series)


def _cells(series: pd.Series):
    """The filled cells of a column; of a categorical one, each label in use once (the same test)."""
    if isinstance(series.dtype, pd.CategoricalDtype):
        codes = series.cat.codes.to_numpy()
        return series.cat.categories[np.flatnonzero(np.bincount(codes[codes >= 0],
                                                                minlength=len(series.cat.categories)))]
    return series.dropna()


def _is_number(value) -> bool:
    """A number a spreadsheet stored as one (a yes/no cell is not one)."""
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _warn(message: str) -> None:
    print(f"warning: {message}", file=sys.stderr)


def _unique_names(names, path) -> None:
    """Refuse a column name given twice (pandas would rename or drop the second silently)."""
    seen = set()
    for name in names:
        if name in seen:
            raise InputError(f"frame file {str(path)!r}: column {show(name)} appears twice in the header; "
                             f"column names must be unique")
        seen.add(name)


# ------------------------------------------------------------------ CSV dialect
def _head(p: Path) -> bytes:
    opener = gzip.open if p.suffix.lower() == ".gz" else open
    try:
        with opener(p, "rb") as fh:
            return fh.read(_SNIFF_BYTES)
    except (OSError, EOFError) as exc:
        raise InputError(f"frame file {str(p)!r} could not be read: {type(exc).__name__}") from None


def _sample_text(p: Path, head: bytes, encoding: str | None) -> tuple[str, str]:
    """The encoding to read ``p`` with and the start of the file as text (whole lines only)."""
    not_table = f"frame file {str(p)!r} does not look like a table"
    utf16 = head.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE))
    if encoding is not None and codecs.lookup(encoding).name == "utf-8":
        encoding = "utf-8-sig"  # reads a file with or without the BOM
    if (encoding is None or not encoding.startswith("utf-16")) and b"\0" in head and not utf16:
        raise InputError(f"{not_table}: it holds NUL bytes (a binary file?); give a CSV or Parquet file")
    if encoding is not None:
        tries = [encoding]
    elif utf16:
        tries = ["utf-16"]
    else:
        tries = ["utf-8-sig", "cp1252"]
    for enc in tries:
        try:
            text = codecs.getincrementaldecoder(enc)().decode(head, final=len(head) < _SNIFF_BYTES)
        except UnicodeDecodeError:
            continue
        if len(head) == _SNIFF_BYTES:  # the last line may be cut
            text = text[:text.rfind("\n") + 1]
            if not text:
                raise InputError(f"{not_table}: its first line is longer than {_SNIFF_BYTES:,} bytes, far more "
                                 f"than a header of column names; give a CSV file with one header line")
        return enc, text
    if encoding is not None:
        raise InputError(f"frame file {str(p)!r} is not text in the stated encoding {encoding!r}")
    raise InputError(f"{not_table}: its start is not text in UTF-8, UTF-16 (with BOM) or cp1252; "
                     f"give a CSV text file or state encoding = \"...\" in [frame] (inspect: --encoding)")


def _rows(text: str, sep: str) -> list[list[str]]:
    """The header and up to 100 non-blank rows of ``text`` split on ``sep`` ([] if they cannot be split)."""
    try:
        rows = csv.reader(io.StringIO(text, newline=""), delimiter=sep)
        return list(islice((r for r in rows if any(c.strip() for c in r)), _SAMPLE_ROWS + 1))
    except csv.Error:
        return []


def _even(rows: list[list[str]]) -> bool:
    return len(rows) > 0 and len(rows[0]) > 1 and all(len(r) == len(rows[0]) for r in rows[1:])


def _separator(p: Path, text: str) -> str:
    """The separator that splits the header and the sample rows into equal numbers of fields."""
    first = text.split("\n", 1)[0]
    even = [sep for sep in SEPARATORS if sep in first and _even(_rows(text, sep))]
    if len(even) == 1:
        return even[0]
    if len(even) > 1:
        named = " and ".join(f"{sep!r} ({SEPARATORS[sep]})" for sep in even)
        raise InputError(f"frame file {str(p)!r}: its rows split evenly on {named}; state which one separates "
                         f"the columns with separator = \"...\" in [frame] (inspect: --separator)")
    seen = [sep for sep in SEPARATORS if sep in first]
    if not seen:
        return ","  # one column
    raise InputError(f"frame file {str(p)!r} does not look like a table: its rows do not all split into as many "
                     f"fields as its header on any separator (comma, semicolon, tab, pipe); give a CSV file with "
                     f"one value per column on every row, or state separator = \"...\" in [frame] "
                     f"(inspect: --separator)")


def _check_header(p: Path, rows: list[list[str]], sep: str) -> list[str]:
    """The header names, refused unless the start of the file looks like a table split on ``sep``."""
    not_table = f"frame file {str(p)!r} does not look like a table"
    names = rows[0] if rows else []
    if len(names) == 1:
        other = [s for s in SEPARATORS if s != sep and s in names[0]]
        if other:
            s = other[0]
            raise InputError(f"frame file {str(p)!r}: the header reads as one column holding {s!r} "
                             f"({SEPARATORS[s]}) characters, read with separator {sep!r}; the file looks "
                             f"{SEPARATORS[s]}-separated: set separator = {s!r} in [frame] (inspect: --separator) "
                             f"or leave it out")
    stripped = [n.strip() for n in names]
    good = names and all(0 < len(c) <= MAX_NAME and c.isprintable() for c in stripped[1:]) and (
        len(stripped[0]) <= MAX_NAME and stripped[0].isprintable())
    if not good:
        raise InputError(f"{not_table}: its first line is not a header of column names (each 1 to {MAX_NAME} "
                         f"printable characters, separated by {SEPARATORS[sep]}s)")
    if len(rows) > 1 and not any(len(r) == len(names) for r in rows[1:]):
        raise InputError(f"{not_table}: its header has {len(names)} field(s) but none of its first data lines "
                         f"has as many; give a CSV file with one value per column on every row")
    return names


def _decimal(cells, comma_separated: bool = False) -> str:
    """',' when numeric-looking ``cells`` use a decimal comma and no cell a decimal point (never guessed for a
    comma-separated file, whose unquoted commas separate fields)."""
    cells = [c.strip() for c in cells if isinstance(c, str)]
    comma = not comma_separated and any(_COMMA_DECIMAL.fullmatch(c) for c in cells)
    point = any(_POINT_DECIMAL.fullmatch(c) for c in cells)
    return "," if comma and not point else "."


def _thousands(cells, decimal: str) -> str | None:
    """The thousands separator ``cells`` show beside ``decimal`` ("1.234,56", "1,234.56"), if any."""
    if any(isinstance(c, str) and _GROUPED[decimal].fullmatch(c.strip()) for c in cells):
        return "." if decimal == "," else ","
    return None


def parquet_command(p: Path, sep: str, decimal: str, encoding: str) -> str:
    """A command that converts the CSV file ``p`` to Parquet in constant memory (pyarrow reads it in blocks)."""
    out = p.with_suffix(".parquet") if p.suffix.lower() != ".gz" else p.with_name(p.name + ".parquet")
    return (f"python3 -c \"import pyarrow.csv as c, pyarrow.parquet as q; r = c.open_csv({str(p)!r}, "
            f"read_options=c.ReadOptions(encoding={encoding!r}), parse_options=c.ParseOptions(delimiter={sep!r}), "
            f"convert_options=c.ConvertOptions(decimal_point={decimal!r})); w = q.ParquetWriter({str(out)!r}, "
            f"r.schema); [w.write_batch(b) for b in r]; w.close()\"")


def _read_csv(p: Path, separator=None, decimal=None, thousands=None, encoding=None, percent=False):
    head = _head(p)
    encoding, text = _sample_text(p, head, encoding)
    if not text.strip():
        raise InputError(f"frame file {str(p)!r} is empty")
    sep = separator or _separator(p, text)
    rows = _rows(text, sep)
    names = _check_header(p, rows, sep)
    _unique_names([n.strip() for n in names], p)
    decimal = decimal or _decimal([c for r in rows[1:] for c in r], comma_separated=sep == ",")
    size = p.stat().st_size
    if size > MAX_CSV_BYTES:
        raise InputError(f"frame file {str(p)!r} is a CSV file of {size / 2**30:.1f} GiB (over "
                         f"{MAX_CSV_BYTES // 2**30} GiB), too large to read as text; convert it once to Parquet "
                         f"and name the .parquet file in [frame]: {parquet_command(p, sep, decimal, encoding)}")
    df = pd.read_csv(p, sep=sep, decimal=decimal, encoding=encoding)
    df = restore_table(_trimmed(df, p))
    return _numbers_in_text(df, decimal, thousands, percent)


# ------------------------------------------------------------------ spreadsheets
def _cell(ws, row: int, col: int) -> str:
    from openpyxl.utils import get_column_letter

    return f"{ws.title}!{get_column_letter(col)}{row}"


def _sheet(book, sheet, p: Path):
    """The worksheet ``sheet`` names (a name, or a 0-based index; the first sheet when None)."""
    if sheet is None:
        return book.worksheets[0]
    if isinstance(sheet, int):
        if sheet >= len(book.worksheets):
            raise InputError(f"frame file {str(p)!r}: sheet = {sheet} (0-based index) but the workbook has "
                             f"{len(book.worksheets)} sheet(s)")
        return book.worksheets[sheet]
    if sheet not in book.sheetnames:
        raise InputError(f"frame file {str(p)!r}: no sheet named {show(sheet)}{closest(sheet, book.sheetnames)}")
    return book[sheet]


def _header_names(ws, header_row: int, header: list, p: Path) -> list[str]:
    """The column names in the ``header`` cells; merged or blank cells refused by name."""
    for merged in ws.merged_cells.ranges:
        if merged.min_row <= header_row <= merged.max_row:
            raise InputError(f"frame file {str(p)!r}: header cell {_cell(ws, header_row, merged.min_col)} is "
                             f"merged ({merged.coord}); give each column its own header cell")
    if not any(v is not None for v in header):
        raise InputError(f"frame file {str(p)!r}: sheet {show(ws.title)} row {header_row} is empty; "
                         f"set header_row in [frame] (inspect: --header-row) to the row of column names")
    for j, name in enumerate(header):
        if name is None or not str(name).strip():
            raise InputError(f"frame file {str(p)!r}: header cell {_cell(ws, header_row, j + 1)} is blank; "
                             f"give every column a name")
    names = [str(n) for n in header]
    _unique_names([n.strip() for n in names], p)
    return names


def _refuse_unsaved_formulas(p: Path, ws, header_row: int, data: list[list]) -> None:
    """Refuse blank cells that hold a formula saved without its value (a file no spreadsheet has computed)."""
    import openpyxl

    blanks = [(i, j) for i, row in enumerate(data) for j, v in enumerate(row) if v is None]
    if not blanks:
        return
    formulas = openpyxl.load_workbook(p)[ws.title]
    for i, j in blanks:
        if formulas.cell(row=header_row + 1 + i, column=j + 1).data_type == "f":
            cell = _cell(ws, header_row + 1 + i, j + 1)
            raise InputError(f"frame file {str(p)!r}: cell {cell} holds a formula saved without its value (the "
                             f"file was written by a program that does not compute formulas); open and save it "
                             f"in a spreadsheet program, or write the values instead")


def _read_excel(p: Path, sheet=None, header_row: int = 1, decimal=None, thousands=None, percent=False):
    try:
        import openpyxl  # optional: the samplewright[excel] extra
    except ImportError:
        raise InputError(f"frame file {str(p)!r}: reading .xlsx needs openpyxl; install it with "
                         f"pip install 'samplewright[excel]', or save the sheet as CSV") from None
    book = openpyxl.load_workbook(p, data_only=True)  # formula cells: the values saved with them
    ws = _sheet(book, sheet, p)
    rows = [list(r) for r in ws.iter_rows(min_row=header_row, values_only=True)] or [[]]
    while len(rows) > 1 and all(v is None for v in rows[-1]):
        rows.pop()
    # every column holding a value, so a filled column under a blank header cell is refused, not dropped
    width = max((j + 1 for row in rows for j, v in enumerate(row) if v is not None), default=1)
    rows = [row[:width] + [None] * (width - len(row)) for row in rows]
    names = _header_names(ws, header_row, rows[0], p)
    data = rows[1:]
    _refuse_unsaved_formulas(p, ws, header_row, data)
    df = pd.DataFrame(data, columns=names).infer_objects()
    return _numbers_in_text(_trimmed(df, p), decimal, thousands, percent)


# ------------------------------------------------------------------ both
def _trimmed(df: pd.DataFrame, p: Path) -> pd.DataFrame:
    """``df`` with leading and trailing spaces removed from column names and text labels, with a warning."""
    names = [n.strip() if isinstance(n, str) else n for n in df.columns]
    renamed = sum(a != b for a, b in zip(names, df.columns))
    if renamed:
        df = df.set_axis(names, axis=1)
    labels = 0
    for col in df.columns:
        if not _is_text(df[col]):
            continue
        stripped = df[col].str.strip() if pd.api.types.is_string_dtype(df[col]) else df[col].map(
            lambda v: v.strip() if isinstance(v, str) else v)
        text = stripped.notna() & (stripped != df[col])
        count = int(text.sum())
        if count:
            df[col] = df[col].where(~text, stripped)
            labels += count
    if renamed or labels:
        _warn(f"frame file {str(p)!r}: leading or trailing spaces trimmed from {renamed} column name(s) "
              f"and {labels} text cell(s)")
    return df


def _numbers_in_text(df: pd.DataFrame, decimal: str | None, thousands: str | None, percent: bool) -> pd.DataFrame:
    """Text columns whose every filled cell is a number (exact thousands groups, a percent sign only
    when ``percent``) turned into numbers.  A decimal mark or thousands separator not stated (None)
    is read from the first 100 filled cells of each text column."""
    texts = [c for c in df.columns if _is_label_text(df[c])]
    if not texts:
        return df
    sample = [v for c in texts for v in df[c].dropna().head(_SAMPLE_ROWS)]
    decimal = decimal or _decimal(sample)
    if thousands is None:
        thousands = _thousands(sample, decimal)
    group = rf"\d{{1,3}}(?:{re.escape(thousands)}\d{{3}})+|\d+" if thousands else r"\d+"
    number = re.compile(rf"[+-]?(?:{group})(?:{re.escape(decimal)}\d+)?(?:[eE][+-]?\d+)?" + ("%?" if percent else ""))
    for col in texts:
        filled = _cells(df[col])
        if not len(filled) or not all(_is_number(v) or (isinstance(v, str) and number.fullmatch(v))
                                      for v in filled):
            continue
        if isinstance(df[col].dtype, pd.CategoricalDtype):  # numbers after all: the plain text, converted below
            df[col] = df[col].astype(df[col].cat.categories.dtype)

        def value(v):
            if not isinstance(v, str):
                return float(v)
            plain = (v.replace(thousands, "") if thousands else v).replace(decimal, ".")
            return float(plain[:-1]) / 100 if plain.endswith("%") else float(plain)

        df[col] = df[col].map(value, na_action="ignore").astype(float)
    return df


def read_table(path, columns=None, separator=None, decimal=None, thousands=None, encoding=None, percent=False,
               sheet=None, header_row: int = 1, labels=()) -> pd.DataFrame:
    """Read a CSV, spreadsheet or Parquet file into a DataFrame; refuse a missing, unreadable or empty one.

    ``columns`` (Parquet only) reads just those columns, when the file has them all.  ``labels``
    (Parquet only) names columns used as labels (strata, clusters): those that are text come back
    categorical, pyarrow reading each distinct label once instead of making a string per row
    (:func:`samplewright.config.validate.label_codes` codes them as it codes the plain text).  The
    other arguments are the ``[frame]`` reading keys (checked by
    :func:`samplewright.config.validate.reading_options`).
    """
    p = input_file(path, "frame file")
    suffix = p.suffix.lower()
    try:
        if suffix in PARQUET_SUFFIXES:
            import pyarrow as pa
            import pyarrow.parquet as pq

            schema = pq.read_schema(p)
            _unique_names(schema.names, p)
            wanted = columns if columns and set(columns) <= set(schema.names) else None  # else: the role check names it
            text = [f.name for f in schema if f.name in labels and (pa.types.is_string(f.type)
                                                                    or pa.types.is_large_string(f.type))]
            # one file reader (not the dataset layer); arrow buffers freed as each column is converted: no
            # second copy of the table
            table = pq.ParquetFile(p, read_dictionary=text or None).read(columns=wanted)
            df = table.to_pandas(split_blocks=True, self_destruct=True)
            del table
            df = _numbers_in_text(df, decimal, thousands, percent)
        elif suffix in CSV_SUFFIXES:
            df = _read_csv(p, separator, decimal, thousands, encoding, percent)
        elif suffix in EXCEL_SUFFIXES:
            df = _read_excel(p, sheet, header_row, decimal, thousands, percent)
        elif suffix == ".xls":
            raise InputError(f"frame file {str(p)!r}: the old .xls format is not read; open it in the spreadsheet "
                             f"and save it as .xlsx (or as CSV)")
        else:
            raise InputError(f"frame file {str(p)!r}: unknown format {suffix!r} "
                             f"(use .csv, .tsv, .txt, .xlsx or .parquet)")
    except InputError:
        raise
    except pd.errors.EmptyDataError:
        raise InputError(f"frame file {str(p)!r} is empty") from None
    except Exception as exc:  # noqa: BLE001 -- unreadable: permissions, corrupt parquet or workbook, bad encoding
        raise InputError(f"frame file {str(p)!r} could not be read: {type(exc).__name__}: {exc}") from None
    if len(df) == 0:
        raise InputError(f"frame file {str(p)!r} has a header but no rows")
    return df
