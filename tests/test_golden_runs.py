"""Full runs of three bundled scenarios, compared bit for bit with summaries saved before a refactor.

A change that must not move a number (a reorganisation of the code, a speed-up) keeps these files
identical; a change that moves numbers on purpose regenerates them with
``python tests/test_golden_runs.py --write`` and says why in its commit.
"""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
GOLDEN = Path(__file__).resolve().parent / "golden"
#: scenario -> replicates: stratified with costs and a goal; size-proportional with auxiliary
#: estimators; clusters with non-response and weighting
CASES = {"district_energy": 400, "expense_audit_pps": 300, "water_quality": 300}


def summary_text(name: str, replicates: int) -> str:
    import samplewright as sw

    res = sw.run(sw.load_scenario(ROOT / "scenarios" / f"{name}.toml"), replicates=replicates)
    return res.summary.to_csv(index=False, lineterminator="\n")  # repr floats: every bit shows


@pytest.mark.slow
@pytest.mark.parametrize("name", sorted(CASES))
def test_summary_is_bit_identical(name):
    want = (GOLDEN / f"{name}.csv").read_text(encoding="utf-8")
    got = summary_text(name, CASES[name])
    assert got.splitlines()[0] == want.splitlines()[0], "summary columns changed"
    diff = [(a, b) for a, b in zip(got.splitlines(), want.splitlines()) if a != b]
    assert not diff and len(got) == len(want), f"{len(diff)} rows differ, first: {diff[:1]}"


if __name__ == "__main__":
    if sys.argv[1:] != ["--write"]:
        raise SystemExit("usage: python tests/test_golden_runs.py --write")
    GOLDEN.mkdir(exist_ok=True)
    for case, reps in CASES.items():
        (GOLDEN / f"{case}.csv").write_text(summary_text(case, reps), encoding="utf-8")
        print(f"wrote {GOLDEN / case}.csv")
