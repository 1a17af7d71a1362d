"""Fuzz test of the scenario parser: random TOML documents must give exit 0 or 2, never 1
or a traceback.

Three generators: fully random documents (random keys from the scenario vocabulary and
random text, random values and nesting); a valid scenario with one to three random
mutations (a value replaced, a key removed, a key added, anywhere in the tree); and a valid
scenario's text with characters cut or inserted (malformed TOML).  Every document is run by
the command line (``samplewright run ... --replicates 5``); a refusal must be one line
starting ``error:``.  Settings are modest and derandomised so CI sees the same documents.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import io
import json
import math
import re
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from samplewright.cli.main import main
from samplewright.config.scenario import COST_KEYS, DESIGN_COMMON, FRAME_KEYS, TOP_KEYS
from samplewright.designs import DESIGN_CLASSES
from samplewright.population.synth import CLUSTER_KEYS, STRATUM_KEYS
from samplewright.population.synth import KEYS as SYNTH_KEYS

FUZZ = settings(max_examples=60, deadline=None, derandomize=True, database=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])

KEYS = sorted(set(TOP_KEYS) | set(FRAME_KEYS) | set(COST_KEYS) | set(DESIGN_COMMON) | set(SYNTH_KEYS)
              | set(STRATUM_KEYS) | set(CLUSTER_KEYS) | {k for c in DESIGN_CLASSES.values() for k in c.keys})
WORDS = sorted(set(DESIGN_CLASSES) | {"y", "amount", "office", "batch", "pages", "handling", "stratum", "cluster",
                                "size", "unit", "ht", "hajek", "neyman", "proportional", "optimal", "equal", "refuse",
                                "drop", "gamma", "lognormal", "grouped", "random", "frame.csv", "linear"})


# ------------------------------------------------------------------ a minimal TOML writer
_BARE = re.compile(r"^[A-Za-z0-9_-]+$")


def _key(k: str) -> str:
    return k if _BARE.match(k) else json.dumps(k, ensure_ascii=False)


def _value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if v in (float("inf"), float("-inf")):
            return "inf" if v > 0 else "-inf"
        r = repr(v)
        return r if any(c in r for c in ".eE") else r + ".0"
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)  # JSON escapes are valid TOML basic-string escapes
    if isinstance(v, (dt.datetime, dt.date, dt.time)):
        return v.isoformat()
    if isinstance(v, list):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_key(k)} = {_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(type(v))


def to_toml(doc: dict) -> str:
    """A TOML document with every table written inline (``key = {...}``, ``design = [{...}]``)."""
    return "".join(f"{_key(k)} = {_value(v)}\n" for k, v in doc.items())


# ------------------------------------------------------------------ values
ints = st.integers(-5, 60) | st.sampled_from([0, 1, 2, -1, 2**31, 2**63 - 1, -(2**63)])
floats = (st.floats(-1e3, 1e3, allow_nan=False) | st.sampled_from([0.0, -0.0, 0.5, 1.0, 1e-300, 1e308])
          | st.just(float("nan")) | st.just(float("inf")) | st.just(float("-inf")))
texts = st.sampled_from(WORDS) | st.text(max_size=12)
dates = st.sampled_from([dt.date(2026, 12, 1), dt.datetime(2026, 12, 1, 8, 30), dt.time(7, 15)])
scalars = ints | floats | texts | st.booleans() | dates
keys = st.sampled_from(KEYS) | st.text(min_size=1, max_size=10)
values = st.recursive(scalars, lambda inner: st.lists(inner, max_size=4) | st.dictionaries(keys, inner, max_size=5),
                      max_leaves=20)


# ------------------------------------------------------------------ a valid base and its mutations
def claims_csv() -> str:
    rng = np.random.default_rng(3)
    n = 36
    office = np.repeat(["north", "south", "west"], 12)
    batch = [f"{o}-{i // 4}" for o, i in zip(office, np.tile(np.arange(12), 3))]
    return pd.DataFrame({"unit": np.arange(1, n + 1), "office": office, "batch": batch,
                         "amount": rng.gamma(2.0, 50.0, n).round(2), "pages": rng.integers(1, 9, n),
                         "handling": 1.5}).to_csv(index=False)


def base_doc(file_frame: bool) -> dict:
    if file_frame:
        frame = {"path": "frame.csv", "target": "amount", "stratum": "office", "cluster": "batch",
                 "size": "pages", "unit_cost": "handling", "id": "unit"}
    else:
        frame = {"synthetic": {"units": 60, "seed": 4, "skew": "gamma", "skewness": 1.5,
                               "strata": [{"name": "a", "share": 0.5, "mean": 100, "sd": 20},
                                          {"name": "b", "share": 0.5, "mean": 150, "sd": 30}],
                               "clusters": {"mean_size": 5, "icc": 0.1},
                               "size_correlation": 0.6}}
    return {
        "title": "fuzz base", "seed": 11, "replicates": 50, "confidence": 0.9, "block_size": 10,
        "frame": frame,
        "design": [
            {"label": "simple", "method": "srs", "n": [4, 8]},
            {"label": "by stratum", "method": "stratified", "n": 8, "allocation": "neyman"},
            {"label": "every k", "method": "systematic", "n": 6},
            {"label": "clusters", "method": "cluster", "clusters": 2, "units_per_cluster": 3, "cap_units": True},
            {"label": "by size", "method": "pps_systematic", "n": 5},
        ],
        "cost": {"fixed": 10.0, "per_unit": 2.0},
    }


def _paths(node, prefix=()):
    """Every (path, container) position in a document tree."""
    yield prefix
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _paths(v, prefix + (i,))


def _get(node, path):
    for p in path:
        node = node[p]
    return node


@st.composite
def mutated_docs(draw):
    file_frame = draw(st.booleans())
    doc = base_doc(file_frame)
    for _ in range(draw(st.integers(1, 3))):
        paths = [p for p in _paths(doc) if p]
        path = draw(st.sampled_from(paths))
        parent = _get(doc, path[:-1])
        action = draw(st.sampled_from(["replace", "delete", "add"]))
        if action == "replace":
            parent[path[-1]] = draw(values)
        elif action == "delete":
            del parent[path[-1]]
        elif isinstance(parent, dict):
            parent[draw(keys)] = draw(values)
        else:
            parent.append(draw(values))
    return doc, file_frame


@st.composite
def broken_texts(draw):
    file_frame = draw(st.booleans())
    lines = to_toml(base_doc(file_frame)).splitlines(keepends=True)
    text = "".join(lines)
    for _ in range(draw(st.integers(1, 3))):
        kind = draw(st.sampled_from(["cut", "insert", "repeat line"]))
        i = draw(st.integers(0, max(0, len(text) - 1)))
        if kind == "cut":
            text = text[:i] + text[i + draw(st.integers(1, 8)):]
        elif kind == "insert":
            piece = draw(st.text(alphabet="[]{}=\",.#'\n 0123456789abcxyz", min_size=1, max_size=5))
            text = text[:i] + piece + text[i:]
        else:
            ls = text.splitlines(keepends=True)
            j = draw(st.integers(0, len(ls) - 1))
            text = "".join(ls[: j + 1] + [ls[j]] + ls[j + 1:])
    return text, file_frame


# ------------------------------------------------------------------ the check
def run_text(text: str, file_frame: bool) -> None:
    """Run one scenario text through the CLI: exit 0, or exit 2 with one clean error line."""
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        if file_frame:
            (tmp / "frame.csv").write_text(claims_csv())
        p = tmp / "scenario.toml"
        p.write_text(text, encoding="utf-8", errors="surrogatepass")
        err = io.StringIO()
        with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
            code = main(["run", str(p), "--out", str(tmp / "out"), "--replicates", "5", "--quiet"])
    msg = err.getvalue()
    event(f"exit {code}")
    assert "Traceback" not in msg, msg
    assert code in (0, 2), (code, msg, text)
    if code == 2:
        lines = msg.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("error: "), msg


@pytest.mark.slow
def test_base_scenarios_run():
    # the unmutated documents are valid: both must run (so mutations start from a working scenario)
    for file_frame in (True, False):
        with tempfile.TemporaryDirectory() as tmp:
            tmp = Path(tmp)
            (tmp / "frame.csv").write_text(claims_csv())
            (tmp / "s.toml").write_text(to_toml(base_doc(file_frame)))
            err = io.StringIO()
            with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
                code = main(["run", str(tmp / "s.toml"), "--out", str(tmp / "out"), "--replicates", "5", "--quiet"])
            assert code == 0, err.getvalue()


@pytest.mark.slow
@FUZZ
@given(doc=st.dictionaries(keys, values, max_size=8), file_frame=st.booleans())
def test_random_documents(doc, file_frame):
    run_text(to_toml(doc), file_frame)


@pytest.mark.slow
@FUZZ
@given(case=mutated_docs())
def test_mutated_scenarios(case):
    doc, file_frame = case
    run_text(to_toml(doc), file_frame)


@FUZZ
@given(case=broken_texts())
def test_broken_toml_text(case):
    text, file_frame = case
    run_text(text, file_frame)
