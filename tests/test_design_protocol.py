"""Shared checker over every registered design (STYLE.md habit 7): empirical inclusion
frequencies against the design's stated inclusion probabilities.

The inclusion indicator of unit i is Bernoulli(pi_i) by the definition of pi_i (Sarndal,
Swensson & Wretman 1992, sec. 2.4), so over R independent samples its frequency has binomial
standard error sqrt(pi_i (1 - pi_i) / R); each unit must fall within Z of them (Z = 4,
tests/conftest.py).  Units with pi_i of 0 or 1 must match exactly.  The registry is iterated,
so a design added later is checked without editing this file.  The frame is invented (12
units, three strata, clusters nested in strata, an unequal size measure).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from conftest import Z

from samplewright import Frame
from samplewright.designs import DESIGN_CLASSES
from samplewright.designs.allocation import RULES

R = 6000


def protocol_frame() -> Frame:
    df = pd.DataFrame({
        "y": [4.0, 9.0, 1.0, 7.0, 3.0, 12.0, 5.0, 8.0, 2.0, 15.0, 6.0, 11.0, 3.5, 7.5, 10.0, 1.5, 9.5, 4.5],
        "band": ["a"] * 7 + ["b"] * 6 + ["c"] * 5,
        "plot": ["a1", "a1", "a2", "a2", "a2", "a3", "a3", "b1", "b1", "b2", "b2", "b3", "b3",
                 "c1", "c2", "c2", "c3", "c3"],
        "acres": [1.0, 2.0, 3.0, 1.5, 2.5, 4.0, 1.0, 2.0, 6.0, 3.0, 1.0, 5.0, 2.0, 1.0, 3.5, 2.0, 1.5, 4.0],
    })
    return Frame.from_dataframe(df, target="y", stratum="band", cluster="plot", size="acres")


def _valid(cls, params: dict) -> dict | None:
    """``params`` with the smallest size at or above the given one that the frame accepts."""
    from samplewright.errors import InputError

    frame = protocol_frame()
    top = frame.C if cls.size_key == "clusters" else frame.N
    for size in range(params[cls.size_key], top):  # below the whole frame, so some pi_i < 1
        p = {**params, cls.size_key: size}
        try:
            cls("probe", **p).check(frame)
            return p
        except InputError:
            continue
    return None


def variants(method: str) -> list[dict]:
    """Parameter sets for one method: its defaults plus the options it declares."""
    cls = DESIGN_CLASSES[method]
    base = {cls.size_key: 3 if cls.size_key == "clusters" else 4}
    out = [base]
    keys = set(cls.keys)
    if "replace" in keys:
        out.append({**base, "replace": True})
    if "allocation" in keys:
        out += [{**base, cls.size_key: 7, "allocation": rule} for rule in RULES]
    if "units_per_cluster" in keys:
        out.append({**base, "units_per_cluster": 2, "cap_units": True})
    if "kind" in keys:
        out.append({**base, cls.size_key: 5, "kind": "circular"})
    if "starts" in keys:
        out.append({**base, "starts": 2})
    if cls.size_key == "n":
        out.append({**base, cls.size_key: 5})  # a fractional interval / unequal shares
    found = [_valid(cls, p) for p in out]
    return list({repr(p): p for p in found if p is not None}.values())


CASES = [(m, p) for m in sorted(DESIGN_CLASSES) for p in variants(m)]


def _included(block) -> list[np.ndarray]:
    out = []
    for b in range(block.B):
        row = np.asarray(block.units[b]).reshape(-1)
        if block.mask is not None and np.shape(block.units[b]) == np.shape(block.mask[b]):
            row = row[np.asarray(block.mask[b]).reshape(-1)]
        out.append(np.unique(row[row >= 0]))
    return out


def misfit(design, frame, seed) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Units whose inclusion frequency over R samples misses pi_i (exactly for pi of 0 or 1,
    beyond Z binomial SEs otherwise), with the frequencies and the probabilities."""
    pi = np.asarray(design.inclusion_probabilities(frame), dtype=float)
    counts = np.zeros(frame.N)
    rng = np.random.default_rng(seed)
    for start in range(0, R, 1000):
        block = design.draw(frame, rng, min(1000, R - start), keep_units=True)
        for row in _included(block):
            counts[row] += 1
    freq = counts / R
    exact = (pi <= 0) | (pi >= 1)
    se = np.sqrt(pi * (1 - pi) / R)
    bad = np.where(exact, freq != np.clip(pi, 0, 1), np.abs(freq - pi) > Z * se)
    return np.flatnonzero(bad), freq, pi


@pytest.mark.parametrize("method,params", CASES, ids=[f"{m}-{'-'.join(f'{k}={v}' for k, v in p.items())}"
                                                       for m, p in CASES])
def test_inclusion_frequencies_match_pi(method, params):
    frame = protocol_frame()
    design = DESIGN_CLASSES[method]("protocol", **params)
    design.check(frame)
    bad, freq, pi = misfit(design, frame, [7, sorted(DESIGN_CLASSES).index(method), CASES.index((method, params))])
    assert bad.size == 0, f"{design!r}: units {bad} freq {freq[bad]} vs pi {pi[bad]}"


def test_checker_catches_wrong_probabilities():
    # negative control: an SRS claiming a stratified design's unequal pi_i is caught
    from samplewright.designs import SRS, Stratified

    frame = protocol_frame()
    wrong = SRS("claims unequal pi", n=6)
    strat = Stratified("s", n=6, allocation="equal")
    wrong.inclusion_probabilities = lambda f: strat.inclusion_probabilities(f)
    assert abs(wrong.inclusion_probabilities(frame).sum() - 6) < 1e-12  # same total, wrong shares
    bad, _, _ = misfit(wrong, frame, 11)
    assert bad.size > 0


def test_every_variance_a_design_offers_is_a_registered_formula():
    # the registries' contract (estimation/registry.py): a design names its variance formulas and the
    # estimators find each by that name, so a name missing from the registry would fail only mid-run
    from samplewright.estimation.registry import VARIANCE_FORMULAS

    missing = sorted((m, v) for m, cls in DESIGN_CLASSES.items() for v in cls.variances
                     if v not in VARIANCE_FORMULAS)
    assert not missing, f"variance formulas named by designs but not registered: {missing}"
