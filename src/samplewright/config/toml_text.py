"""A scenario dict written back as TOML text (the inverse of ``tomllib.loads`` for scenario documents).

Scalars (strings, booleans, whole and real numbers), lists of scalars, tables and arrays of
tables; a table inside a list is written inline.  ``tomllib.loads(toml_text(doc)) == doc`` for every
such document (tested).
"""

from __future__ import annotations

import json
import math
import re

_BARE = re.compile(r"^[A-Za-z0-9_-]+$")


def _key(k) -> str:
    k = str(k)
    return k if _BARE.match(k) else _value(k)


def _value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        # a JSON string is a TOML basic string: with ensure_ascii=False JSON escapes the quote, the backslash
        # and U+0000..U+001F as TOML does; TOML also wants DEL (U+007F) escaped, which JSON leaves as is
        return json.dumps(v, ensure_ascii=False).replace("\x7f", "\\u007f")
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_key(k)} = {_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(f"cannot write {type(v).__name__} as TOML")


def _is_table_array(v) -> bool:
    return isinstance(v, list) and bool(v) and all(isinstance(x, dict) for x in v)


def toml_text(doc: dict, comments: dict | None = None) -> str:
    """``doc`` as TOML; ``comments`` maps a header (e.g. ``"[[design]] 2"`` for the second design table,
    ``"[frame]"``) or ``""`` (the top of the file) to lines written as ``# `` comments before it."""
    comments = comments or {}
    lines: list[str] = [f"# {c}" for c in comments.get("", [])]
    _table(doc, [], lines, comments)
    return "\n".join(lines).strip("\n") + "\n"


def _table(t: dict, path: list[str], lines: list[str], comments: dict) -> None:
    for k, v in t.items():
        if not isinstance(v, dict) and not _is_table_array(v):
            lines.append(f"{_key(k)} = {_value(v)}")
    for k, v in t.items():
        name = ".".join(_key(p) for p in [*path, k])
        if isinstance(v, dict):
            lines.append("")
            lines.extend(f"# {c}" for c in comments.get(f"[{name}]", []))
            lines.append(f"[{name}]")
            _table(v, [*path, k], lines, comments)
        elif _is_table_array(v):
            for i, item in enumerate(v, start=1):
                lines.append("")
                lines.extend(f"# {c}" for c in comments.get(f"[[{name}]] {i}", []))
                lines.append(f"[[{name}]]")
                _table(item, [*path, k], lines, comments)
