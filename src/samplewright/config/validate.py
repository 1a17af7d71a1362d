"""The one validation layer for frames: every check of a user's columns happens here.

Each refusal raises :class:`~samplewright.errors.InputError` with a message that names the
file, column, row or value at fault and, where it helps, what would be accepted.
"""

from __future__ import annotations

import codecs
import difflib
import math
import unicodedata

import numpy as np
import pandas as pd

from samplewright.errors import InputError, show

#: largest sample size accepted, so an absurd value is refused before any array is allocated
#: (a sanity bound, no published source)
MAX_SIZE = 10_000_000


def closest(word: str, options) -> str:
    """A ``" (did you mean 'x'?)"`` hint, or a list of what is accepted."""
    options = [str(o) for o in options]
    near = difflib.get_close_matches(str(word), options, n=1, cutoff=0.5)
    if near:
        return f" (did you mean {show(near[0])}?)"
    if len(options) <= 12:
        return f" (expected one of: {', '.join(_cut(o) for o in options)})"
    return ""


def _cut(name: str, limit: int = 30) -> str:
    return name if len(name) <= limit else name[:limit - 3] + "..."


def _header_hint(col: str, columns) -> str:
    """A close match, else the frame's first column names: at most 20, each cut to 20 characters,
    at most 200 characters in all."""
    names = [str(c) for c in columns]
    near = difflib.get_close_matches(str(col), names, n=1, cutoff=0.5)
    if near:
        return f" (did you mean {show(near[0])}?)"
    shown = []
    for n in names[:20]:
        if sum(len(s) + 2 for s in shown) + len(_cut(n, 20)) > 200:
            break
        shown.append(_cut(n, 20))
    more = f", ... ({len(names)} in all)" if len(shown) < len(names) else ""
    return f" (its columns: {', '.join(shown)}{more})"


def _rows(mask: np.ndarray, limit: int = 5, kept: np.ndarray | None = None) -> str:
    """First offending rows, numbered as in a spreadsheet with a header row (data starts at row 2).

    ``kept`` maps the current rows to the file's rows after some were dropped.
    """
    pos = np.flatnonzero(mask)[:limit]
    rows = (pos if kept is None else kept[pos]) + 2
    more = " ..." if mask.sum() > limit else ""
    return ", ".join(str(r) for r in rows) + more


def _labels(series: pd.Series) -> pd.Series:
    """Stratum or cluster labels that can be sorted: mixed Python types are compared as text."""
    if series.dtype == object:
        try:
            sorted(series.dropna().unique())
        except TypeError:
            return series.where(series.isna(), series.astype(str))
    return series


def _require_column(df: pd.DataFrame, col, role: str, source: str) -> str:
    if not isinstance(col, str) or not col:
        raise InputError(f"{source}: the {role} column must be given as a column name, got {show(col)}")
    if col not in df.columns:
        raise InputError(f"{source}: {role} column {show(col)} is not in the frame{_header_hint(col, df.columns)}")
    return col


def _numeric(df: pd.DataFrame, col: str, role: str, source: str, missing: str,
             kept: np.ndarray | None = None) -> tuple[pd.Series, np.ndarray]:
    """Coerce a column to float; return it and a mask of rows that are not finite numbers."""
    raw = df[col]
    if isinstance(raw.dtype, pd.CategoricalDtype):  # a label column read as a dictionary: its plain values
        raw = raw.astype(raw.cat.categories.dtype)
    if role != "order":  # amounts: a list may be ordered by date, but a date or a yes/no is no amount
        kind = _not_amount(raw)
        if kind:
            raise InputError(f"{source}: {role} column {show(col)} holds {kind} values, not numbers; "
                             f"give a numeric column (e.g. 0/1 for yes/no)")
    num = pd.to_numeric(raw, errors="coerce").astype(float)
    text = num.isna() & raw.notna()
    bad = ~np.isfinite(num.to_numpy())
    if text.any() and missing != "drop":
        first = raw[text].iloc[0]
        raise InputError(
            f"{source}: {role} column {show(col)} has {int(text.sum())} non-numeric value(s), "
            f"first {show(first)} at row(s) {_rows(text.to_numpy(), kept=kept)}"
        )
    big = float(np.abs(num.to_numpy()[~bad]).max(initial=0.0))
    with np.errstate(over="ignore"):
        overflow = role != "order" and not np.isfinite(np.float64(len(num) * big) ** 2)
    if overflow:  # totals reach N max|y|; variances square them
        raise InputError(f"{source}: {role} column {show(col)} has values as large as {big:.3g}: over "
                         f"{len(num):,} units their total or its square would overflow to infinity; "
                         f"rescale the column (e.g. to thousands or millions)")
    return num, bad


def _not_amount(raw: pd.Series) -> str | None:
    """'true/false' or 'date/time' when the column holds such values (which to_numeric would turn
    into 1/0 or nanoseconds), else None."""
    if pd.api.types.is_bool_dtype(raw):
        return "true/false"
    if pd.api.types.is_datetime64_any_dtype(raw) or pd.api.types.is_timedelta64_dtype(raw):
        return "date/time"
    if raw.dtype == object:  # e.g. True/False with blanks, or dates read from Parquet as objects
        import datetime as dt

        kinds = {type(v) for v in raw.dropna().to_numpy()}
        if any(issubclass(k, (bool, np.bool_)) for k in kinds):
            return "true/false"
        if any(issubclass(k, (dt.date, dt.time, dt.timedelta, np.datetime64, np.timedelta64)) for k in kinds):
            return "date/time"
    return None


def sort_key_codes(df: pd.DataFrame, sort_keys, source: str = "frame") -> dict:
    """Integer codes (in sorted order of the values) of each column a design sorts the list by.

    Every column must exist and have no blank cells; numbers sort as numbers, text as text
    (mixed types as text).  Used by systematic designs' ``sort_by`` (implicit stratification).
    """
    out = {}
    for col in sort_keys:
        _require_column(df, col, "sort_by", source)
        blank = df[col].isna().to_numpy()
        if blank.any():
            raise InputError(f"{source}: sort_by column {show(col)} is blank at row(s) {_rows(blank)}")
        out[col], _ = label_codes(df[col])
    return out


def label_codes(series: pd.Series) -> tuple[np.ndarray, tuple]:
    """Integer codes 0..K-1 (int64) in sorted order of the labels, and the labels (a tuple).

    The one place labels become codes (strata, clusters, sort keys, post-strata, domains).
    Mixed Python types are sorted as text.  A categorical column (a Parquet text column read
    as a dictionary) is coded from its categories, the labels sorted by value and unused ones
    left out, so it gets the codes and labels its plain values would.
    """
    if isinstance(series.dtype, pd.CategoricalDtype):
        raw = series.cat.codes.to_numpy()
        used = np.flatnonzero(np.bincount(raw[raw >= 0], minlength=len(series.cat.categories)))
        sorted_codes, labels = pd.factorize(_labels(pd.Series(series.cat.categories[used])), sort=True)
        recode = np.full(len(series.cat.categories) + 1, -1, dtype=np.int64)  # the last entry: a blank (-1)
        recode[used] = sorted_codes
        return recode[raw], tuple(labels.tolist())
    counts = _counts(series)
    if counts is not None:  # small whole numbers: each label's rank among those present, by counting
        present = counts > 0
        rank = np.cumsum(present, dtype=np.int64) - 1
        return rank[series.to_numpy()], tuple(np.flatnonzero(present).tolist())
    codes, labels = pd.factorize(_labels(series), sort=True)
    return codes.astype(np.int64), tuple(labels.tolist())


def _counts(series: pd.Series) -> np.ndarray | None:
    """How often each value 0, 1, 2, ... occurs, for a column of whole numbers from 0 to at most a few
    times its length (ids, cluster numbers); None for any other column."""
    dtype = series.dtype
    if not isinstance(dtype, np.dtype) or dtype.kind not in "iu" or dtype.itemsize > (8 if dtype.kind == "i" else 4):
        return None
    values = series.to_numpy()
    if values.size == 0 or values.min() < 0 or values.max() > 4 * values.size + 1024:
        return None
    return np.bincount(values)


def frame_columns(df: pd.DataFrame, *, target, stratum=None, cluster=None, size=None, order=None,
                  unit_cost=None, id=None, missing="refuse", source="frame"):
    """Check the role columns of a frame; return the (possibly row-dropped) frame, the roles, and
    the stratum and cluster codes (``{role: (codes, labels)}``, see :func:`label_codes`).

    Rules: every named column exists; target values are finite numbers (``missing="drop"``
    drops the rows that are not and records how many); stratum and cluster labels are
    present; a cluster code belongs to one stratum only; ids are unique; unit costs are
    finite and not negative; the size measure and the order column are finite numbers.
    """
    if missing not in ("refuse", "drop"):
        raise InputError(f"{source}: missing = {show(missing)} is not accepted (use 'refuse' or 'drop')")
    if not isinstance(df, pd.DataFrame):
        raise InputError(f"{source}: expected a table, got {type(df).__name__}")
    if len(df) == 0:
        raise InputError(f"{source}: the frame has no rows")
    targets = [target] if isinstance(target, str) else list(target or [])
    if not targets:
        raise InputError(f"{source}: no target column given (set target = \"column\" in [frame])")
    if len(set(targets)) != len(targets):
        raise InputError(f"{source}: target lists a column twice: {targets}")
    for t in targets:
        _require_column(df, t, "target", source)
    named = {"stratum": stratum, "cluster": cluster, "size": size, "order": order,
             "unit_cost": unit_cost, "id": id}
    for role, col in named.items():
        if col is not None:
            _require_column(df, col, role, source)

    df = df.copy(deep=False)  # columns are replaced below, never written into: the caller's table is unchanged
    drop = np.zeros(len(df), dtype=bool)
    for t in targets:
        num, bad = _numeric(df, t, "target", source, missing)
        df[t] = num
        if bad.any() and missing != "drop":
            raise InputError(
                f"{source}: target column {show(t)} has {int(bad.sum())} missing or non-finite value(s) "
                f"at row(s) {_rows(bad)}; fix them or set missing = \"drop\" in [frame]"
            )
        drop |= bad
    dropped = int(drop.sum())
    kept = None  # file row of each remaining row, once rows were dropped
    if dropped:
        kept = np.flatnonzero(~drop)
        df = df.loc[~drop].reset_index(drop=True)
        if len(df) == 0:
            raise InputError(f"{source}: every row has a missing target value; nothing is left to sample")

    codes = {}
    for role in ("stratum", "cluster"):
        col = named[role]
        if col is None:
            continue
        if df[col].isna().any():
            bad = df[col].isna().to_numpy()
            raise InputError(f"{source}: {role} column {show(col)} is blank at row(s) {_rows(bad, kept=kept)}")
        codes[role] = label_codes(df[col])
    for role in ("size", "order", "unit_cost"):
        col = named[role]
        if col is None:
            continue
        num, bad = _numeric(df, col, role, source, "refuse", kept)
        if bad.any():
            raise InputError(f"{source}: {role} column {show(col)} has missing or non-finite value(s) "
                             f"at row(s) {_rows(bad, kept=kept)}")
        if role == "unit_cost" and (num < 0).any():
            neg = (num < 0).to_numpy()
            raise InputError(f"{source}: unit_cost column {show(col)} has negative cost(s) "
                             f"at row(s) {_rows(neg, kept=kept)}")
        df[col] = num
    counts = None if id is None else _counts(df[id])
    if id is not None and (counts is None or counts.max() > 1):
        dup = df[id].duplicated(keep=False).to_numpy()
        if dup.any():
            first = df[id][dup].iloc[0]
            raise InputError(f"{source}: id column {show(id)} has {int(dup.sum())} rows with repeated ids, "
                             f"first {show(first)} at row(s) {_rows(dup, kept=kept)}")
    if stratum is not None and cluster is not None and _spanning(codes["cluster"][0], codes["stratum"][0]):
        labelled = pd.DataFrame({cluster: _labels(df[cluster]), stratum: _labels(df[stratum])})
        per = labelled.groupby(cluster, sort=False)[stratum].nunique()
        spanning = per[per > 1]
        if len(spanning):
            c = spanning.index[0]
            strata = sorted(labelled.loc[labelled[cluster] == c, stratum].unique().tolist())[:3]
            raise InputError(f"{source}: cluster {show(c)} (column {show(cluster)}) appears in more than one stratum "
                             f"({', '.join(map(str, strata))}); clusters must nest in strata")
    roles = {"target": tuple(targets), **{k: v for k, v in named.items() if v is not None},
             "dropped_rows": dropped, "source": source}
    return df, roles, codes


def _spanning(cluster: np.ndarray, stratum: np.ndarray) -> bool:
    """Whether some cluster code occurs with more than one stratum code."""
    of = np.empty(int(cluster.max()) + 1, dtype=stratum.dtype)
    of[cluster] = stratum  # one of each cluster's strata
    return bool((of[cluster] != stratum).any())


def auxiliary_columns(df: pd.DataFrame, *, auxiliary=None, poststratum=None, domain=None, domains=None,
                      source="frame"):
    """Check the auxiliary, post-stratum and domain columns; return the auxiliary names and roles.

    Rules: every named column exists; auxiliary values are finite numbers (their population
    totals are taken from the frame, so none may be missing); an auxiliary is listed once;
    post-stratum and domain labels are present; every value listed in ``domains`` occurs in
    the domain column (compared as text, so ``domains = [1, 2]`` matches a column of 1 and 2).
    """
    names = [] if auxiliary is None else ([auxiliary] if isinstance(auxiliary, str) else list(auxiliary))
    if len(set(names)) != len(names):
        raise InputError(f"{source}: auxiliary lists a column twice: {names}")
    for a in names:
        _require_column(df, a, "auxiliary", source)
        _, bad = _numeric(df, a, "auxiliary", source, "refuse")
        if bad.any():
            raise InputError(f"{source}: auxiliary column {show(a)} has missing or non-finite value(s) at row(s) "
                             f"{_rows(bad)}; its population total must be known, so every unit needs a value")
    roles = {}
    if names:
        roles["auxiliary"] = tuple(names)
    for role, col in (("poststratum", poststratum), ("domain", domain)):
        if col is None:
            continue
        _require_column(df, col, role, source)
        if df[col].isna().any():
            raise InputError(f"{source}: {role} column {show(col)} is blank at row(s) "
                             f"{_rows(df[col].isna().to_numpy())}")
        roles[role] = col
    if domains is not None:
        if domain is None:
            raise InputError(f"{source}: domains lists domain values but no domain column is given "
                             f"(set domain = \"column\" in [frame])")
        present = {str(v) for v in df[domain].unique()}
        for v in domains:
            if str(v) not in present:
                raise InputError(f"{source}: domain value {show(v)} does not occur in domain column {show(domain)}"
                                 f"{closest(str(v), sorted(present))}")
        roles["domains"] = tuple(str(v) for v in domains)
    return tuple(names), roles


def cluster_cost_column(df: pd.DataFrame, column, cluster, source="frame", cluster_codes=None) -> np.ndarray:
    """Check a per-cluster cost column; return its values per row.

    Rules: a cluster column is bound; the column exists; its values are finite numbers, not
    negative, and the same for every unit of a cluster (it is the cost of visiting the cluster).
    """
    if cluster is None:
        raise InputError(f"{source}: cluster_cost column {show(column)} needs a cluster column "
                         f"(set cluster = \"column\" in [frame])")
    _require_column(df, column, "cluster_cost", source)
    num, bad = _numeric(df, column, "cluster_cost", source, "refuse")
    if bad.any():
        raise InputError(f"{source}: cluster_cost column {show(column)} has missing or non-finite value(s) "
                         f"at row(s) {_rows(bad)}")
    if (num < 0).any():
        raise InputError(f"{source}: cluster_cost column {show(column)} has negative cost(s) "
                         f"at row(s) {_rows((num < 0).to_numpy())}")
    codes, labels = cluster_codes if cluster_codes is not None else label_codes(df[cluster])
    spread = num.groupby(codes, sort=False).agg(["min", "max"])
    varying = spread[spread["min"] != spread["max"]]
    if len(varying):
        c = labels[varying.index[0]]
        rows = codes == varying.index[0]
        raise InputError(f"{source}: cluster_cost column {show(column)} differs within cluster {show(c)} "
                         f"(from {varying['min'].iloc[0]:g} to {varying['max'].iloc[0]:g}, rows {_rows(rows)}); "
                         f"it must be one cost per cluster")
    return num.to_numpy(dtype=np.float64)


#: the ``[frame]`` keys that say how to read a frame file (samplewright.population.reading)
READ_KEYS = ("separator", "decimal", "thousands", "encoding", "percent", "sheet", "header_row")
_ONE_OF = {"separator": (",", ";", "\t", "|"), "decimal": (".", ","), "thousands": (",", ".", " ", "'", "")}


def reading_options(table: dict, ctx: str) -> dict:
    """The reading keys present in ``table``, checked: the keyword arguments of ``read_table``
    (``thousands = ""`` states that numbers have no thousands separator)."""
    out = {}
    for key in READ_KEYS:
        if key not in table:
            continue
        value = table[key]
        if key == "percent":
            if not isinstance(value, bool):
                raise InputError(f"{ctx}: percent must be true or false, got {show(value)}")
        elif key == "header_row":
            if isinstance(value, bool) or not isinstance(value, int) or value < 1:
                raise InputError(f"{ctx}: header_row must be a whole number from 1 (the spreadsheet's row of "
                                 f"column names), got {show(value)}")
        elif key == "sheet":
            if isinstance(value, bool) or not isinstance(value, (int, str)) or (isinstance(value, int) and value < 0):
                raise InputError(f"{ctx}: sheet must be a sheet name (text) or a 0-based index (whole number "
                                 f"from 0), got {show(value)}")
        elif not isinstance(value, str):
            raise InputError(f"{ctx}: {key} must be text, got {show(value)}")
        elif key == "encoding":
            try:
                codecs.lookup(value)
            except LookupError:
                raise InputError(f"{ctx}: encoding {show(value)} is not known (e.g. 'utf-8', 'utf-16', "
                                 f"'cp1252', 'latin-1')") from None
        elif value not in _ONE_OF[key]:
            raise InputError(f"{ctx}: {key} = {show(value)} is not accepted "
                             f"(use one of: {', '.join(repr(v) for v in _ONE_OF[key])})")
        out[key] = value
    if out.get("decimal") is not None and out.get("decimal") == out.get("thousands"):
        raise InputError(f"{ctx}: decimal and thousands are both {show(out['decimal'])}; they must differ")
    return out


# ------------------------------------------------------------------ scenario value checks
def _where(ctx: str, key: str) -> str:
    return f"{ctx}: {key}" if ctx else key


def check_keys(table: dict, allowed, ctx: str) -> None:
    """Refuse keys that are not in ``allowed``, naming the closest valid one."""
    if not isinstance(table, dict):
        raise InputError(f"{ctx} must be a table, got {type(table).__name__}")
    for k in table:
        if k not in allowed:
            raise InputError(f"{ctx}: unknown key {show(k)}{closest(k, allowed)}")


def as_int(value, key: str, ctx: str = "", minimum: int | None = None, maximum: int | None = None) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise InputError(f"{_where(ctx, key)} must be a whole number, got {show(value)}")
    if minimum is not None and value < minimum:
        raise InputError(f"{_where(ctx, key)} must be at least {minimum}, got {value}")
    if maximum is not None and value > maximum:
        raise InputError(f"{_where(ctx, key)} must be at most {maximum}, got {value}")
    return value


def as_float(value, key: str, ctx: str = "", minimum: float | None = None, maximum: float | None = None,
             open_interval: bool = False) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"{_where(ctx, key)} must be a number, got {show(value)}")
    v = float(value)
    if not math.isfinite(v):
        raise InputError(f"{_where(ctx, key)} must be a finite number, got {show(value)}")
    if open_interval and not (minimum < v < maximum):
        raise InputError(f"{_where(ctx, key)} must lie strictly between {minimum} and {maximum}, got {show(value)}")
    if not open_interval:
        if minimum is not None and v < minimum:
            raise InputError(f"{_where(ctx, key)} must be at least {minimum}, got {show(value)}")
        if maximum is not None and v > maximum:
            raise InputError(f"{_where(ctx, key)} must be at most {maximum}, got {show(value)}")
    return v


#: Unicode's bidirectional embedding, override and isolate controls (refused in every text a scenario gives)
BIDI_CONTROLS = frozenset("\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069")


def as_str(value, key: str, ctx: str = "") -> str:
    """A non-empty text of one line: control characters (line breaks, tabs, NUL...) and the bidirectional
    embedding, override and isolate controls are refused, since labels and titles end up in CSV rows, figures,
    Markdown and terminal lines."""
    if not isinstance(value, str) or not value.strip():
        raise InputError(f"{_where(ctx, key)} must be a non-empty text, got {show(value)}")
    bad = next((c for c in value if unicodedata.category(c) == "Cc"), None)
    if bad is not None:
        raise InputError(f"{_where(ctx, key)} = {show(value)} contains the control character {bad!r}"
                         f"{' (a NUL byte)' if bad == chr(0) else ''}; give one line of printable text")
    turn = next((c for c in value if c in BIDI_CONTROLS), None)
    if turn is not None:  # they make a table or terminal line read in another order than it is stored
        raise InputError(f"{_where(ctx, key)} contains the text-direction control U+{ord(turn):04X}; give the "
                         f"text without embedding, override or isolate marks")
    return value


def as_bool(value, key: str, ctx: str = "") -> bool:
    if not isinstance(value, bool):
        raise InputError(f"{_where(ctx, key)} must be true or false, got {show(value)}")
    return value


def as_sizes(value, key: str, ctx: str) -> int | list[int]:
    """A whole number above 0, or a non-empty list of them (a size sweep)."""
    if isinstance(value, list):
        if not value:
            raise InputError(f"{_where(ctx, key)} is an empty list; give one size or several")
        out = [as_int(v, key, ctx, minimum=1, maximum=MAX_SIZE) for v in value]
        if len(set(out)) != len(out):
            raise InputError(f"{_where(ctx, key)} lists a size twice: {show(out)}")
        return out
    return as_int(value, key, ctx, minimum=1, maximum=MAX_SIZE)
