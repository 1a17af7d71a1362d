"""Run a scenario: bind the frame, check the designs, simulate, evaluate."""

from __future__ import annotations

import dataclasses
import logging
import platform
import time
import warnings
from collections.abc import Callable
from contextlib import contextmanager

import numpy as np
import pandas as pd

from samplewright._version import __version__
from samplewright.config.stress import lines
from samplewright.decision import frontier, recommend, settle, stability
from samplewright.decision.stress import break_even_table, outcome, stress_table, verdict_table
from samplewright.diagnostics.checks import (
    cost_notes,
    design_notes,
    design_warnings,
    frame_warnings,
    variance_warnings,
)
from samplewright.diagnostics.frame_order import order_evidence
from samplewright.errors import InputError, SamplewrightWarning
from samplewright.evaluation.exact import LIMIT as SAMPLE_LIMIT
from samplewright.evaluation.exact import check_counts, evaluate_exact
from samplewright.evaluation.measures import summarise
from samplewright.evaluation.nonresponse import summary_columns
from samplewright.evaluation.stopping import Rule, parse_until
from samplewright.memory import release_freed_memory, rss_mib
from samplewright.population.frame import Frame
from samplewright.report import verdict
from samplewright.report.table import with_frontier_mcse
from samplewright.results.replicate_file import CellTables
from samplewright.results.result import ALLOCATION_COLUMNS, RunResult
from samplewright.simulation.checkpoint import BlockStore
from samplewright.simulation.engine import replicate_table, simulate, simulate_cells, simulate_until
from samplewright.simulation.limits import check_run_memory
from samplewright.simulation.plan import RunOptions, RunPlan, build_plan, run_settings, with_store
from samplewright.simulation.progress import Progress
from samplewright.simulation.scenario import Scenario
from samplewright.simulation.stress import PointProgress, check_plans, has_blocks, point_folder, stress_points

logger = logging.getLogger("samplewright")
#: the log level of notes: facts of the set-up that need no action (between INFO and WARNING)
NOTE = 25
logging.addLevelName(NOTE, "NOTE")


def _listened() -> bool:
    """Whether some handler besides the package's NullHandler reads the ``samplewright`` log."""
    return any(not isinstance(h, logging.NullHandler) for h in logger.handlers)


def _version(name: str) -> str:
    """The version of the installed package ``name``: from the module when it is imported, else from
    the package's metadata, so a run at --jobs 1 does not import joblib only to name its version."""
    import sys

    if name in sys.modules:
        return sys.modules[name].__version__
    from importlib import import_module, metadata

    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:  # pragma: no cover - imported from a folder without metadata
        return import_module(name).__version__


def _versions() -> dict:
    return {"samplewright": __version__, "python": platform.python_version(), "numpy": np.__version__,
            "pandas": pd.__version__, "scipy": _version("scipy"), "joblib": _version("joblib")}


def allocation_table(frame: Frame, cells) -> pd.DataFrame:
    rows = []
    for cell in cells:
        alloc = cell.design.stratum_allocation(frame)
        if alloc is None:
            continue
        N_h, n_h = alloc
        for h, label in enumerate(cell.design.strata_frame(frame).stratum_labels):
            rows.append({"design": cell.design.label, "size": int(cell.design.size), "stratum": label,
                         "population_units": int(N_h[h]), "sample_units": int(n_h[h])})
    return pd.DataFrame(rows, columns=ALLOCATION_COLUMNS)


def run(scenario: Scenario, replicates: int | None = None, seed: int | None = None, jobs: int = 1,
        block_size: int | None = None, frame: Frame | None = None, progress: bool | None = False,
        exact: bool = False, log=None, until: str | None = None, max_replicates: int | None = None, out=None,
        resume: bool = False, backend: str = "local", scheduler: str | None = None, warn=None, note=None,
        ready=None) -> RunResult:
    """Rehearse every design of ``scenario`` and score it.

    Parameters
    ----------
    scenario : Scenario
        From :func:`load_scenario` or :func:`scenario_from_dict`.
    replicates, seed, block_size : int, optional
        Override the scenario's values.
    jobs : int
        Parallel workers (joblib); results do not depend on it.
    frame : Frame, optional
        A frame already loaded (otherwise the scenario's frame is loaded).
    progress : bool or None
        Show a progress bar on stderr (None: only when stderr is a terminal).
    log : callable, optional
        Called with one line of text for each step (``--verbose``).
    warn : callable, optional
        Called with each warning as soon as the checks are done, before any simulating (the
        CLI prints them); the warnings are also kept in run.json.
    note : callable, optional
        Called, like ``warn``, with each note: a fact of the set-up that needs no action (how an
        allocation was rounded, certainty units, costs not modelled); kept in run.json ``notes``.
    exact : bool
        Enumerate every possible sample instead of simulating (``run --exact``; see
        :mod:`samplewright.evaluation.exact`): exact design moments, no Monte Carlo error.
    until : str, optional
        Sequential stopping rule, e.g. ``"coverage_mcse=0.002"`` (see :mod:`samplewright.evaluation.stopping`):
        each design x size adds blocks until it meets the rule; ``replicates`` is then the minimum.
    max_replicates : int, optional
        Replicate cap of a stopping rule (default 100 times ``replicates``, at least 100,000), and of the
        replicates added to undecided points that could change the pick (without ``until``: default 10
        times ``replicates``; see :mod:`samplewright.decision.settle`).
    out : path, optional
        Results folder: finished blocks are kept in ``out/blocks/`` as they complete (the
        ``run`` and ``demo`` commands remove them once the tables are written, unless ``--keep-blocks``).
        A run without a [goal], ``until`` or assumption points also streams its replicate table to a
        temporary file there, cell by cell, instead of holding it whole (``RunResult.write`` moves it into
        place; ``res.replicates`` reads it on first use; see :mod:`samplewright.results.replicate_file`).
    resume : bool
        Continue the run whose blocks are in ``out/blocks/`` (seed, replicates, block size and
        stopping rule default to the saved ones; a mismatch is refused).
    backend, scheduler : str
        ``"local"`` (default) or ``"dask"`` with the address of a dask.distributed scheduler.
    ready : callable, optional
        Called once every check has passed, before anything is simulated or written (the CLI
        makes the results folder then, so a refused run leaves no folder behind).

    Examples
    --------
    >>> from samplewright import scenario_from_dict, run
    >>> sc = scenario_from_dict({"frame": {"synthetic": {"units": 400, "seed": 2}},
    ...                          "design": [{"label": "simple", "method": "srs", "n": 40}]})
    >>> res = run(sc, replicates=200, seed=1)
    >>> row = res.summary.iloc[0]
    >>> row["design"], row["estimator"], int(row["replicates"])
    ('simple', 'ht', 200)
    """
    options = RunOptions(replicates=replicates, seed=seed, jobs=jobs, block_size=block_size, exact=exact,
                         until=until, max_replicates=max_replicates, out=out, resume=resume, backend=backend,
                         scheduler=scheduler)
    with _callbacks(log, warn, note):
        return run_with(scenario, options, frame=frame, progress=progress, ready=ready)


class _Callbacks(logging.Handler):
    """Hands the run's log records to the callables given to :func:`run`, by level."""

    def __init__(self, log, warn, note):
        super().__init__(logging.DEBUG)
        self.by_level = ((logging.WARNING, warn), (NOTE, note), (logging.DEBUG, log))

    def emit(self, record: logging.LogRecord) -> None:
        target = next(call for level, call in self.by_level if record.levelno >= level)
        if target is not None:
            target(record.getMessage())


@contextmanager
def _callbacks(log, warn, note):
    """While a run goes, the ``log``/``warn``/``note`` callables of :func:`run` receive its records."""
    if log is None and warn is None and note is None:
        yield
        return
    handler, level = _Callbacks(log, warn, note), logger.level
    logger.addHandler(handler)
    logger.setLevel(logging.INFO if log is not None else NOTE if note is not None else logging.WARNING)
    try:
        yield
    finally:
        logger.removeHandler(handler)
        logger.setLevel(level)


def run_with(scenario: Scenario, options: RunOptions, frame: Frame | None = None, progress: bool | None = False,
             ready: Callable[[], None] | None = None) -> RunResult:
    """:func:`run` with its options gathered: options -> plan -> simulate -> evaluate -> decide -> result.

    Steps are logged at INFO, notes at :data:`NOTE` and warnings at WARNING on the ``"samplewright"``
    logger; ``ready`` is called once every check has passed, before anything is simulated or written.
    With ``[[assumption]]`` tables every assumption point is checked before anything runs, then run
    after the scenario's own values (see :func:`_stress`).
    """
    points = stress_points(scenario)
    if not points:
        return _run_one(scenario, options, frame, progress, ready, stream=True)
    if frame is None and scenario.frame.synthetic is None:  # a frame file is read once for every point
        logger.info("loading the frame")
        frame = scenario.load_frame()
    shared = None if scenario.frame.synthetic is not None else frame

    def checked():  # every point's plan too, before anything is simulated or written
        check_plans(points, options, shared)
        if ready is not None:
            ready()

    res = _run_one(scenario, options, frame, progress, checked)
    _stress(res, scenario, points, options, shared, progress)
    return res


def _run_one(scenario: Scenario, options: RunOptions, frame: Frame | None, progress: bool | None,
             ready: Callable[[], None] | None, stream: bool = False) -> RunResult:
    """One run of the scenario as written (see :func:`run_with`).

    With ``stream`` (a run without assumption points), a run without a ``[goal]`` or stopping rule that
    keeps its blocks in a results folder streams its replicate table to disk cell by cell
    (:mod:`samplewright.results.replicate_file`) instead of holding it whole.
    """
    started = time.monotonic()
    saved = None
    if options.resume:  # the saved run's settings, unless given again (then they must agree)
        options, saved = _resumed(options)
    replicates, _, _ = run_settings(scenario, options)
    rule = _stopping_rule(options, replicates)
    cap = _settle_cap(options, replicates, rule)
    if options.max_replicates is not None and rule is None and not scenario.goals and not options.resume:
        raise InputError("--max-replicates caps the replicates of --until or those added to undecided points "
                         "of a [goal]; this run has neither: give --until or a [goal], or leave it out")
    if frame is None:
        logger.info("loading the frame")
    plan = build_plan(scenario, options, frame=frame, stopping=rule)
    frame = plan.frame
    logger.info(f"frame: {frame.N} units, {frame.H} strata, {frame.C} clusters, targets {', '.join(frame.variables)}")
    manifest = None if options.out is None else _manifest(plan, scenario, cap)
    if saved is not None:  # refused before any warning about the run asked for now
        saved.check(manifest, options.out)
    stream = (stream and not options.exact and not scenario.goals and rule is None and options.out is not None
              and len({c.fieldwork is None for c in plan.cells}) == 1)
    _check_size(plan, options, cap if scenario.goals else None, stream)
    if ready is not None:  # every check passed
        ready()
    warned, notes = _checks(plan, options.exact)
    if options.exact:
        return _exact_result(plan, scenario, warned, notes, started)
    logger.info(f"{len(plan.cells)} design x size cells, {plan.replicates} replicates each, "
                f"blocks of {plan.block_size}")
    bar = Progress({label: 0 for label in plan.labels}, enabled=progress)
    for label in plan.labels:
        bar.totals[label] += plan.replicates
    if options.out is not None:
        plan = with_store(plan, _block_store(saved, options.out, manifest, bar, warned))
    if stream:
        tables = CellTables(plan, {d.label: d.method for d in scenario.designs}, plan.store.folder)
        stopping, seconds = None, _simulate_cells(plan, bar, tables)
        _simulated(seconds)
        res = _evaluate_cells(plan, scenario, tables)
        _decide(res, scenario, plan.seed, tables)
    else:
        results, stopping, seconds = _simulate(plan, bar)
        _simulated(seconds)
        res = _evaluate(plan, scenario, results)
        _decide(res, scenario, plan.seed)
    res, settled = _settle(plan, scenario, res, cap, progress)
    res.info = _run_info(plan, scenario, stopping, warned, notes) | {
        "elapsed_seconds": round(time.monotonic() - started, 3),
        "simulation_seconds": round(seconds + settled["seconds"], 3), "frame_order": res.info["frame_order"],
        "evidence": settled, "replicates_used": _replicates_used(res.summary)}
    res.warnings = warned
    _words(res, scenario)
    return res


def _simulated(seconds: float) -> None:
    """Log the simulation's time and the process's peak memory so far (where the system tells it)."""
    peak = rss_mib()[1]
    logger.info(f"simulated in {seconds:.2f} s" + (f" (peak memory so far {peak:,.0f} MiB)" if peak == peak else ""))


def _stress(res: RunResult, scenario: Scenario, points: list, options: RunOptions, frame: Frame | None,
            progress: bool | None) -> None:
    """Run every assumption point (common random numbers: the run's seed, see simulation/stress.py) and set
    ``res.stress``, ``res.stress_verdict`` and ``res.break_even``.

    Each point keeps its blocks in ``OUT/stress/point_NNN/`` and resumes from them; its warnings not
    already given by the run are given once, naming the point.
    """
    info = res.info
    if not options.exact:  # the run's settings, resumed or given, for every point
        stop = info.get("stopping") or {}
        options = dataclasses.replace(options, seed=info["seed"], replicates=info["replicates"],
                                      block_size=info["block_size"], until=stop.get("until", options.until),
                                      max_replicates=stop.get("max_replicates", options.max_replicates))
    bar = PointProgress(points, enabled=progress)
    outcomes = []
    for point in points:
        folder = None if options.out is None else point_folder(options.out, point)
        opts = dataclasses.replace(options, out=folder,
                                   resume=options.resume and folder is not None and has_blocks(folder))
        heard: list[str] = []
        with _held(heard):
            r = _run_one(point.scenario, opts, frame, False, None)
        for message in dict.fromkeys(heard):
            if message not in res.warnings:
                bar.break_line()
                res.warnings.append(f"assumption point {point.index} ({point.describe()}): {message}")
                logger.warning(res.warnings[-1])
        res.late_failures += [(f"assumption point {point.index}: {what}", exc) for what, exc in r.late_failures]
        outcomes.append(outcome(point.index, point.values, r.summary, r.replicates, r.frontier, r.recommendation))
        bar.point_done(point)
    bar.close()
    spec = scenario.stress
    try:
        res.stress = stress_table(outcomes, spec.names)
        res.stress_verdict = verdict_table(outcomes, spec.names)
        res.break_even = break_even_table(outcomes, spec.names, lines(spec))
    except Exception as exc:  # noqa: BLE001 -- a failure after the simulation must never cost its tables
        _late_failure(res, "the stress tables (stress.csv, stress_verdict.csv, break_even.csv)", exc)
    res.info["stress"] = {"mode": spec.mode, "points": len(points), "max_points": spec.max_points,
                          "assumptions": [{"name": a.name, "set": a.key, "values": list(a.values), "base": a.base}
                                          for a in spec.assumptions]}


class _Heard(logging.Handler):
    def __init__(self, into: list):
        super().__init__(logging.WARNING)
        self.into = into

    def emit(self, record: logging.LogRecord) -> None:
        self.into.append(record.getMessage())


@contextmanager
def _held(into: list):
    """While a point runs, its warnings are kept in ``into`` and nothing else of its log is shown."""
    saved, propagate = logger.handlers[:], logger.propagate
    logger.handlers[:], logger.propagate = [_Heard(into)], False
    try:
        yield
    finally:
        logger.handlers[:], logger.propagate = saved, propagate


def _resumed(options: RunOptions):
    """The options of a resumed run: the saved run's settings where none is given; and its block store."""
    if options.out is None:
        raise InputError("resume needs the results folder of the run to continue")
    saved = BlockStore.open(options.out)
    m = saved.manifest
    kept = {k: m.get(k) for k in ("replicates", "seed", "block_size", "until", "max_replicates")
            if getattr(options, k) is None}
    return dataclasses.replace(options, **kept), saved


def _stopping_rule(options: RunOptions, replicates: int) -> Rule | None:
    """The sequential stopping rule of ``--until`` (None without one); ``--max-replicates`` needs it."""
    if options.until is None:  # --max-replicates alone caps the replicates added to undecided points
        return None
    cap = max(100 * replicates, 100_000) if options.max_replicates is None else options.max_replicates
    rule = parse_until(options.until, cap)
    if rule.max_replicates < replicates:
        raise InputError(f"--max-replicates {rule.max_replicates} is below the {replicates} replicates every "
                         f"design runs first; raise it or lower --replicates")
    return rule


def _settle_cap(options: RunOptions, replicates: int, rule: Rule | None) -> int:
    """The most replicates a cell may reach while undecided points are settled: the stopping rule's cap,
    else ``--max-replicates``, else :func:`samplewright.decision.settle.default_cap`."""
    if rule is not None:
        return rule.max_replicates
    cap = settle.default_cap(replicates) if options.max_replicates is None else int(options.max_replicates)
    if cap < replicates:
        raise InputError(f"--max-replicates {cap} is below the {replicates} replicates every design runs "
                         f"first; raise it or lower --replicates")
    return cap


def _manifest(plan: RunPlan, scenario: Scenario, cap: int) -> dict:
    """What the blocks kept in out/blocks/ are drawn from (a resumed run must match it); ``cap`` is the
    most replicates a cell may reach (stopping rule or settling undecided points)."""
    rule = plan.stopping
    return {
        "scenario": str(scenario.source.resolve()) if scenario.source else None,
        "scenario_hash": scenario.hash, "seed": plan.seed, "block_size": plan.block_size,
        "replicates": plan.replicates, "confidence": plan.confidence, "until": rule.text if rule else None,
        "max_replicates": cap,
        "cells": [[c.design.label, int(c.design.size)] for c in plan.cells], "frame_units": plan.frame.N,
        "frame": plan.truth.roles.get("source"), "frame_hash": plan.truth.content_hash}


def _check_size(plan: RunPlan, options: RunOptions, settle_cap: int | None = None, stream: bool = False) -> None:
    """Refuse, before anything is allocated or written, an enumeration or a simulation too large to run
    (``settle_cap``: the replicates a cell may reach while undecided points are settled, when it may;
    ``stream``: the replicate table is streamed to disk, only the cells being filled are held)."""
    if options.exact:  # every possible sample instead of Monte Carlo (exact.py)
        if options.until is not None or options.resume or plan.fieldwork is not None:
            raise InputError("--exact enumerates every possible sample without simulating: it cannot be combined "
                             "with --until, --resume or fieldwork settings (non-response, frame errors)")
        check_counts(plan.frame, plan.cells)
        return
    jobs = plan.jobs if plan.backend == "local" else 1
    caps = [c for c in (plan.stopping.max_replicates if plan.stopping else None, settle_cap) if c is not None]
    check_run_memory(plan.frame, plan.cells, plan.replicates, plan.block_size, jobs, max(caps) if caps else None,
                     streamed=stream)


def _checks(plan: RunPlan, exact: bool) -> tuple[list[str], list[str]]:
    """The run's warnings and notes, each once, told to the caller before any time is spent simulating."""
    frame, cells = plan.frame, plan.cells
    warned = list(dict.fromkeys(frame_warnings(frame) + variance_warnings(plan.truth)
                                + design_warnings(frame, cells, None if exact else plan.replicates)))
    notes = list(dict.fromkeys(design_notes(frame, cells) + cost_notes(plan.cost, frame)))
    for message in warned:
        logger.warning(message)
    for message in notes:
        logger.log(NOTE, message)
    return warned, notes


def _block_store(saved, out, manifest: dict, bar: Progress, warned: list):
    """The store keeping finished blocks in ``out/blocks/``: the resumed run's, or a new one."""
    if saved is not None:
        store = saved
        logger.info(f"resuming: {len(store.finished())} finished blocks in {store.folder}")
    else:
        store = BlockStore.create(out, manifest)

    def damaged(message: str) -> None:  # a block file drawn again: said now and kept in run.json
        warned.append(message)
        if logger.isEnabledFor(logging.WARNING) and _listened():
            bar.break_line()
        logger.warning(message)

    store.warn = damaged
    return store


def _simulate(plan: RunPlan, bar: Progress):
    """Every block of the plan: (block results, the stopping report or None, seconds spent)."""
    started = time.monotonic()
    cells = plan.cells

    def advance(cell_id: int, count: int) -> None:
        bar.update(cells[cell_id].design.label, count)

    stopping = None
    try:
        if plan.stopping is None:
            results = simulate(plan, progress=advance)
        else:
            results, stopping = simulate_until(plan, progress=advance)
    except BaseException:  # Ctrl-C or a failure: its message starts on a line of its own
        bar.break_line()
        raise
    bar.close()
    return results, stopping, time.monotonic() - started


def _simulate_cells(plan: RunPlan, bar: Progress, tables: CellTables) -> float:
    """Every block of the plan, each cell handed to ``tables`` as soon as it is complete; seconds spent.
    On failure or Ctrl-C the temporary replicate file goes (the blocks stay for --resume)."""
    started = time.monotonic()
    cells = plan.cells

    def advance(cell_id: int, count: int) -> None:
        bar.update(cells[cell_id].design.label, count)

    try:
        for ci, arrays in simulate_cells(plan, progress=advance):
            tables.add(cells[ci], arrays)
            del arrays
            release_freed_memory()  # the cell's block arrays just freed: hand their pages back
    except BaseException:  # Ctrl-C or a failure: its message starts on a line of its own
        bar.break_line()
        tables.discard()
        raise
    bar.close()
    return time.monotonic() - started


def _evaluate_cells(plan: RunPlan, scenario: Scenario, tables: CellTables) -> RunResult:
    """The result tables of a streamed run: the summary built cell by cell, the replicate table on disk."""
    order_info, order_table = order_evidence(plan.frame, scenario.designs)  # a cycle along a systematic walk
    res = RunResult(summary=tables.summary, replicates=tables.finish(),
                    allocation=allocation_table(plan.frame, plan.cells), info={}, frame_order=order_table)
    res.info["frame_order"] = order_info
    return res


def _evaluate(plan: RunPlan, scenario: Scenario, results: list) -> RunResult:
    """The result tables of the simulated blocks (``results`` is emptied as they are copied)."""
    frame = plan.frame
    reps = replicate_table(results, plan.cells, frame.layout.names, consume=True)  # targets, then domain variables
    release_freed_memory()  # the many small block arrays just freed: hand their pages back
    return _evaluate_table(plan, scenario, reps)


def _evaluate_table(plan: RunPlan, scenario: Scenario, reps: pd.DataFrame) -> RunResult:
    """The result tables of a replicate table."""
    frame = plan.frame
    methods = {d.label: d.method for d in scenario.designs}
    summary = summarise(reps, plan.truth, methods, plan.confidence)
    if plan.fieldwork is not None:  # response, bias split and full-response columns after the contract ones
        summary = summary_columns(summary, reps, plan.fieldwork)
    order_info, order_table = order_evidence(frame, scenario.designs)  # a cycle along a systematic walk
    res = RunResult(summary=summary, replicates=reps, allocation=allocation_table(frame, plan.cells), info={},
                    frame_order=order_table)
    res.info["frame_order"] = order_info
    return res


#: rounds of adding replicates to undecided points (each re-decides; a round only runs while some point
#: that could change the pick is undecided below the cap)
SETTLE_ROUNDS = 4


def _settle(plan: RunPlan, scenario: Scenario, res: RunResult, cap: int, progress) -> tuple[RunResult, dict]:
    """Add blocks to the cells of undecided points that could change the pick, until decided or at ``cap``
    replicates (:mod:`samplewright.decision.settle`), re-deciding after each round.

    Returns the result (its tables rebuilt when replicates were added) and what was done, for run.json.
    """
    done = {"max_replicates": cap, "rounds": [], "seconds": 0.0}
    names = list(plan.frame.layout.names)
    truths = dict(zip(plan.truth.layout.names, plan.truth.layout.truth))  # as the summary scores them
    truth = np.array([truths[v] for v in names], dtype=float)
    for _ in range(SETTLE_ROUNDS):
        rec = res.recommendation
        if rec is None or not settle.settle_targets(rec, plan.confidence):
            break
        counts = res.replicates.groupby(["design", "size"], sort=False)["replicate"].nunique()
        todo = [(ci, cell) for ci, cell in enumerate(plan.cells)
                if settle.criteria_of(rec, cell, names, plan.confidence)
                and counts.get((cell.design.label, int(cell.design.size)), 0) < cap]
        if not todo:
            break
        logger.info(f"adding replicates to {len(todo)} design x size cells with undecided points (cap {cap:,})")
        started = time.monotonic()
        reps, report = _settle_round(plan, res.replicates, rec, todo, counts, cap, truth, progress)
        done["seconds"] += time.monotonic() - started
        done["rounds"].append(report)
        res = _evaluate_table(plan, scenario, reps)
        _decide(res, scenario, plan.seed)
    done["seconds"] = round(done["seconds"], 3)
    return res, done


def _replicates_used(summary: pd.DataFrame) -> list[dict]:
    """The replicates each design x size ran (more than asked where undecided points were settled; a
    domain's rows count only the replicates that met it, so the largest count of a cell is its own)."""
    counts = summary.groupby(["design", "size"], sort=False)["replicates"].max()
    return [{"design": d, "size": int(s), "replicates": int(n)} for (d, s), n in counts.items()]


def _settle_round(plan: RunPlan, reps: pd.DataFrame, rec: dict, todo: list, counts, cap: int, truth: np.ndarray,
                  progress) -> tuple[pd.DataFrame, list[dict]]:
    """One round of :func:`_settle` on the cells ``todo`` ((position, cell)): the replicate table with
    the blocks added, and the rule's per-cell report."""
    names = list(plan.frame.layout.names)
    floors = {ci: int(counts[(c.design.label, int(c.design.size))]) // plan.block_size for ci, c in todo}
    kept = _drop_partial(reps, [(c, floors[ci] * plan.block_size) for ci, c in todo])
    if plan.store is not None:  # a partial last block is drawn again in full: its file is not a damaged one
        for ci, c in todo:
            if int(counts[(c.design.label, int(c.design.size))]) % plan.block_size:
                plan.store.discard(c, floors[ci])
    rule = settle.SettleRule(
        criteria={k: settle.criteria_of(rec, c, names, plan.confidence) for k, (_, c) in enumerate(todo)},
        start={k: (settle.starting_sums(kept, c, names, truth), floors[ci],
                   int(counts[(c.design.label, int(c.design.size))])) for k, (ci, c) in enumerate(todo)},
        max_replicates=cap, block_size=plan.block_size, nominal=plan.confidence,
        tolerance=rec["coverage_tolerance"], budget=rec["goal"]["budget"])
    bar = Progress({c.design.label: 0 for _, c in todo}, enabled=progress)
    for _, c in todo:  # at most up to the cap
        bar.totals[c.design.label] += cap - int(counts[(c.design.label, int(c.design.size))])
    sub = dataclasses.replace(plan, cells=tuple(c for _, c in todo), stopping=rule)
    new, report = simulate_until(sub, progress=lambda k, count: bar.update(todo[k][1].design.label, count))
    bar.close()
    for r in new:  # back to the cell's position in the run
        r.cell = todo[r.cell][0]
    return _merged(plan, kept, replicate_table(new, plan.cells, names, consume=True)), report


def _drop_partial(reps: pd.DataFrame, cells) -> pd.DataFrame:
    """``reps`` without the replicates of each (cell, first replicate) from there on: a cell's last,
    partial block is drawn again in full, as a longer run would draw it."""
    drop = np.zeros(len(reps), dtype=bool)
    for cell, first in cells:
        drop |= ((reps["design"] == cell.design.label) & (reps["size"] == int(cell.design.size))
                 & (reps["replicate"] >= first)).to_numpy()
    return reps[~drop].reset_index(drop=True) if drop.any() else reps


def _merged(plan: RunPlan, reps: pd.DataFrame, more: pd.DataFrame) -> pd.DataFrame:
    """The replicate table with more replicates, in the engine's order: cell, estimator, variable, replicate."""
    table = pd.concat([reps, more], ignore_index=True)
    keys = [(c.design.label, int(c.design.size), e) for c in plan.cells for e in c.estimators]  # in table order
    rank = pd.Series(np.arange(len(keys)), index=pd.MultiIndex.from_tuples(keys))
    at = rank.reindex(pd.MultiIndex.from_arrays([table["design"], table["size"], table["estimator"]])).to_numpy()
    var = {v: i for i, v in enumerate(plan.frame.layout.names)}
    order = np.lexsort((table["replicate"].to_numpy(), table["variable"].map(var).to_numpy(), at))
    return table.iloc[order].reset_index(drop=True)


def _frame_info(frame: Frame) -> dict:
    return {"units": frame.N, "strata": frame.H, "clusters": frame.C,
            "roles": {k: v for k, v in frame.roles.items() if k != "source"}, "source": frame.roles.get("source")}


def _designs_info(scenario: Scenario) -> list[dict]:
    return [{"label": d.label, "method": d.method, "parameters": d.settings, "variance": d.variance_name,
             "variances": list(d.variance_names)}
            for d in scenario.designs]


def _run_info(plan: RunPlan, scenario: Scenario, stopping, warned: list, notes: list) -> dict:
    """run.json's content (the timings are added by the caller)."""
    frame, rule = plan.frame, plan.stopping
    frame_info = _frame_info(frame)
    frame_info = {**{k: frame_info[k] for k in ("units", "strata", "clusters")},
                  "variables": list(frame.variables), "proportions": list(frame.layout.proportions),
                  "domain_variables": list(frame.layout.names[frame.V:]),
                  "roles": frame_info["roles"], "source": frame_info["source"]}
    return {
        "title": scenario.title,
        "scenario": str(scenario.source) if scenario.source else None,
        "scenario_hash": scenario.hash,
        "seed": plan.seed,
        "seed_entropy": int(np.random.SeedSequence(plan.seed).entropy),
        "replicates": plan.replicates,
        "block_size": plan.block_size,
        "jobs": plan.jobs,
        "backend": plan.backend,
        "stopping": None if rule is None else {**rule.as_dict(), "cells": stopping},
        "confidence": plan.confidence,
        "frame": frame_info,
        "designs": _designs_info(scenario),
        "labels": scenario.labels.as_dict(),
        "versions": _versions(),
        "elapsed_seconds": None,
        "simulation_seconds": None,
        "warnings": warned,
        "notes": notes,
        "fieldwork": None if plan.fieldwork is None else plan.fieldwork.info,
        **_python_call(plan, scenario),
    }


def _python_call(plan: RunPlan, scenario: Scenario, exact: bool = False) -> dict:
    """run.json's ``reproduce`` of a run made through this API: none (the command line sets its own,
    ``cli/common.py``), and a ``reproduce_note`` naming the call that gives the same numbers."""
    if exact:
        call = "exact=True"
    else:
        rule = plan.stopping
        call = f"replicates={plan.replicates}, seed={plan.seed}" + (
            f", until={rule.text!r}, max_replicates={rule.max_replicates}" if rule else "") + (
            f", block_size={plan.block_size}" if plan.block_size != scenario.block_size else "")
    what = f"load_scenario({str(scenario.source)!r})" if scenario.source else "scenario"
    return {"reproduce": None,
            "reproduce_note": f"made through the Python API, not the command line: samplewright.run({what}, {call}) "
                              f"gives the same numbers with the same scenario (scenario_hash) and frame"}


def _exact_result(plan: RunPlan, scenario: Scenario, warned: list, notes: list, started: float) -> RunResult:
    """The result of an exact-mode run (``run --exact``): every possible sample, no Monte Carlo error."""
    frame = plan.frame
    enumeration_started = time.monotonic()
    summary, samples, counts = evaluate_exact(frame, plan.cells, plan.confidence, plan.cost)
    enumerated = time.monotonic()
    frame_info = _frame_info(frame)
    info = {
        "title": scenario.title,
        "scenario": str(scenario.source) if scenario.source else None,
        "scenario_hash": scenario.hash,
        "exact": True,
        "samples": counts,
        "sample_limit": SAMPLE_LIMIT,
        "replicates": None,
        "confidence": plan.confidence,
        "frame": {**{k: frame_info[k] for k in ("units", "strata", "clusters")},
                  "variables": list(frame.layout.names), "roles": frame_info["roles"], "source": frame_info["source"]},
        "designs": _designs_info(scenario),
        "labels": scenario.labels.as_dict(),
        "versions": _versions(),
        "elapsed_seconds": round(time.monotonic() - started, 3),
        "enumeration_seconds": round(enumerated - enumeration_started, 3),
        "warnings": warned,
        "notes": notes,
        **_python_call(plan, scenario, exact=True),
    }
    return RunResult(summary=summary, replicates=samples, allocation=allocation_table(frame, plan.cells),
                     info=info, warnings=warned)


def _decide(res: RunResult, scenario: Scenario, seed: int, tables: CellTables | None = None) -> None:
    """The frontier and recommendation; a failure here never costs the simulated tables.  A streamed run
    (``tables``, no [goal]) gives the frontier its per-cell cost and MSE tallies instead of the whole table."""
    try:
        if tables is not None:
            res.frontier, res.recommendation = goal_tables(res.summary, None, scenario, seed, tables=tables)
            return
        res.frontier, res.recommendation = goal_tables(res.summary, res.replicates, scenario, seed)
    except Exception as exc:  # noqa: BLE001 -- a failure after the simulation must never cost its tables
        _late_failure(res, "the cost-precision frontier and recommendation", exc)


def _words(res: RunResult, scenario: Scenario) -> None:
    """The recommendation's units and its statement: the verdict sentence (report/verdict.py), once the run's
    information is complete."""
    rec = res.recommendation
    if rec is None:
        return
    try:
        rec["units"] = {"currency": scenario.labels.currency, "variables": dict(scenario.labels.units)}
        rec["statement"] = verdict.verdict_sentence(rec, res.info, with_frontier_mcse(res.summary, res.frontier))
    except Exception as exc:  # noqa: BLE001 -- a failure after the simulation must never cost its tables
        _late_failure(res, "the verdict sentence", exc)


def _late_failure(res: RunResult, what: str, exc: Exception) -> None:
    """Keep and tell a step after the simulation that failed (the result tables are complete)."""
    res.late_failures.append((what, exc))
    if _listened():
        logger.warning(f"{what} failed ({type(exc).__name__}: {exc}); the result tables are complete")
    else:  # nobody reads the log: a Python warning, so the failure is not silent
        warnings.warn(f"{what} failed ({type(exc).__name__}: {exc}); the result tables are complete",
                      SamplewrightWarning, stacklevel=4)


def goal_tables(summary: pd.DataFrame, reps: pd.DataFrame | None, scenario: Scenario, seed: int | None = None,
                tables: CellTables | None = None):
    """The cost-precision frontier (always) and the recommendation (when the scenario has a [goal]).

    ``tables`` (a streamed run without a [goal], ``reps`` None): the frontier's cost and MSE tallies.

    With the run's ``seed``, the recommendation also says how firm its pick is (a bootstrap of the
    replicates, :mod:`samplewright.decision.stability`, ``[goal] stability_rounds`` rounds).
    """
    goal = scenario.goal
    conf = scenario.confidence if goal is None or goal.confidence is None else goal.confidence
    tallies = {} if tables is None else {"costs": tables.costs, "mses": tables.mses}
    front = frontier.frontier_table(summary, reps, conf, **tallies)  # looked up on call, so a test may replace it
    if goal is None:
        return front, None
    exact = "exact" in summary.columns and bool(summary["exact"].all())
    domain = scenario.frame.roles.get("domain")
    rec = recommend.recommend(front, scenario.goals, scenario.confidence, domain, exact=exact)
    rounds = 0 if seed is None else goal.stability_rounds
    rec.update(stability.stability(front, reps, scenario.goals, scenario.confidence, seed, rounds, domain, exact))
    return front, rec


def propose(scenario, budget: float | None = None, moe: float | None = None, relative_moe: float | None = None,
            max_candidates: int = 6, screen_on: str | None = None, stratify_by: str | None = None,
            **run_options) -> RunResult:
    """Search designs for the goal, screen them by closed-form anticipated variances, rehearse the best.

    ``scenario`` is a Scenario or a scenario file.  The goal is one of ``budget`` (mean cost),
    ``moe`` (margin of error of the mean) or ``relative_moe`` (a fraction of the mean); without
    one, the scenario's ``[goal]``.  The best ``max_candidates`` designs are rehearsed by
    :func:`run` (``run_options`` are its keyword arguments) in one run.  Screening uses the study
    variable, known in a rehearsal; ``screen_on`` names an auxiliary column to screen on instead
    (real planning).  ``stratify_by`` names the numeric column the banded designs cut (default: the
    size column).  See :mod:`samplewright.proposal.search` for the candidates.

    Returns the run's RunResult with ``.candidates`` (every screened design: its size, anticipated
    variance and cost, rank, and for the shortlist the rehearsed variance) and ``.proposal`` (the
    shortlist's scenario document, written as ``proposal.toml`` by ``RunResult.write``).

    Examples
    --------
    >>> from samplewright import scenario_from_dict, propose
    >>> sc = scenario_from_dict({"frame": {"synthetic": {"units": 600, "seed": 2, "size_correlation": 0.8}},
    ...                          "cost": {"per_unit": 10.0},
    ...                          "design": [{"label": "simple", "method": "srs", "n": 40}]})
    >>> res = propose(sc, budget=500.0, max_candidates=2, replicates=100, seed=1)
    >>> int(res.candidates["shortlisted"].sum()), len(res.proposal["design"])
    (2, 2)
    """
    from samplewright.proposal.build import prepare, rehearsed
    from samplewright.simulation.scenario import load_scenario

    if not isinstance(scenario, Scenario):
        scenario = load_scenario(scenario)
    frame = run_options.pop("frame", None)
    if frame is None:
        frame = scenario.load_frame()
    found = prepare(scenario, frame, budget=budget, moe=moe, relative_moe=relative_moe,
                    max_candidates=max_candidates, screen_on=screen_on, stratify_by=stratify_by,
                    seed=run_options.get("seed"))
    res = run(found.scenario, frame=frame, **run_options)
    res.candidates = rehearsed(found.screen.candidates, res.summary, found.info["variable"])
    res.proposal = found.doc
    res.info["proposal"] = found.info
    return res


def draw(scenario, design: str, size: int | None = None, seed: int | None = None, reserve: int = 0,
         command: str | None = None) -> pd.DataFrame:
    """Draw the one sample fieldwork uses: design ``design`` of ``scenario`` at one size.

    Returns a DataFrame: every frame column of each selected unit, then ``selection_order``,
    ``stratum`` / ``psu`` (where the design has them), ``stage1_probability`` and
    ``stage2_probability`` (two-stage designs), ``inclusion_probability``, ``design_weight``,
    ``hits`` (designs that can select a unit twice), ``certainty`` and ``reserve``; the selection
    record (seed, file hashes, design, per-stratum counts, sum of weights, variance estimator,
    certainty units) is in ``DataFrame.attrs["selection"]``.  Without ``seed`` one is taken from
    the operating system's entropy and recorded.  ``reserve``: reserves per stratum (per cluster
    for two-stage designs), in substitution order (see :mod:`samplewright.simulation.selection`).

    Examples
    --------
    >>> from samplewright import scenario_from_dict, draw
    >>> sc = scenario_from_dict({"frame": {"synthetic": {"units": 400, "seed": 2}},
    ...                          "design": [{"label": "simple", "method": "srs", "n": 40}]})
    >>> sample = draw(sc, "simple", seed=1)
    >>> len(sample), float(sample["design_weight"].sum())
    (40, 400.0)
    """
    from samplewright.simulation.scenario import load_scenario
    from samplewright.simulation.selection import draw_sample

    if not isinstance(scenario, Scenario):
        scenario = load_scenario(scenario)
    if command is None:
        command = (f"samplewright.draw({str(scenario.source) if scenario.source else 'scenario'!r}, {design!r}, "
                   f"size={size!r}, seed={seed!r}, reserve={reserve!r})")
    return draw_sample(scenario, design, size, seed, reserve, version=__version__, command=command)
