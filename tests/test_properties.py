"""Property-based tests (hypothesis) over random small frames and every registered design.

For every class in ``samplewright.designs.DESIGN_CLASSES`` (the registry, so designs added later are
covered without editing this file) and random small frames:

- a design either refuses the frame with ``InputError`` or draws;
- inclusion probabilities are finite, in [0, 1], and their sum is the expected number of
  distinct units: E[#distinct] = sum_i pi_i holds for any design by linearity of
  expectation (Sarndal, Swensson & Wretman 1992, result 2.6.2); without repeated units it is
  also the design's ``expected_n``;
- weights are positive and finite; no unit index lies outside the frame; no unit appears
  twice in a sample unless the design selects with replacement;
- every valid scenario either runs or is refused with exit code 2, never a crash.

Empirical means are compared with expectations inside a z-bound (tests/conftest.py, Z = 4)
on the replicates' own standard deviation, with fixed seeds; settings are modest
(derandomize=True, so CI draws the same examples every time).
"""

from __future__ import annotations

import contextlib
import io
import tempfile
from collections import Counter
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import Z
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st
from test_fuzz_scenario import to_toml

from samplewright import Frame
from samplewright.designs import DESIGN_CLASSES
from samplewright.designs.allocation import RULES
from samplewright.errors import InputError
from samplewright.estimation.estimators import sample_units

PROPS = settings(max_examples=60, deadline=None, derandomize=True, database=None,
                 suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
B = 200  # replicates per example


# ------------------------------------------------------------------ strategies
@st.composite
def frames(draw) -> Frame:
    """A frame of 4..40 units: strata, clusters nested in strata, a positive size, costs, order."""
    H = draw(st.integers(1, 4))
    # stratum sizes 2..10, one in twenty a single unit (refused by stratified designs)
    per = draw(st.lists(st.integers(0, 19).map(lambda k: 1 if k == 0 else 2 + k % 9), min_size=H, max_size=H))
    per[0] += max(0, 4 - sum(per))  # at least four units
    rows = []
    for h, n_h in enumerate(per):
        k = draw(st.integers(1, n_h))  # clusters in this stratum
        for i in range(n_h):
            rows.append({"s": f"h{h}", "c": f"h{h}-c{i % k}"})
    N = len(rows)
    values = st.floats(-50, 500, allow_nan=False, allow_infinity=False, width=32)
    y = draw(st.lists(values, min_size=N, max_size=N))
    x = draw(st.lists(st.floats(0.25, 100, width=32), min_size=N, max_size=N))
    cost = draw(st.lists(st.sampled_from([0.0, 1.0, 2.5, 10.0]), min_size=N, max_size=N))
    order = draw(st.permutations(range(N)))
    df = pd.DataFrame(rows)
    df["y"], df["x"], df["cost"], df["o"] = y, x, cost, list(order)
    return Frame.from_dataframe(df, target="y", stratum="s", cluster="c", size="x", unit_cost="cost", order="o")


def params_for(draw, cls, frame: Frame) -> dict:
    """Parameters for the keys a design declares (unknown keys keep their defaults)."""
    p = {}
    top = frame.C if cls.size_key == "clusters" else frame.N
    p[cls.size_key] = draw(st.integers(1, top + 1))  # one past the limit: refusals are part of the property
    for k in cls.keys:
        if k == cls.size_key:
            continue
        if k == "replace" and cls.method == "pps":
            p[k] = True  # the size-proportional method with replacement must say so (pps alone is refused)
        elif k in ("replace", "cap_units"):
            p[k] = draw(st.booleans())
        elif k == "units_per_cluster":
            p[k] = draw(st.none() | st.integers(1, 6))
        elif k == "allocation":
            p[k] = draw(st.sampled_from(RULES))
        elif k == "variance":
            p[k] = draw(st.sampled_from(tuple(cls.variances)))
        elif k == "starts":
            p[k] = draw(st.integers(1, 3))
        elif k == "kind":
            from samplewright.designs.systematic import KINDS

            p[k] = draw(st.sampled_from(KINDS))
    return p


@st.composite
def design_on_frame(draw, method: str):
    """A frame, a design on it, and whether the design's size is past the frame's limit."""
    frame = draw(frames())
    cls = DESIGN_CLASSES[method]
    params = params_for(draw, cls, frame)
    design = cls("d", **params)
    over = params[cls.size_key] > (frame.C if cls.size_key == "clusters" else frame.N)
    return frame, design, over


# ------------------------------------------------------------------ helpers
def may_repeat(design) -> bool:
    """Designs whose one sample can hold a unit twice (selection with replacement).

    SRS and size-proportional sampling with ``replace`` and systematic samples with several
    random starts (two starts can hit one unit).
    """
    return bool(getattr(design, "replace", False)) or int(getattr(design, "starts", 1) or 1) > 1


def sample_unit_lists(block) -> list[np.ndarray]:
    """The sampled unit indices of each replicate (padding and masked positions removed)."""
    units = block.units
    out = []
    for b in range(block.B):
        row = np.asarray(units[b]).reshape(-1)
        if block.mask is not None and np.shape(units[b]) == np.shape(block.mask[b]):
            row = row[np.asarray(block.mask[b]).reshape(-1)]
        out.append(row[row >= 0] if row.dtype.kind in "iu" else row)
    return out


def assert_mean_matches(values: np.ndarray, expected: float, redraw, what: str) -> None:
    """|mean - expected| <= Z * MCSE; a constant sample must match exactly (or be redrawn larger)."""
    sd = values.std(ddof=1)
    if sd == 0 and abs(values.mean() - expected) > 1e-9 * max(1.0, abs(expected)):
        values = np.concatenate([values, redraw(2000)])  # rare: random size that did not vary in B draws
        sd = values.std(ddof=1)
    tol = Z * sd / np.sqrt(len(values)) + 1e-9 * max(1.0, abs(expected))
    assert abs(values.mean() - expected) <= tol, (what, values.mean(), expected, tol)


# ------------------------------------------------------------------ properties
#: least number of examples (of 30) in which each design must draw rather than refuse, so that
#: the properties below are exercised; with derandomize=True the count is the same every run
MIN_DRAWN = 8


@pytest.mark.parametrize("method", sorted(DESIGN_CLASSES))
def test_design_properties(method):
    outcomes = Counter()
    check_design_properties(method, outcomes)
    assert outcomes["drawn"] >= MIN_DRAWN, (method, outcomes)


@settings(PROPS, max_examples=30)
@given(data=st.data(), seed=st.integers(0, 2**32 - 1))
def check_design_properties(method, outcomes, data, seed):
    frame, design, over = data.draw(design_on_frame(method))
    try:
        design.check(frame)
    except InputError as exc:
        # a refusal names the culprit (the project's error rule): the design's label first
        assert str(exc).startswith("design 'd'"), exc
        outcomes["refused"] += 1
        event(f"refused: {str(exc)[:60]}")
        return
    # a size past the frame (more units or clusters than it holds) must have been refused,
    # unless the design may select a unit more than once
    assert not over or may_repeat(design), design
    outcomes["drawn"] += 1
    event("drawn")
    pi = np.asarray(design.inclusion_probabilities(frame), dtype=float)
    assert pi.shape == (frame.N,)
    assert np.isfinite(pi).all()
    assert (pi >= 0).all() and (pi <= 1 + 1e-12).all()

    rng = np.random.default_rng(seed)
    block = design.draw(frame, rng, B, keep_units=True)
    # weights positive and finite (only real PSU positions of random-size designs)
    w = np.broadcast_to(block.weight, block.sums.shape[:2])
    real = np.ones(w.shape, dtype=bool) if block.mask is None else np.asarray(block.mask, dtype=bool)
    assert np.isfinite(w[real]).all() and (w[real] > 0).all(), design
    assert np.isfinite(block.sums).all()
    # indices inside the frame; no repeats unless the design selects with replacement
    lists = sample_unit_lists(block)
    for row in lists:
        assert ((row >= 0) & (row < frame.N)).all(), (design, row)
        if not may_repeat(design):
            assert len(np.unique(row)) == len(row), (design, row)
    selections = sample_units(block)  # units measured per replicate (with multiplicity)
    assert np.allclose(selections, [len(r) for r in lists]), design
    distinct = np.array([len(np.unique(r)) for r in lists], dtype=float)

    def redraw(k, fn):
        blk = design.draw(frame, np.random.default_rng([seed, k]), k, keep_units=True)
        return fn(blk)

    # E[#distinct units] = sum pi_i (any design); E[#selections] = expected_n
    assert_mean_matches(distinct, pi.sum(),
                        lambda k: redraw(k, lambda b: np.array([len(np.unique(r)) for r in sample_unit_lists(b)],
                                                               dtype=float)), "distinct units vs sum(pi)")
    assert_mean_matches(selections, design.expected_n(frame), lambda k: redraw(k, sample_units),
                        "selections vs expected_n")
    if not may_repeat(design):
        assert abs(pi.sum() - design.expected_n(frame)) <= 1e-9 * max(1.0, pi.sum()), design


@pytest.mark.parametrize("method", sorted(DESIGN_CLASSES))
@settings(PROPS, max_examples=10)
@given(data=st.data(), seed=st.integers(0, 2**32 - 1))
def test_same_seed_same_sample(method, data, seed):
    frame, design, _ = data.draw(design_on_frame(method))
    try:
        design.check(frame)
    except InputError:
        return
    a = design.draw(frame, np.random.default_rng(seed), 5, keep_units=True)
    b = design.draw(frame, np.random.default_rng(seed), 5, keep_units=True)
    assert np.array_equal(a.sums, b.sums)
    assert all(np.array_equal(x, y) for x, y in zip(sample_unit_lists(a), sample_unit_lists(b)))


# ------------------------------------------------------------------ whole scenarios
NAMES = ["north", "south", "east", "west"]


@st.composite
def scenarios(draw) -> dict:
    """A scenario dict on a small synthetic frame, with 1-3 designs of random methods and keys."""
    units = draw(st.integers(4, 120))
    syn = {"units": units, "seed": draw(st.integers(0, 1000))}
    if draw(st.booleans()):
        k = draw(st.integers(1, 4))
        syn["strata"] = [{"name": NAMES[i], "share": draw(st.floats(0.05, 1.0)),
                          "mean": draw(st.floats(0, 300)), "sd": draw(st.floats(0, 50))} for i in range(k)]
    if draw(st.booleans()):
        syn["clusters"] = {"mean_size": draw(st.floats(1.0, 15.0)), "icc": draw(st.floats(0.0, 0.9)),
                           "size_cv": draw(st.floats(0.0, 1.0))}
    if draw(st.booleans()):
        syn["size_correlation"] = draw(st.floats(-1.0, 1.0))
    if draw(st.booleans()):
        syn["skew"] = draw(st.sampled_from(["none", "gamma", "lognormal"]))
        syn["skewness"] = draw(st.floats(0.1, 4.0))
    syn["order"] = draw(st.sampled_from(["random", "grouped"]))
    designs = []
    for i in range(draw(st.integers(1, 3))):
        method = draw(st.sampled_from(sorted(DESIGN_CLASSES)))
        cls = DESIGN_CLASSES[method]
        d = {"label": f"d{i}", "method": method}
        top = max(1, units // 3) if cls.size_key == "clusters" else units
        sizes = st.integers(1, top + 2)
        d[cls.size_key] = draw(sizes | st.lists(sizes, min_size=1, max_size=3, unique=True))
        for k in cls.keys:
            required = k == "replace" and method == "pps"
            if k == cls.size_key or not (required or draw(st.booleans())):
                continue
            if k == "replace" and method == "pps":
                d[k] = True
            elif k in ("replace", "cap_units"):
                d[k] = draw(st.booleans())
            elif k == "units_per_cluster":
                d[k] = draw(st.integers(1, 8))
            elif k == "allocation":
                d[k] = draw(st.sampled_from(RULES))
            elif k == "variance":
                d[k] = draw(st.sampled_from(tuple(cls.variances)))
            elif k == "starts":
                d[k] = draw(st.integers(1, 3))
        designs.append(d)
    doc = {"seed": draw(st.integers(0, 2**31)), "confidence": draw(st.floats(0.5, 0.99)),
           "block_size": draw(st.integers(1, 40)), "frame": {"synthetic": syn}, "design": designs}
    if draw(st.booleans()):
        doc["cost"] = {"fixed": 100.0, "per_unit": draw(st.floats(0, 20)), "per_cluster": draw(st.floats(0, 50))}
    return doc


#: least number of scenarios (of 60) that must run rather than be refused (fixed by derandomize=True)
MIN_RAN = 15


@pytest.mark.slow
def test_valid_scenarios_run_or_are_refused():
    outcomes = Counter()
    check_scenario_runs_or_is_refused(outcomes)
    assert outcomes["ran"] >= MIN_RAN, outcomes


def units_past_the_frame(doc: dict) -> bool:
    """Whether a design that cannot repeat a unit asks for more units than the synthetic frame holds
    (cluster counts are not known before the frame is made, so they are not judged here)."""
    for d in doc["design"]:
        repeats = d.get("replace", False)
        if DESIGN_CLASSES[d["method"]].size_key != "clusters" and not repeats:
            sizes = d[DESIGN_CLASSES[d["method"]].size_key]
            if max(sizes if isinstance(sizes, list) else [sizes]) > doc["frame"]["synthetic"]["units"]:
                return True
    return False


@PROPS
@given(doc=scenarios())
def check_scenario_runs_or_is_refused(outcomes, doc):
    from samplewright.api import run
    from samplewright.simulation.scenario import scenario_from_dict

    try:
        sc = scenario_from_dict(doc)
        res = run(sc, replicates=12)
    except InputError as exc:
        event("refused")
        # one line that names what is wrong (the project's error rule)
        assert str(exc) and "\n" not in str(exc), exc
        outcomes["refused"] += 1
        return
    # more units than the frame holds must have been refused
    assert not units_past_the_frame(doc), doc["design"]
    outcomes["ran"] += 1
    event("ran")
    s = res.summary
    assert len(s) > 0
    # every replicate counts, except where an estimator has no estimate (Hajek of an empty random-size sample)
    assert (s.loc[s["estimator"] == "ht", "replicates"] == 12).all()
    assert s["replicates"].between(1, 12).all()
    assert np.isfinite(res.replicates["n"]).all()


@pytest.mark.slow
@settings(max_examples=15, deadline=None, derandomize=True, database=None,
          suppress_health_check=[HealthCheck.too_slow])
@given(doc=scenarios())
def test_valid_scenarios_through_the_cli(doc):
    # the same scenarios written as TOML and run by the command line: exit 0 or a clean 2
    from samplewright.cli.main import main

    with tempfile.TemporaryDirectory() as tmp:
        p = Path(tmp) / "scenario.toml"
        p.write_text(to_toml(doc), encoding="utf-8")
        err = io.StringIO()
        with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
            code = main(["run", str(p), "--out", str(Path(tmp) / "out"), "--replicates", "8", "--quiet"])
    text = err.getvalue()
    assert "Traceback" not in text
    assert code in (0, 2), text
    if code == 2:
        lines = text.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("error: "), text

