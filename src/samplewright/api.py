"""Run a scenario: bind the frame, check the designs, simulate, evaluate."""

from __future__ import annotations

import platform
import time

import numpy as np
import pandas as pd

from samplewright import __version__
from samplewright.diagnostics.checks import cost_notes, design_notes, design_warnings, frame_warnings, variance_warnings
from samplewright.simulation.engine import check_backend, make_cells, replicate_table, simulate, simulate_until
from samplewright.errors import InputError
from samplewright.evaluation.measures import summarise
from samplewright.evaluation.nonresponse import summary_columns
from samplewright.simulation.fieldwork import prepare as prepare_fieldwork
from samplewright.population.frame import Frame
from samplewright.simulation.progress import Progress
from samplewright.results.result import ALLOCATION_COLUMNS, RunResult
from samplewright.config.scenario import Scenario


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
        for h, label in enumerate(frame.stratum_labels):
            rows.append({"design": cell.design.label, "size": int(cell.design.size), "stratum": label,
                         "population_units": int(N_h[h]), "sample_units": int(n_h[h])})
    return pd.DataFrame(rows, columns=ALLOCATION_COLUMNS)


def run(scenario: Scenario, replicates: int | None = None, seed: int | None = None, jobs: int = 1,
        block_size: int | None = None, frame: Frame | None = None, progress: bool | None = False,
        exact: bool = False, log=None, until: str | None = None, max_replicates: int | None = None, out=None, resume: bool = False,
        backend: str = "local", scheduler: str | None = None, warn=None, note=None, ready=None) -> RunResult:
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
        Results folder: finished blocks are kept in ``out/blocks/`` as they complete.
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
    say = log or (lambda _msg: None)
    t0 = time.monotonic()
    saved = None
    if resume:  # the saved run's settings, unless given again (then they must agree)
        from samplewright.simulation.checkpoint import BlockStore

        if out is None:
            raise InputError("resume needs the results folder of the run to continue")
        saved = BlockStore.open(out)
        m = saved.manifest
        replicates = m.get("replicates") if replicates is None else replicates
        seed = m.get("seed") if seed is None else seed
        block_size = m.get("block_size") if block_size is None else block_size
        until = m.get("until") if until is None else until
        max_replicates = m.get("max_replicates") if max_replicates is None else max_replicates
    R = scenario.replicates if replicates is None else int(replicates)
    if R <= 0:
        raise InputError(f"replicates must be at least 1, got {R}")
    seed = scenario.seed if seed is None else int(seed)
    if seed < 0:
        raise InputError(f"seed must be a whole number of at least 0, got {seed}")
    bs = scenario.block_size if block_size is None else int(block_size)
    if jobs < 1:
        raise InputError(f"jobs must be at least 1, got {jobs}")
    check_backend(backend, scheduler)
    rule = None
    if until is not None:
        from samplewright.evaluation.stopping import parse_until

        cap = max(100 * R, 100_000) if max_replicates is None else max_replicates
        rule = parse_until(until, cap)
        if rule.max_replicates < R:
            raise InputError(f"--max-replicates {rule.max_replicates} is below the {R} replicates every design "
                             f"runs first; raise it or lower --replicates")
    elif max_replicates is not None:
        raise InputError("--max-replicates caps a stopping rule: give --until as well (e.g. "
                         "--until coverage_mcse=0.002)")
    if frame is None:
        say("loading the frame")
        frame = scenario.load_frame()
    say(f"frame: {frame.N} units, {frame.H} strata, {frame.C} clusters, targets {', '.join(frame.variables)}")
    designs = tuple(scenario.cost.for_design(d, frame) for d in scenario.designs)  # cost-optimal c_h (cost.py)
    cells = make_cells(designs, scenario.estimators)
    truth_frame = frame  # the true population: the evaluator's truths
    field = prepare_fieldwork(scenario, frame, cells, seed, scenario.confidence)  # fieldwork.py
    if field is not None:
        frame = field.frame  # designs draw from the listed frame (frame errors)
    frame = scenario.cost.bind(frame)  # per-stratum unit rates into the cost column (cost.py)
    for cell in cells:
        cell.design.check(frame)
    manifest = None if out is None else {  # what the blocks kept in out/blocks/ are drawn from
        "scenario": str(scenario.source.resolve()) if scenario.source else None,
        "scenario_hash": scenario.hash, "seed": seed, "block_size": bs, "replicates": R,
        "confidence": scenario.confidence, "until": rule.text if rule else None,
        "max_replicates": rule.max_replicates if rule else None,
        "cells": [[c.design.label, int(c.design.size)] for c in cells], "frame_units": frame.N,
        "frame": truth_frame.roles.get("source"), "frame_hash": truth_frame.content_hash}
    if saved is not None:  # refused before any warning about the run asked for now
        saved.check(manifest, out)
    if exact:  # every possible sample instead of Monte Carlo (exact.py)
        if until is not None or resume or field is not None:
            raise InputError("--exact enumerates every possible sample without simulating: it cannot be combined "
                             "with --until, --resume or fieldwork settings (non-response, frame errors)")
        from samplewright.evaluation.exact import check_counts

        check_counts(frame, cells)
    else:  # before anything is allocated or written (limits.py)
        from samplewright.simulation.limits import check_run_memory

        check_run_memory(frame, cells, R, bs, jobs if backend == "local" else 1,
                         rule.max_replicates if rule else None)
    if ready is not None:  # every check passed
        ready()
    warned = list(dict.fromkeys(frame_warnings(frame) + variance_warnings(truth_frame)
                                + design_warnings(frame, cells, None if exact else R)))  # each once
    notes = list(dict.fromkeys(design_notes(frame, cells) + cost_notes(scenario.cost, frame)))
    for w in warned if warn is not None else ():  # said before any time is spent simulating
        warn(w)
    for m in notes if note is not None else ():
        note(m)
    if exact:
        from samplewright.evaluation.exact import exact_result

        return exact_result(scenario, frame, cells, warned, notes, t0, _versions(),
                            allocation_table(frame, cells))
    say(f"{len(cells)} design x size cells, {R} replicates each, blocks of {bs}")
    bar = Progress({c.design.label: 0 for c in cells}, enabled=progress)
    for c in cells:
        bar.totals[c.design.label] += R
    store = None
    if out is not None:
        from samplewright.simulation.checkpoint import BlockStore

        if saved is not None:
            store = saved
            say(f"resuming: {len(store.finished())} finished blocks in {store.folder}")
        else:
            store = BlockStore.create(out, manifest)

        def damaged(message: str) -> None:  # a block file drawn again: said now and kept in run.json
            warned.append(message)
            if warn is not None:
                bar.break_line()
                warn(message)

        store.warn = damaged
    t1 = time.monotonic()
    common = dict(jobs=jobs, progress=lambda ci, k: bar.update(cells[ci].design.label, k), backend=backend,
                  scheduler=scheduler, store=store)
    stopping = None
    try:
        if rule is None:
            results = simulate(frame, cells, R, seed, bs, scenario.confidence, scenario.cost, **common)
        else:
            truths = dict(zip(truth_frame.layout.names, truth_frame.layout.truth))  # as summarise scores them
            results, stopping = simulate_until(frame, cells, rule, R, seed, bs, scenario.confidence,
                                               scenario.cost, truth=np.array([truths[v] for v in frame.layout.names]),
                                               **common)
    except BaseException:  # Ctrl-C or a failure: its message starts on a line of its own
        bar.break_line()
        raise
    bar.close()
    t2 = time.monotonic()
    reps = replicate_table(results, cells, frame.layout.names, consume=True)  # targets, then domain variables
    release_freed_memory()  # the many small block arrays just freed: hand their pages back
    methods = {d.label: d.method for d in scenario.designs}
    summary = summarise(reps, truth_frame, methods, scenario.confidence)
    if field is not None:  # response, bias split and full-response columns after the contract ones
        summary = summary_columns(summary, reps, field)
    alloc = allocation_table(frame, cells)
    from samplewright.diagnostics.frame_order import order_evidence

    order_info, order_table = order_evidence(frame, scenario.designs)  # a cycle along a systematic walk
    info = {
        "title": scenario.title,
        "scenario": str(scenario.source) if scenario.source else None,
        "scenario_hash": scenario.hash,
        "seed": seed,
        "seed_entropy": int(np.random.SeedSequence(seed).entropy),
        "replicates": R,
        "block_size": bs,
        "jobs": jobs,
        "backend": backend,
        "stopping": None if rule is None else {**rule.as_dict(), "cells": stopping},
        "confidence": scenario.confidence,
        "frame": {"units": frame.N, "strata": frame.H, "clusters": frame.C, "variables": list(frame.variables),
                  "proportions": list(frame.layout.proportions), "domain_variables": list(frame.layout.names[frame.V:]),
                  "roles": {k: v for k, v in frame.roles.items() if k != "source"},
                  "source": frame.roles.get("source")},
        "designs": [{"label": d.label, "method": d.method, "parameters": repr(d), "variance": d.variance_name}
                    for d in scenario.designs],
        "versions": _versions(),
        "elapsed_seconds": round(time.monotonic() - t0, 3),
        "simulation_seconds": round(t2 - t1, 3),
        "warnings": warned,
        "notes": notes,
        "fieldwork": None if field is None else field.info,
        "frame_order": order_info,
    }
    say(f"simulated in {t2 - t1:.2f} s")
    res = RunResult(summary=summary, replicates=reps, allocation=alloc, info=info, warnings=warned,
                    frame_order=order_table)
    try:
        res.frontier, res.recommendation = goal_tables(summary, reps, scenario)
    except Exception as exc:  # noqa: BLE001 -- a failure after the simulation must never cost its tables
        res.late_failures.append(("the cost-precision frontier and recommendation", exc))
        if warn is None:
            import warnings

            from samplewright.errors import SamplewrightWarning

            warnings.warn(f"{res.late_failures[-1][0]} failed ({type(exc).__name__}: {exc}); the result "
                          f"tables are complete", SamplewrightWarning, stacklevel=2)
    return res


def goal_tables(summary: pd.DataFrame, reps: pd.DataFrame, scenario: Scenario):
    """The cost-precision frontier (always) and the recommendation (when the scenario has a [goal])."""
    from samplewright.decision.frontier import frontier_table
    from samplewright.decision.recommend import recommend

    goal = scenario.goal
    conf = scenario.confidence if goal is None or goal.confidence is None else goal.confidence
    front = frontier_table(summary, reps, conf)
    rec = None if goal is None else recommend(front, goal, scenario.confidence)
    return front, rec


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
    from samplewright.config.scenario import load_scenario
    from samplewright.simulation.selection import draw_sample

    if not isinstance(scenario, Scenario):
        scenario = load_scenario(scenario)
    if command is None:
        command = (f"samplewright.draw({str(scenario.source) if scenario.source else 'scenario'!r}, {design!r}, "
                   f"size={size!r}, seed={seed!r}, reserve={reserve!r})")
    return draw_sample(scenario, design, size, seed, reserve, version=__version__, command=command)
