"""Sequential stopping: add blocks of replicates until the Monte Carlo error is small enough.

A rule such as ``coverage_mcse=0.002`` (``--until``) is checked for each design x size cell
after each of its blocks, in block order, on every estimator and study variable of the
cell; the cell stops at the first block count where all of them meet every target, or at
the replicate cap.  Because the check runs in block order on the same blocks, a cell stops
at the same replicate count whatever ``--jobs``, the backend or the number of blocks that
were dispatched at once (blocks computed past the stopping point are not used).
Coverage is counted against the true population's value of every output variable, the
summary's ``truth`` (under ``[frame_error]`` not the listed frame's mean), and a domain mean
counts only the replicates that have an estimate of it, as in the summary.

Targets (the names a rule may use)
----------------------------------
``coverage_mcse``
    Monte Carlo SE of the coverage, sqrt(c (1 - c) / R).
``bias_mcse``
    Monte Carlo SE of the bias, sqrt(var(x) / R).
``empirical_se_rel_mcse``
    Relative Monte Carlo SE of the empirical SE, 1 / sqrt(2 (R - 1)).

Notes
-----
Replicates needed for a target MCSE t (Morris, White & Crowther 2019, Statistics in
Medicine 38:2074-2102, sec. 5.3 and Table 6): coverage R = c (1 - c) / t^2; bias
R = var(x) / t^2; relative MCSE of the empirical SE R = 1 + 1 / (2 t^2).  They are
reported from the final estimates of c and var(x).  For the stopping check alone, c is
estimated as (covered + 1) / (R + 2) (Laplace's rule of succession; common practice), so a
run whose intervals all cover (or all miss) the truth does not stop on a zero MCSE.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from samplewright.config.validate import closest
from samplewright.errors import InputError
from samplewright.evaluation import measures

#: target name -> what it bounds (for messages and the README)
TARGETS = {
    "coverage_mcse": "Monte Carlo SE of the coverage",
    "bias_mcse": "Monte Carlo SE of the bias",
    "empirical_se_rel_mcse": "relative Monte Carlo SE of the empirical SE",
}
#: former target names, refused with the current one
RENAMED = {"empse_rel_mcse": "empirical_se_rel_mcse"}


@dataclass(frozen=True)
class Rule:
    """Targets a cell must meet, and the replicate cap.

    Examples
    --------
    >>> r = parse_until("coverage_mcse=0.002,bias_mcse=0.05", max_replicates=200_000)
    >>> r.targets
    {'coverage_mcse': 0.002, 'bias_mcse': 0.05}
    """

    targets: dict
    max_replicates: int
    text: str = ""

    def as_dict(self) -> dict:
        return {"until": self.text, "targets": dict(self.targets), "max_replicates": self.max_replicates}

    @staticmethod
    def start_cell(ci: int) -> CellProgress:
        """Cell ``ci``'s progress before its first block (every cell starts with none)."""
        return CellProgress()

    def needed(self, state: CellProgress) -> int:
        """Replicates the cell's targets ask for at its current estimates."""
        return state.tally.needed(self.targets)

    def advance(self, state: CellProgress, results_by_block: dict, truth: np.ndarray,
                min_blocks: int, max_blocks: int) -> None:
        """Consume the cell's finished blocks in block order, stopping at the first count that meets the rule.

        ``truth`` (V,) is the true population's value of every output variable (targets, then domain
        means), the values summary.csv's ``truth`` column reports.
        """
        while not state.stopped and state.used in results_by_block:
            state.tally.add(results_by_block[state.used], truth)
            state.used += 1
            if state.used >= min_blocks and state.tally.meets(self.targets):
                state.stopped, state.met = True, True
            elif state.used >= max_blocks:
                state.stopped = True

    def report(self, cells, states: dict) -> list[dict]:
        """One entry per cell: replicates used, whether the targets were met, MCSE reached, replicates needed."""
        out = []
        for ci, cell in enumerate(cells):
            st = states[ci]
            vals = st.tally.values() if st.tally.R > 0 else {}
            out.append({
                "design": cell.design.label,
                "size": int(cell.design.size),
                "replicates": st.tally.R,
                "met": st.met,
                "reached": {name: float(np.max(vals[name])) for name in self.targets if name in vals},
                "replicates_needed": st.tally.needed(self.targets),
            })
        return out


def parse_until(text: str, max_replicates: int) -> Rule:
    """Read ``NAME=VALUE[,NAME=VALUE...]`` (see module notes); refuse anything else with InputError."""
    if not isinstance(text, str) or not text.strip():
        raise InputError("--until needs NAME=VALUE, e.g. --until coverage_mcse=0.002")
    targets = {}
    for part in text.split(","):
        part = part.strip()
        if "=" not in part:
            raise InputError(f"--until {part!r}: write NAME=VALUE, e.g. coverage_mcse=0.002 "
                             f"(names: {', '.join(TARGETS)})")
        name, _, value = (s.strip() for s in part.partition("="))
        if name in RENAMED:
            raise InputError(f"--until {name}={value}: the target {name!r} is now named {RENAMED[name]!r} "
                             f"(write {RENAMED[name]}={value})")
        if name not in TARGETS:
            raise InputError(f"--until: unknown target {name!r}{closest(name, TARGETS)}")
        try:
            v = float(value)
        except ValueError:
            raise InputError(f"--until {name}={value!r}: the target must be a number above 0") from None
        if not (v > 0 and math.isfinite(v)):
            raise InputError(f"--until {name}={value!r}: the target must be a number above 0")
        targets[name] = v
    if isinstance(max_replicates, bool) or not isinstance(max_replicates, (int, np.integer)) or max_replicates < 2:
        raise InputError(f"--max-replicates must be a whole number of at least 2, got {max_replicates!r}")
    return Rule(targets=targets, max_replicates=int(max_replicates), text=text.strip())


@dataclass
class Tally:
    """Running sums of one cell's replicates, per estimator x variable, merged block by block.

    Means and squared deviations are merged with the pairwise update of Chan, Golub &
    LeVeque (1979), so the variance is stable however many blocks are added.  Each
    estimator x variable counts its own replicates ``n``: a domain mean has no estimate in
    a replicate that met no unit of the domain, and such replicates are left out of its
    measures, as in the summary.
    """

    R: int = 0
    n: np.ndarray | None = None  # (E, V) replicates with an estimate
    mean: np.ndarray | None = None  # (E, V)
    m2: np.ndarray | None = None
    covered: np.ndarray | None = None

    def add(self, result, truth: np.ndarray) -> None:
        """Add one block; ``truth`` (V,) holds the true population's value of every output variable."""
        x = result.estimate  # (E, B, V)
        b = x.shape[1]
        if b == 0:
            return
        ok = np.isfinite(x)
        nb = ok.sum(axis=1).astype(float)
        with np.errstate(invalid="ignore", divide="ignore"):  # 0 / 0 for a domain absent from the block
            bm = np.where(ok, x, 0.0).sum(axis=1) / nb
            bm2 = np.where(ok, (x - bm[:, None, :]) ** 2, 0.0).sum(axis=1)
        cov = (measures.holds(result.lower, result.upper, truth) & ok).sum(axis=1)
        bm, bm2 = np.where(nb > 0, bm, 0.0), np.where(nb > 0, bm2, 0.0)
        if self.R == 0:
            self.n, self.mean, self.m2, self.covered = nb, bm, bm2, cov.astype(float)
        else:
            n = self.n + nb
            delta = bm - self.mean
            with np.errstate(invalid="ignore", divide="ignore"):
                self.mean = np.where(n > 0, self.mean + delta * nb / n, 0.0)
                self.m2 = np.where(n > 0, self.m2 + bm2 + delta**2 * self.n * nb / n, 0.0)
            self.n = n
            self.covered = self.covered + cov
        self.R += b

    def coverage(self) -> np.ndarray:
        """Coverage for the stopping check, (covered + 1) / (n + 2) (see module notes)."""
        return (self.covered + 1.0) / (self.n + 2.0)

    def _var(self) -> np.ndarray:
        """Sample variance of each estimator x variable (inf below two estimates: not yet known)."""
        n = self.n
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(n > 1, self.m2 / (n - 1), np.inf)

    def values(self) -> dict:
        """Current MCSE of every target, arrays of shape (E, V)."""
        n = self.n
        with np.errstate(invalid="ignore", divide="ignore"):
            return {
                "coverage_mcse": np.where(n > 0, measures.coverage_mcse(self.coverage(), n), np.inf),
                "bias_mcse": measures.bias_mcse(self._var(), n),
                "empirical_se_rel_mcse": np.where(n > 1, measures.empirical_se_mcse(1.0, n), np.inf),
            }

    def needed(self, targets: dict) -> int:
        """Replicates each target asks for at the current estimates (see module notes).

        The count of estimates a target asks for is scaled by R / n, the replicates per estimate
        (1 but for a domain that some replicates miss).
        """
        if self.R == 0:
            return 0
        c = self.coverage()
        var = np.where(self.n > 1, self._var(), 0.0)
        per = self.R / np.maximum(self.n, 1.0)
        need = {
            "coverage_mcse": lambda t: measures.replicates_for_coverage_mcse(c, t),
            "bias_mcse": lambda t: measures.replicates_for_bias_mcse(var, t),
            "empirical_se_rel_mcse": lambda t: np.full_like(c, measures.replicates_for_empirical_se_rel_mcse(t)),
        }
        worst = 0.0
        for name, t in targets.items():
            worst = max(worst, float(np.max(need[name](t) * per)))
        return math.ceil(worst)

    def meets(self, targets: dict) -> bool:
        if self.R < 2:
            return False
        vals = self.values()
        return all(bool(np.all(vals[name] <= t)) for name, t in targets.items())


@dataclass
class CellProgress:
    """Where one cell stands: blocks used so far in block order, and whether it has stopped."""

    tally: Tally = field(default_factory=Tally)
    used: int = 0  # blocks consumed in order
    stopped: bool = False
    met: bool = False


def format_report(rows: list[dict], rule: Rule) -> str:
    """Lines for stdout: per cell, replicates used and needed, and whether the targets were met."""
    lines = [f"stopping rule {rule.text} (cap {rule.max_replicates} replicates):"]
    for r in rows:
        reached = ", ".join(f"{k}={v:.4g}" for k, v in r["reached"].items())
        state = "met" if r["met"] else "NOT met (cap reached)"
        lines.append(f"  {r['design']} (size {r['size']}): {r['replicates']} replicates, {state}; "
                     f"{reached}; replicates needed ~{r['replicates_needed']}")
    return "\n".join(lines)


def replicate_counts(table) -> str:
    """How many replicates the rows of ``table`` (columns ``design``, ``replicates``) rest on, for a sentence.

    ``"2,000"`` when every row used the same count; otherwise (``--until`` stops each design x size
    at its own count) the range and each design's own counts, e.g.
    ``"2,000 to 6,000 (by design and size: 'simple' 2,000; 'strata' 2,000 to 6,000)"``.

    Examples
    --------
    >>> import pandas as pd
    >>> replicate_counts(pd.DataFrame({"design": ["a", "a"], "replicates": [2000, 2000]}))
    '2,000'
    >>> replicate_counts(pd.DataFrame({"design": ["a", "b", "b"], "replicates": [2000, 2000, 6000]}))
    "2,000 to 6,000 (by design and size: 'a' 2,000; 'b' 2,000 to 6,000)"
    """
    if len(table) == 0:
        return "0"

    def span(counts) -> str:
        lo, hi = int(min(counts)), int(max(counts))
        return f"{lo:,}" if lo == hi else f"{lo:,} to {hi:,}"

    whole = span(table["replicates"])
    if " to " not in whole:
        return whole
    if table["design"].nunique() == 1:
        return f"{whole} (by size)"
    each = "; ".join(f"'{d}' {span(g)}" for d, g in table.groupby("design", sort=False)["replicates"])
    return f"{whole} (by design and size: {each})"
