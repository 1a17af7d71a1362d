"""Fieldwork in the rehearsal: selected units are visited, some are ineligible, some never answer.

The glue between the designs and the response, weighting and frame-error modules:

1. :func:`prepare` (once per run) lists the frame from the true population when the
   scenario has ``[frame_error]``, resolves the ``[response]`` model into propensities and
   each design's adjustment into class codes and population controls, and attaches a
   :class:`Fieldwork` to every cell's design.
2. :func:`run_fieldwork_block` (per block, called from ``engine.run_block``) draws the
   design's sample exactly as without fieldwork (same Generator), finds the units behind
   every PSU position (:func:`psu_units`), draws the responses from a second Generator
   whose SeedSequence is the block's with one spawn-key word appended, and estimates twice
   from the same replicate draws: with every eligible unit responding (full response) and
   with the drawn responses, each through the design's adjustment.
3. :func:`samplewright.evaluation.nonresponse.summary_columns` adds the non-response columns to the
   summary.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
import pandas as pd

from samplewright.config.validate import label_codes
from samplewright.designs.block import SampleBlock
from samplewright.errors import InputError
from samplewright.estimation.registry import ESTIMATORS, estimate_points, value_columns
from samplewright.estimation.two_stage_variance import slot_shares
from samplewright.estimation.weighting import AdjustmentSpec, ResolvedAdjustment
from samplewright.population.frame import Frame
from samplewright.simulation import response as _response
from samplewright.simulation.blocks import BlockResult, BlockTask


@dataclass(frozen=True, eq=False)
class Fieldwork:
    """What one design's blocks need at fieldwork: who is eligible, who responds, how to reweight."""

    eligible: np.ndarray  # (N_list,) bool
    propensity: _response.Propensity | None  # None: every eligible unit responds
    adjustment: ResolvedAdjustment
    spec: AdjustmentSpec


@dataclass(frozen=True, eq=False)
class FieldSetup:
    """A run's fieldwork: the frame the designs draw from, the true one, and per-design details."""

    frame: Frame  # the listed frame (the true one when there are no frame errors)
    truth: Frame  # the true population (the evaluator's truths)
    census: dict  # (design label, estimator) -> (V',) estimator on a census of the listed frame
    adjustments: dict  # design label -> AdjustmentSpec
    per_design: dict  # design label -> Fieldwork, what its cells' block runner needs
    info: dict


def adjustment_specs(scenario) -> tuple[AdjustmentSpec, ...]:
    """Each design's weighting adjustment (none for a scenario built without them)."""
    return scenario.adjustments or tuple(AdjustmentSpec() for _ in scenario.designs)


def active(scenario) -> bool:
    """Whether the scenario asks for any fieldwork (response, frame errors or an adjustment)."""
    return (scenario.response is not None or scenario.frame_error is not None
            or any(a.method != "none" for a in adjustment_specs(scenario)))


# ------------------------------------------------------------------ unit layout
def psu_units(block: SampleBlock, frame: Frame) -> tuple[np.ndarray, np.ndarray]:
    """The units behind every PSU position of a block drawn with ``keep_units=True``.

    Returns ``units`` (B, m, k) listed-unit indices (0 where there is no unit) and
    ``valid`` (B, m, k) bool.  Unit designs give one unit per position (k = 1); two-stage
    cluster designs their second-stage units; one-stage cluster designs every unit of each
    chosen cluster (k = the largest chosen cluster).
    """
    B, m = block.sums.shape[:2]
    u = block.units
    if u is None:
        raise InputError("this design does not report the units it selects, so non-response cannot be "
                         "rehearsed for it")
    if isinstance(u, list):  # whole clusters, one concatenated row per replicate
        lengths = np.array([len(r) for r in u])
        flat = np.concatenate(u).astype(np.int64)
        row = np.repeat(np.arange(B), lengths)
        cl = frame.cluster[flat]
        start = np.ones(flat.size, dtype=bool)
        start[1:] = (cl[1:] != cl[:-1]) | (row[1:] != row[:-1])
        chosen = cl[start]
        if chosen.size != B * m:
            raise InputError("the cluster design's unit list does not split into its PSUs")
        chosen = chosen.reshape(B, m)
        sizes = frame.cluster_sizes[chosen]
        pos = np.arange(int(sizes.max()))
        valid = pos < sizes[..., None]
        units = frame.cluster_units[frame.cluster_offsets[chosen][..., None] + np.where(valid, pos, 0)]
    else:
        u = np.asarray(u)
        if u.ndim == 3:
            units = u
        elif u.shape[1] == m:
            units = u[..., None]
        elif u.shape[1] % m == 0:
            units = u.reshape(B, m, -1)
        else:
            raise InputError("this design's unit list does not match its PSU positions, so non-response "
                             "cannot be rehearsed for it")
        valid = units >= 0
    if block.mask is not None:
        valid = valid & block.mask[..., None]
    return np.where(valid, units, 0), valid


#: units per slice of a block's per-unit work (adjustment, adjusted sums, estimates): a slice of
#: whole replicates whose (rows, m, k, V) arrays take a few MiB, so they stay in cache and are
#: reused from the allocator's heap instead of being faulted in afresh for every block
SLICE_UNITS = 1 << 17


def _slices(B: int, per_replicate: int) -> list[slice]:
    """Consecutive slices of whole replicates with about ``SLICE_UNITS`` units each.

    Adjustments and estimators work replicate by replicate, so the numbers do not depend on
    the slicing.

    Examples
    --------
    >>> _slices(5, 60_000)
    [slice(0, 2, None), slice(2, 4, None), slice(4, 5, None)]
    """
    step = max(1, SLICE_UNITS // max(per_replicate, 1))
    return [slice(lo, min(lo + step, B)) for lo in range(0, B, step)]


def _adjusted_sums(u: np.ndarray, count: np.ndarray, inv: np.ndarray) -> np.ndarray:
    """Block sums (B, m, V + 2) whose weighted PSU sums are the adjusted linearised sums.

    Columns: u / weight, count / weight and a zero cost column.  The design's weights are kept
    (``inv`` (B, m) is 1 / weight, 0 where there is none), so a variance routine that reads the
    weights as inverse inclusion probabilities (Poisson, size-proportional designs) still
    finds them.
    """
    V = u.shape[-1]
    out = np.empty(u.shape[:2] + (V + 2,))
    np.multiply(u, inv[..., None], out=out[..., :V])
    np.multiply(count, inv, out=out[..., V])
    out[..., V + 1] = 0.0
    return out


def _estimate(block, frame, cell, confidence):
    outs = estimate_points(block, cell.estimators, cell.variances, frame.N, frame.V, confidence, frame.layout)
    return [np.stack([getattr(o, k) for o in outs]) for k in ("estimate", "se", "lower", "upper")]


def _responses(fw: Fieldwork, frame: Frame, sample: SampleBlock, seedseq: np.random.SeedSequence):
    """The units behind a block's PSU positions, which exist, which are eligible, which respond (B, m, k).

    The responses are drawn for the whole block at once.
    """
    units, valid = psu_units(sample, frame)
    e = valid if fw.eligible.all() else valid & fw.eligible[units]
    if fw.propensity is None:
        return units, valid, e, e
    rng = np.random.default_rng(_response.block_seed(seedseq))
    return units, valid, e, e & fw.propensity.respond(rng, units)


def _adjusted_estimates(fw: Fieldwork, frame: Frame, sample: SampleBlock, units, e, r, cell, confidence):
    """Estimates (estimate, se, lower, upper; each (P, B, V), P the estimator x variance formula points) after
    the adjustment, with the drawn responses ``r`` and with full response, and the replicates whose
    adjustment failed (B,).

    Slice by slice of replicates (:func:`_slices`): the units' rows, the adjusted sums and the
    estimates, so no (B, m, k, V) array of the whole block is built.
    """
    B, m = sample.sums.shape[:2]
    wb = np.broadcast_to(sample.weight, (B, m))
    w = np.broadcast_to(wb[..., None], units.shape)
    inv = np.where(wb > 0, 1.0 / np.where(wb > 0, wb, 1.0), 0.0)
    gather = getattr(frame, "gather", None)  # the padded-row gather where the frame has it
    V = frame.values.shape[1] - 2  # every value column but count and cost
    keep = value_columns(cell.estimators, frame.layout)  # None: the estimators read every column
    positions = np.ones((B, m), dtype=bool) if sample.mask is None else sample.mask
    if sample.psu is not None:  # two stages: the positions are units, counted as shares of their cluster
        positions = slot_shares(sample)
    # with every unit eligible and responding these adjustments change nothing: the drawn block is full response
    unchanged = fw.adjustment.method in ("none", "class") and bool(fw.eligible.all())
    adjusted = dataclasses.replace(sample, units=None)  # its sums are replaced slice by slice
    real, full, failed = [], [], np.empty(B, dtype=bool)
    for s in _slices(B, units[0].size):
        rows = gather(units[s]) if gather is not None else frame.values[units[s]]
        y = rows[..., :V]
        u, cnt, failed[s] = fw.adjustment.apply(units[s], w[s], y, e[s], r[s], positions[s], keep)
        real.append(_estimate(adjusted.replicates(s, _adjusted_sums(u, cnt, inv[s])), frame, cell, confidence))
        if not unchanged:
            uf, cntf, _ = fw.adjustment.apply(units[s], w[s], y, e[s], e[s], positions[s], keep)
            full.append(_estimate(adjusted.replicates(s, _adjusted_sums(uf, cntf, inv[s])), frame, cell,
                                  confidence))
    joined = [np.concatenate(parts, axis=1) for parts in zip(*real)]
    if unchanged:
        return joined, _estimate(sample, frame, cell, confidence), failed
    return joined, [np.concatenate(parts, axis=1) for parts in zip(*full)], failed


def run_fieldwork_block(frame: Frame, cell, task: BlockTask, confidence: float, cost) -> BlockResult:
    """``engine.run_block`` for a cell with fieldwork (see module notes)."""
    fw = cell.fieldwork
    rng = np.random.default_rng(task.seed)
    sample = cell.design.draw(frame, rng, task.count, keep_units=True)
    units, valid, e, r = _responses(fw, frame, sample, task.seed)
    (est, se, lo, hi), (fest, fse, flo, fhi), failed = _adjusted_estimates(
        fw, frame, sample, units, e, r, cell, confidence)
    attempted, eligible, completed = (x.sum(axis=(1, 2)).astype(float) for x in (valid, e, r))
    return BlockResult(
        cell=task.cell, block=task.block, start=task.start, estimate=est, se=se, lower=lo, upper=hi,
        n=completed, cost=cost.replicate_cost(sample, frame, completed=completed),
        attempted=attempted, eligible=eligible, full_estimate=fest, full_se=fse, full_lower=flo, full_upper=fhi,
        full_cost=cost.replicate_cost(sample, frame, completed=eligible), adjustment_failed=failed.astype(float),
    )


# ------------------------------------------------------------------ set-up
def _columns_needed(scenario) -> list[str]:
    names = []
    if scenario.response is not None:
        names += list(scenario.response.columns())
    if scenario.frame_error is not None:
        names += list(scenario.frame_error.columns())
    for spec in adjustment_specs(scenario):
        names += list(spec.columns())
    return list(dict.fromkeys(names))


def _column_arrays(scenario, frame: Frame, names) -> dict:
    """Arrays over the true frame's units for the columns fieldwork reads."""
    out, rest = {}, []
    roles = frame.roles
    for name in names:
        if name in frame.variables:
            out[name] = frame.y[:, frame.variables.index(name)]
        elif name == roles.get("stratum"):
            out[name] = np.asarray(frame.stratum_labels, dtype=object)[frame.stratum]
        elif name == roles.get("cluster"):
            out[name] = np.asarray(frame.cluster_labels, dtype=object)[frame.cluster]
        else:
            rest.append(name)
    if rest:
        from samplewright.config.validate import closest, frame_columns

        spec = scenario.frame
        raw = spec.dataframe()
        source = "synthetic frame" if spec.synthetic is not None else str(spec.path)
        base = {k: v for k, v in spec.roles.items() if k in ("target", "stratum", "cluster", "size", "order",
                                                              "unit_cost", "id")}
        df, _, _ = frame_columns(raw, missing=spec.missing, source=source, **base)
        if len(df) != frame.N:
            raise InputError(f"{source}: the frame given to run() has {frame.N} units but the scenario's frame "
                             f"has {len(df)}; fieldwork columns cannot be matched to units")
        for name in rest:
            if name not in df.columns:
                raise InputError(f"{source}: column {name!r} (used by [response], [frame_error] or an "
                                 f"adjustment) is not in the frame{closest(name, df.columns)}")
            if df[name].isna().any():
                raise InputError(f"{source}: column {name!r} has blank values; fieldwork columns must be complete")
            out[name] = df[name].to_numpy()
    return out


def _numeric(name, values) -> np.ndarray:
    try:
        v = np.asarray(values, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"[response] coefficients: column {name!r} is not numeric") from None
    if not np.isfinite(v).all():
        raise InputError(f"[response] coefficients: column {name!r} has non-finite values")
    return v


def _codes(values) -> tuple[np.ndarray, int]:
    """Codes of a fieldwork column's values compared as text, and how many there are."""
    codes, labels = label_codes(pd.Series(values).astype(str))
    return codes, len(labels)


def _resolve_adjustment(spec: AdjustmentSpec, listed: Frame, source: np.ndarray, cols: dict) -> ResolvedAdjustment:
    if spec.method == "none":
        return ResolvedAdjustment("none")
    if spec.method in ("class", "poststrat"):
        if spec.classes is None:  # the frame's strata
            return ResolvedAdjustment("class", codes=(listed.stratum,), sizes=(listed.H,))
        codes, G = _codes(cols[spec.classes])
        controls = (np.bincount(codes, minlength=G).astype(float),)
        return ResolvedAdjustment(spec.method, codes=(codes[source],), sizes=(G,), controls=controls)
    codes, sizes, controls = [], [], []
    for col in spec.margins:
        c, G = _codes(cols[col])
        codes.append(c[source])
        sizes.append(G)
        controls.append(np.bincount(c, minlength=G).astype(float))
    return ResolvedAdjustment("raking", codes=tuple(codes), sizes=tuple(sizes), controls=tuple(controls))


def _census(fw: Fieldwork, frame: Frame, estimators, confidence) -> dict:
    """Every estimator applied to a census of the listed frame (all eligible listings respond)."""
    N = frame.N
    units = np.arange(N)[None, :, None]
    ones = np.ones((1, N, 1))
    e = fw.eligible[units]
    y = frame.values[units][..., : frame.values.shape[1] - 2]
    u, cnt, _ = fw.adjustment.apply(units, ones, y, e, e, np.ones((1, N), dtype=bool))
    census = SampleBlock(sums=np.concatenate([u, cnt[..., None], np.zeros((1, N, 1))], axis=2),
                         weight=np.ones(N), psu_stratum=np.zeros(N, dtype=np.int64), fpc=np.array([0.0]),
                         clusters=np.zeros(1))
    return {est: ESTIMATORS[est](census, N, frame.V, confidence, frame.layout).estimate[0] for est in estimators}


def prepare(scenario, frame: Frame, seed: int, confidence: float) -> FieldSetup | None:
    """Set up fieldwork for a run (None when the scenario asks for none).

    ``frame`` is the true population as loaded; the returned setup's ``frame`` is what the
    designs must draw from (the listed frame under ``[frame_error]``).
    """
    if not active(scenario):
        return None
    names = _columns_needed(scenario)
    cols = _column_arrays(scenario, frame, names)
    info = {}
    if scenario.frame_error is not None:
        from samplewright.population.frame_errors import list_frame

        lf = list_frame(frame, scenario.frame_error, seed, cols)
        listed, source, eligible = lf.frame, lf.source, lf.eligible
        info["frame_error"] = {**scenario.frame_error.describe(), **lf.counts}
    else:
        listed, source, eligible = frame, np.arange(frame.N), np.ones(frame.N, dtype=bool)
    propensity = None
    if scenario.response is not None:
        model = scenario.response
        for c in model.columns():
            cols[c] = _numeric(c, cols[c])
        p = _response.resolve(model, frame, cols, seed)
        if p.unit is not None:
            propensity = _response.Propensity(p.unit[source])
        else:
            propensity = _response.Propensity(None, cluster=frame.cluster[source], a=p.a, b=p.b)  # true codes
        info["response"] = {**model.describe(),
                            "mean_propensity": None if p.unit is None else float(p.unit.mean())}
    census, adjustments, per_design = {}, {}, {}
    for d, ests, spec in zip(scenario.designs, scenario.estimators, adjustment_specs(scenario)):
        adjustments[d.label] = spec
        fw = Fieldwork(eligible=eligible, propensity=propensity,
                       adjustment=_resolve_adjustment(spec, listed, source, cols), spec=spec)
        per_design[d.label] = fw
        for est, value in _census(fw, listed, ests, confidence).items():
            census[(d.label, est)] = value
    info["adjustments"] = {label: s.describe() for label, s in adjustments.items()}
    info["response_seed"] = ("block SeedSequence with spawn_key extended by "
                             f"{_response.BLOCK_KEY} (crc32 of 'response-draws')")
    return FieldSetup(frame=listed, truth=frame, census=census, adjustments=adjustments, per_design=per_design,
                      info=info)
