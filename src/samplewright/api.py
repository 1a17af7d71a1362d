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
from samplewright.decision import frontier, recommend
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
from samplewright.population.frame import Frame
from samplewright.results.result import ALLOCATION_COLUMNS, RunResult
from samplewright.simulation.checkpoint import BlockStore
from samplewright.simulation.engine import replicate_table, simulate, simulate_until
from samplewright.simulation.limits import check_run_memory
from samplewright.simulation.plan import RunOptions, RunPlan, build_plan, run_settings, with_store
from samplewright.simulation.progress import Progress
from samplewright.simulation.scenario import Scenario

logger = logging.getLogger("samplewright")
#: the log level of notes: facts of the set-up that need no action (between INFO and WARNING)
NOTE = 25
logging.addLevelName(NOTE, "NOTE")


def _listened() -> bool:
    """Whether some handler besides the package's NullHandler reads the ``samplewright`` log."""
    return any(not isinstance(h, logging.NullHandler) for h in logger.handlers)


def _versions() -> dict:
    import joblib
    import scipy

    return {"samplewright": __version__, "python": platform.python_version(), "numpy": np.__version__,
            "pandas": pd.__version__, "scipy": scipy.__version__, "joblib": joblib.__version__}


def release_freed_memory() -> None:
    """Ask the C allocator to return freed heap pages to the system (glibc only; else nothing).

    A long run frees thousands of small per-block arrays once the replicate table is built;
    glibc keeps those pages in its heap unless asked, which would count against the run's
    peak memory for the rest of the evaluation.
    """
    try:
        import ctypes

        ctypes.CDLL("libc.so.6").malloc_trim(0)
    except (OSError, AttributeError):
        pass


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
        Replicate cap of a stopping rule (default 100 times ``replicates``, at least 100,000).
    out : path, optional
        Results folder: finished blocks are kept in ``out/blocks/`` as they complete (the
        ``run`` and ``demo`` commands remove them once the tables are written, unless ``--keep-blocks``).
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
    >>> res.summary[["design", "estimator", "replicates"]].iloc[0].tolist()
    ['simple', 'ht', 200]
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
    """
    started = time.monotonic()
    saved = None
    if options.resume:  # the saved run's settings, unless given again (then they must agree)
        options, saved = _resumed(options)
    replicates, _, _ = run_settings(scenario, options)
    rule = _stopping_rule(options, replicates)
    if frame is None:
        logger.info("loading the frame")
    plan = build_plan(scenario, options, frame=frame, stopping=rule)
    frame = plan.frame
    logger.info(f"frame: {frame.N} units, {frame.H} strata, {frame.C} clusters, targets {', '.join(frame.variables)}")
    manifest = None if options.out is None else _manifest(plan, scenario)
    if saved is not None:  # refused before any warning about the run asked for now
        saved.check(manifest, options.out)
    _check_size(plan, options)
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
    results, stopping, seconds = _simulate(plan, bar)
    logger.info(f"simulated in {seconds:.2f} s")
    res = _evaluate(plan, scenario, results)
    res.info = _run_info(plan, scenario, stopping, warned, notes) | {
        "elapsed_seconds": round(time.monotonic() - started, 3), "simulation_seconds": round(seconds, 3),
        "frame_order": res.info["frame_order"]}
    res.warnings = warned
    _decide(res, scenario)
    return res


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
    if options.until is None:
        if options.max_replicates is not None:
            raise InputError("--max-replicates caps a stopping rule: give --until as well (e.g. "
                             "--until coverage_mcse=0.002)")
        return None
    cap = max(100 * replicates, 100_000) if options.max_replicates is None else options.max_replicates
    rule = parse_until(options.until, cap)
    if rule.max_replicates < replicates:
        raise InputError(f"--max-replicates {rule.max_replicates} is below the {replicates} replicates every "
                         f"design runs first; raise it or lower --replicates")
    return rule


def _manifest(plan: RunPlan, scenario: Scenario) -> dict:
    """What the blocks kept in out/blocks/ are drawn from (a resumed run must match it)."""
    rule = plan.stopping
    return {
        "scenario": str(scenario.source.resolve()) if scenario.source else None,
        "scenario_hash": scenario.hash, "seed": plan.seed, "block_size": plan.block_size,
        "replicates": plan.replicates, "confidence": plan.confidence, "until": rule.text if rule else None,
        "max_replicates": rule.max_replicates if rule else None,
        "cells": [[c.design.label, int(c.design.size)] for c in plan.cells], "frame_units": plan.frame.N,
        "frame": plan.truth.roles.get("source"), "frame_hash": plan.truth.content_hash}


def _check_size(plan: RunPlan, options: RunOptions) -> None:
    """Refuse, before anything is allocated or written, an enumeration or a simulation too large to run."""
    if options.exact:  # every possible sample instead of Monte Carlo (exact.py)
        if options.until is not None or options.resume or plan.fieldwork is not None:
            raise InputError("--exact enumerates every possible sample without simulating: it cannot be combined "
                             "with --until, --resume or fieldwork settings (non-response, frame errors)")
        check_counts(plan.frame, plan.cells)
        return
    jobs = plan.jobs if plan.backend == "local" else 1
    check_run_memory(plan.frame, plan.cells, plan.replicates, plan.block_size, jobs,
                     plan.stopping.max_replicates if plan.stopping else None)


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


def _evaluate(plan: RunPlan, scenario: Scenario, results: list) -> RunResult:
    """The result tables of the simulated blocks (``results`` is emptied as they are copied)."""
    frame = plan.frame
    reps = replicate_table(results, plan.cells, frame.layout.names, consume=True)  # targets, then domain variables
    release_freed_memory()  # the many small block arrays just freed: hand their pages back
    methods = {d.label: d.method for d in scenario.designs}
    summary = summarise(reps, plan.truth, methods, plan.confidence)
    if plan.fieldwork is not None:  # response, bias split and full-response columns after the contract ones
        summary = summary_columns(summary, reps, plan.fieldwork)
    order_info, order_table = order_evidence(frame, scenario.designs)  # a cycle along a systematic walk
    res = RunResult(summary=summary, replicates=reps, allocation=allocation_table(frame, plan.cells), info={},
                    frame_order=order_table)
    res.info["frame_order"] = order_info
    return res


def _frame_info(frame: Frame) -> dict:
    return {"units": frame.N, "strata": frame.H, "clusters": frame.C,
            "roles": {k: v for k, v in frame.roles.items() if k != "source"}, "source": frame.roles.get("source")}


def _designs_info(scenario: Scenario) -> list[dict]:
    return [{"label": d.label, "method": d.method, "parameters": repr(d), "variance": d.variance_name}
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
        "versions": _versions(),
        "elapsed_seconds": None,
        "simulation_seconds": None,
        "warnings": warned,
        "notes": notes,
        "fieldwork": None if plan.fieldwork is None else plan.fieldwork.info,
    }


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
        "versions": _versions(),
        "elapsed_seconds": round(time.monotonic() - started, 3),
        "enumeration_seconds": round(enumerated - enumeration_started, 3),
        "warnings": warned,
        "notes": notes,
    }
    return RunResult(summary=summary, replicates=samples, allocation=allocation_table(frame, plan.cells),
                     info=info, warnings=warned)


def _decide(res: RunResult, scenario: Scenario) -> None:
    """The frontier and recommendation; a failure here never costs the simulated tables."""
    try:
        res.frontier, res.recommendation = goal_tables(res.summary, res.replicates, scenario)
    except Exception as exc:  # noqa: BLE001 -- a failure after the simulation must never cost its tables
        res.late_failures.append(("the cost-precision frontier and recommendation", exc))
        if _listened():
            logger.warning(f"{res.late_failures[-1][0]} failed ({type(exc).__name__}: {exc}); the result "
                           f"tables are complete")
        else:  # nobody reads the log: a Python warning, so the failure is not silent
            warnings.warn(f"{res.late_failures[-1][0]} failed ({type(exc).__name__}: {exc}); the result "
                          f"tables are complete", SamplewrightWarning, stacklevel=3)


def goal_tables(summary: pd.DataFrame, reps: pd.DataFrame, scenario: Scenario):
    """The cost-precision frontier (always) and the recommendation (when the scenario has a [goal])."""
    goal = scenario.goal
    conf = scenario.confidence if goal is None or goal.confidence is None else goal.confidence
    front = frontier.frontier_table(summary, reps, conf)  # looked up on call, so a test may replace it
    rec = None if goal is None else recommend.recommend(front, goal, scenario.confidence)
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
