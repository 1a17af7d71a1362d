"""The replicate engine: blocks of replicates, their seeds, and parallel dispatch.

Seeding
-------
One root ``numpy.random.SeedSequence(seed)`` per run.  Block b of size point s of a design
draws from ``SeedSequence(seed, spawn_key=(*design_key, s, b))`` where ``design_key`` is the
SHA-256 of the design's label (UTF-8) as eight 32-bit words: the child a ``spawn`` would
give, rebuilt by key.  Labels are unique within a scenario and a 256-bit hash does not
collide in practice (a 32-bit checksum did: two labels with the same crc32 drew identical
replicates); :func:`make_cells` still refuses two designs with one key.  The block size is
fixed per run (and recorded), so the numbers never depend on ``--jobs``, the backend or the
order in which blocks finish, and adding or dropping a design leaves the others' numbers
unchanged.
"""

from __future__ import annotations

import hashlib
import itertools
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from samplewright.designs import Design
from samplewright.errors import InputError
from samplewright.estimation.cost import CostModel
from samplewright.estimation.estimators import sample_units
from samplewright.estimation.registry import estimate_points
from samplewright.population.frame import Frame
from samplewright.simulation.blocks import REPLICATE_COLUMNS, BlockResult, BlockTask, replicate_columns
from samplewright.simulation.fieldwork import Fieldwork, run_fieldwork_block


@dataclass(frozen=True)
class Cell:
    """One design at one size: the unit of work the engine splits into blocks."""

    design: Design  # at a single size
    design_index: int  # position in the scenario (for ordering output)
    size_index: int
    estimators: tuple[str, ...]
    #: non-response, frame errors, weighting adjustment (fieldwork.py); None: the plain block runner
    fieldwork: Fieldwork | None = None

    @property
    def key(self) -> tuple[int, ...]:
        return stream_key(self.design.label)

    @property
    def variances(self) -> tuple[str, ...]:
        """The variance formulas the design lists: each estimator is scored under each, on the same draws."""
        return self.design.variance_names

    @property
    def points(self) -> list[tuple[str, str]]:
        """(estimator, variance formula) of each row of a block's per-estimator arrays, in their order."""
        return [(e, v) for e in self.estimators for v in self.variances]


def stream_key(label: str) -> tuple[int, ...]:
    """The random-stream key of a design: the SHA-256 of its label as eight 32-bit words."""
    return sha256_words(label.encode("utf-8"), "big")


def sha256_words(data: bytes, byteorder: str) -> tuple[int, ...]:
    """The SHA-256 of ``data`` as eight 32-bit words in ``byteorder``, a spawn key for a SeedSequence."""
    digest = hashlib.sha256(data).digest()
    return tuple(int.from_bytes(digest[i:i + 4], byteorder) for i in range(0, 32, 4))


def block_seed(seed: int, cell: Cell, block: int) -> np.random.SeedSequence:
    """The seed of one block (see module notes)."""
    return np.random.SeedSequence(seed, spawn_key=(*cell.key, cell.size_index, block))


def block_spans(replicates: int, block_size: int) -> list[tuple[int, int, int]]:
    """(block index, first replicate, count) for every block of a cell."""
    return [(b, s, min(block_size, replicates - s)) for b, s in enumerate(range(0, replicates, block_size))]


def run_block(frame: Frame, cell: Cell, task: BlockTask, confidence: float, cost: CostModel) -> BlockResult:
    """Draw one block of replicates and estimate with every estimator of the cell under every variance
    formula of its design (``cell.points``), all from the one draw."""
    if cell.fieldwork is not None:  # the cell's block runner: with fieldwork, or plain
        return run_fieldwork_block(frame, cell, task, confidence, cost)
    rng = np.random.default_rng(task.seed)
    sample = cell.design.draw(frame, rng, task.count, keep_units=cost.needs_units(cell.design))
    outs = estimate_points(sample, cell.estimators, cell.variances, frame.N, frame.V, confidence, frame.layout)
    n = sample_units(sample)
    return BlockResult(
        cell=task.cell, block=task.block, start=task.start,
        estimate=np.stack([o.estimate for o in outs]),
        se=np.stack([o.se for o in outs]),
        lower=np.stack([o.lower for o in outs]),
        upper=np.stack([o.upper for o in outs]),
        n=n,
        cost=cost.replicate_cost(sample, frame, n=n),
    )


def make_cells(designs, estimators) -> list[Cell]:
    """Expand every design's size sweep into cells (refused: two designs with one stream key)."""
    cells, owner = [], {}
    for i, (d, est) in enumerate(zip(designs, estimators)):
        first = owner.setdefault(stream_key(d.label), i)
        if first != i:
            raise InputError(f"designs {designs[first].label!r} and {d.label!r} would draw the same random numbers "
                             f"(their labels give one stream key); give them different labels")
        for j, size in enumerate(d.sizes()):
            cells.append(Cell(design=d.at(size), design_index=i, size_index=j, estimators=tuple(est)))
    return cells


#: where blocks run: in this process / local worker processes (joblib's loky), or a dask cluster
BACKENDS = ("local", "dask")


def simulate(plan, progress=None) -> list[BlockResult]:
    """Run every block of every cell of ``plan`` (a :class:`~samplewright.simulation.plan.RunPlan`);
    results come back tagged, in any order.

    ``progress``, when given, is called with (cell id, replicates done in that block) after
    each block completes.  The plan's ``store`` (a :class:`~samplewright.simulation.checkpoint.BlockStore`)
    keeps each finished block on disk and supplies the blocks a previous attempt finished.
    """
    spans = block_spans(plan.replicates, plan.block_size)
    tasks = [(ci, b, s, count) for ci in range(len(plan.cells)) for b, s, count in spans]
    return list(_complete(plan, tasks, progress))


@dataclass
class _Waves:
    """Where a sequential run stands: per cell, its progress, finished blocks, blocks scheduled, next aim."""

    spans: list
    min_blocks: int
    states: dict
    have: dict = field(default_factory=dict)
    scheduled: dict = field(default_factory=dict)
    aim: dict = field(default_factory=dict)


def simulate_until(plan, progress=None) -> tuple[list[BlockResult], list[dict]]:
    """Add blocks to each cell, in block order, until it meets ``plan.stopping``.

    Coverage is scored against the true population's value of every output variable of the
    layout (targets, then domain means): ``plan.truth``, not the listed frame.

    Every cell runs at least ``plan.replicates`` (rounded up to whole blocks) and at most
    the rule's ``max_replicates``.  A rule may start a cell with blocks already drawn
    (``rule.start_cell(ci).used`` > 0): blocks from there on are drawn and returned, with the seeds
    of their block index, so a run extended this way keeps the streams a longer run would use.
    Blocks are dispatched in waves sized from the replicates the rule still asks for; blocks
    past a cell's stopping point are dropped, so the replicates kept never depend on ``jobs``
    or the backend.  Returns the kept blocks and the rule's per-cell report.
    """
    rule = plan.stopping
    spans = block_spans(rule.max_replicates, plan.block_size)
    min_blocks = min(len(spans), -(-int(plan.replicates) // plan.block_size))
    cell_ids = range(len(plan.cells))
    states = {ci: rule.start_cell(ci) for ci in cell_ids}
    first = {ci: st.used for ci, st in states.items()}  # blocks a cell had before (a rule may start it there)
    waves = _Waves(spans=spans, min_blocks=min_blocks, states=states, have={ci: {} for ci in cell_ids},
                   scheduled=dict(first), aim={ci: _first_aim(plan, st, min_blocks) for ci, st in states.items()})
    truths = dict(zip(plan.truth.layout.names, plan.truth.layout.truth))  # as the summary scores them
    truth = np.array([truths[v] for v in plan.frame.layout.names], dtype=float)
    with backend_session(plan.backend, plan.scheduler, plan.frame, plan.cells):  # one dask client for all waves
        _until_waves(plan, waves, truth, progress)
    kept = [waves.have[ci][b] for ci, st in waves.states.items() for b in range(first[ci], st.used)]
    return kept, rule.report(plan.cells, waves.states)


def _first_aim(plan, state, min_blocks: int) -> int:
    """Blocks a cell's first wave reaches: ``min_blocks``, or for a cell the rule starts with blocks
    already drawn, what the rule asks for (at most twice what it has)."""
    if state.used == 0:
        return min_blocks
    aim = -(-plan.stopping.needed(state) // plan.block_size)
    return max(state.used + 1, min(aim, 2 * state.used))


def _until_waves(plan, waves: _Waves, truth: np.ndarray, progress) -> None:
    """The waves of :func:`simulate_until`: dispatch, consume in block order, size the next wave."""
    rule, max_blocks = plan.stopping, len(waves.spans)
    while True:
        tasks = []
        for ci, st in waves.states.items():
            if st.stopped:
                continue
            upto = min(max_blocks, waves.aim[ci])
            tasks += [(ci, b, waves.spans[b][1], waves.spans[b][2]) for b in range(waves.scheduled[ci], upto)]
            waves.scheduled[ci] = max(waves.scheduled[ci], upto)
        if not tasks:
            break
        for r in _complete(plan, tasks, progress):
            waves.have[r.cell][r.block] = r
        for ci, st in waves.states.items():
            if st.stopped:
                continue
            rule.advance(st, waves.have[ci], truth, waves.min_blocks, max_blocks)
            if not st.stopped:  # aim at the replicates still asked for, growing at most twofold per wave
                aim = -(-rule.needed(st) // plan.block_size)
                waves.aim[ci] = min(max_blocks, max(st.used + max(plan.jobs, 1), min(aim, 2 * st.used)))


def _complete(plan, tasks, progress):
    """Yield the result of every task (cell id, block, start, count): from the plan's store when it
    holds the block already, otherwise drawn now (and saved to the store on arrival)."""
    store = plan.store
    done = store.finished() if store is not None else set()
    width = len(plan.frame.layout.names)
    todo = []
    for ci, b, s, count in tasks:
        cell = plan.cells[ci]
        r = store.load(cell, ci, b, s, count, width) if (cell.key, cell.size_index, b) in done else None
        if r is not None:
            if progress:
                progress(ci, count)
            yield r
        else:
            todo.append((ci, b, s, count))
    for r in dispatch(plan, todo):
        if store is not None:
            store.save(r, plan.cells[r.cell])
        if progress:
            progress(r.cell, len(r.n))
        yield r


def dispatch(plan, tasks):
    """Run ``run_block`` for each task (cell id, block, start, count) of ``plan``; yield results as they finish.

    ``backend="local"`` runs in this process when ``jobs`` is 1, else on ``jobs`` worker
    processes forked from this one (where the platform forks and this process runs no
    other thread; otherwise joblib's loky workers reading a memory-mapped copy of the
    frame); ``backend="dask"`` sends the blocks to the dask.distributed scheduler
    at ``scheduler`` through joblib's dask backend, with the frame scattered to the workers
    once (not shipped with every block).
    """
    frame, cells, seed, confidence, cost = plan.frame, plan.cells, plan.seed, plan.confidence, plan.cost
    jobs, backend, scheduler = plan.jobs, plan.backend, plan.scheduler
    calls = [BlockTask(ci, b, s, count, block_seed(seed, cells[ci], b)) for ci, b, s, count in tasks]
    if not calls:
        return
    if backend == "local" and (jobs == 1 or len(calls) == 1):
        for task in calls:
            yield run_block(frame, cells[task.cell], task, confidence, cost)
        return
    from joblib import Parallel, delayed

    if backend == "dask":
        from joblib import parallel_config

        work = (delayed(run_dask_task)(frame, cells, task, confidence, cost) for task in calls)
        if (scheduler, id(frame), id(cells)) in _SESSIONS:  # inside backend_session: already scattered
            yield from Parallel(n_jobs=-1, return_as="generator_unordered")(work)
            return
        with _dask_client(scheduler), parallel_config(backend="dask", scatter=[frame, cells]):
            yield from Parallel(n_jobs=-1, return_as="generator_unordered")(work)
        return
    import multiprocessing as mp
    import threading

    # forking a process that runs other threads can deadlock the child: then loky's workers
    if "fork" in mp.get_all_start_methods() and threading.active_count() == 1:
        yield from _forked(plan, calls)
        return
    import shutil
    import tempfile

    import joblib

    folder = tempfile.mkdtemp(prefix="samplewright-shared-")
    try:  # the frame and cells go to disk once; workers map them read-only (see run_shared)
        path = str(Path(folder) / "shared.joblib")
        joblib.dump((frame, cells), path)
        work = (delayed(run_shared)(path, task, confidence, cost) for task in calls)
        yield from Parallel(n_jobs=jobs, return_as="generator_unordered")(work)
    finally:
        shutil.rmtree(folder, ignore_errors=True)


#: frame and cells a forked worker inherits from its parent, by token
_INHERITED: dict[str, tuple] = {}
#: blocks a forked worker runs per task (the numbers do not depend on it: each block has its own seed)
FORK_CHUNK = 4


def _forked(plan, calls):
    """Run the calls (block tasks) on ``plan.jobs`` forked worker processes that inherit the frame and cells.

    Forked workers share the parent's memory pages (copy-on-write) and its imports, so
    nothing is pickled but each block's seed and its small result; a pool of fresh
    processes would first spend seconds importing and receiving the frame.
    """
    import multiprocessing as mp
    import os
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait

    frame, cells, jobs, confidence, cost = plan.frame, plan.cells, plan.jobs, plan.confidence, plan.cost
    token = f"{os.getpid()}-{id(frame)}-{id(cells)}"
    _INHERITED[token] = (frame, cells)
    pool = ProcessPoolExecutor(jobs, mp_context=mp.get_context("fork"), initializer=_quiet_worker)
    try:  # a few chunks of blocks in flight per worker; a worker that dies raises BrokenProcessPool here
        todo = iter(calls)
        pending = set()
        while True:
            while len(pending) < 2 * jobs:
                chunk = [(token, task, confidence, cost) for task in itertools.islice(todo, FORK_CHUNK)]
                if not chunk:
                    break
                pending.add(pool.submit(_run_inherited_chunk, chunk))
            if not pending:
                break
            done, pending = wait(pending, return_when=FIRST_COMPLETED)
            for fut in done:
                yield from fut.result()
    finally:
        pool.shutdown(wait=True, cancel_futures=True)
        _INHERITED.pop(token, None)


def _quiet_worker() -> None:
    """Workers leave Ctrl-C to the parent, which stops the pool (finished blocks are already saved)."""
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _run_inherited(args) -> BlockResult:
    token, task, confidence, cost = args
    frame, cells = _INHERITED[token]
    return run_task(frame, cells, task, confidence, cost)


def _run_inherited_chunk(chunk) -> list[BlockResult]:
    """Several blocks in one task: fewer round trips to the parent for short blocks."""
    return [_run_inherited(args) for args in chunk]


def run_task(frame: Frame, cells, task: BlockTask, confidence: float, cost: CostModel) -> BlockResult:
    """``run_block`` for cell ``cells[task.cell]`` (so a backend can ship the cell list once)."""
    return run_block(frame, cells[task.cell], task, confidence, cost)


def run_dask_task(frame: Frame, cells, task: BlockTask, confidence: float, cost: CostModel) -> BlockResult:
    """``run_task`` on a dask worker, with the C allocator keeping its freed memory for the block's duration.

    dask starts its workers with ``MALLOC_TRIM_THRESHOLD_`` set (to 65536 by default), which
    also fixes glibc's threshold for serving an allocation by ``mmap`` at 128 KiB: every
    array of a block (megabytes) is then mapped and unmapped afresh, and its pages fault in
    again, about 165,000 faults and twice the time for a W1 block of 500 replicates.  During
    the block the thresholds are those glibc itself would grow to (32 MiB for ``mmap``, twice
    that for trimming); afterwards the worker's own settings are put back.  Numbers are
    unaffected (only where memory comes from changes).
    """
    with _roomy_malloc():
        return run_task(frame, cells, task, confidence, cost)


@contextmanager
def _roomy_malloc():
    """glibc's adaptive allocation thresholds for the duration, where ``MALLOC_TRIM_THRESHOLD_``
    (and not ``MALLOC_MMAP_THRESHOLD_``) fixed them for this process; otherwise nothing."""
    import os

    trim = os.environ.get("MALLOC_TRIM_THRESHOLD_")
    mallopt = None
    if trim is not None and trim.isdigit() and "MALLOC_MMAP_THRESHOLD_" not in os.environ:
        import ctypes

        try:
            mallopt = ctypes.CDLL("libc.so.6").mallopt
        except (OSError, AttributeError):  # not glibc: its environment variables mean nothing here
            mallopt = None
    if mallopt is None:
        yield
        return
    m_trim_threshold, m_mmap_threshold = -1, -3  # glibc's malloc.h
    mallopt(m_mmap_threshold, 32 << 20)
    mallopt(m_trim_threshold, 64 << 20)
    try:
        yield
    finally:
        mallopt(m_mmap_threshold, 128 << 10)  # glibc's default once the thresholds are fixed
        mallopt(m_trim_threshold, int(trim))


#: per worker process: (frame, cells) already read from a dispatch's shared file
_SHARED: dict[str, tuple] = {}


def run_shared(path: str, task: BlockTask, confidence: float, cost: CostModel) -> BlockResult:
    """``run_task`` on the frame and cells the parent dumped to ``path``, read once per worker.

    The arrays are memory-mapped read-only, so the workers share the parent's pages instead
    of each receiving a copy with every block; design caches then live as long as the worker.
    """
    if path not in _SHARED:
        import joblib

        _SHARED.clear()
        frame, cells = joblib.load(path, mmap_mode="r")
        _plain_arrays(frame)
        _SHARED[path] = (frame, cells)
    frame, cells = _SHARED[path]
    return run_task(frame, cells, task, confidence, cost)


def _plain_arrays(obj) -> None:
    """Turn the memmap attributes of a loaded frame into plain ndarray views (no subclass overhead)."""
    for k, v in list(vars(obj).items()):
        if isinstance(v, np.memmap):
            object.__setattr__(obj, k, v.view(np.ndarray))


#: dask sessions open in this process: (scheduler, id(frame), id(cells))
_SESSIONS: set = set()


@contextmanager
def backend_session(backend: str, scheduler: str | None, frame: Frame, cells: list[Cell]):
    """Keep one dask client and one scatter of the frame and cells for several dispatches."""
    if backend != "dask":
        yield
        return
    from joblib import parallel_config

    key = (scheduler, id(frame), id(cells))
    with _dask_client(scheduler), parallel_config(backend="dask", scatter=[frame, cells]):
        _SESSIONS.add(key)
        try:
            yield
        finally:
            _SESSIONS.discard(key)


def check_backend(backend: str, scheduler: str | None) -> None:
    """Refuse (InputError) an unknown backend, or dask without a scheduler address or its packages."""
    from samplewright.config.validate import closest

    if backend not in BACKENDS:
        raise InputError(f"backend {backend!r} is not known{closest(backend, BACKENDS)}")
    if backend != "dask":
        return
    if not scheduler:
        raise InputError("--backend dask needs --scheduler ADDRESS, the address of a running dask scheduler "
                         "(e.g. tcp://scheduler-host:8786)")
    try:
        import distributed  # noqa: F401
    except ImportError:
        raise InputError("--backend dask needs the optional dask packages: pip install 'samplewright[dask]'") \
            from None


def _dask_client(scheduler: str | None):
    """A client of the dask scheduler at ``scheduler`` (refused with InputError when unreachable)."""
    from distributed import Client

    check_backend("dask", scheduler)
    try:
        return Client(scheduler, timeout="20s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(f"--scheduler {scheduler!r}: no dask scheduler could be reached there "
                         f"({type(exc).__name__}: {exc})") from None


def replicate_table(results: list[BlockResult], cells: list[Cell], variables, consume: bool = False) -> pd.DataFrame:
    """Tidy per-replicate table (contract columns, then ``variance``), ordered by design, size, estimator,
    variance formula, variable, replicate.

    Each column is allocated once at its final length and filled block by block.  With
    ``consume``, ``results`` is emptied and each cell's blocks are released as soon as they
    are copied in, so building the table of a long run needs little more memory than the
    blocks or the table, not both plus intermediate copies.
    """
    by_cell: dict[int, list[BlockResult]] = {}
    for r in sorted(results, key=lambda r: (r.cell, r.block)):
        by_cell.setdefault(r.cell, []).append(r)
    if consume:
        results.clear()
    V = len(variables)
    plan, total = [], 0  # (cell id, cell, estimators E, replicates R, first row)
    for ci, cell in enumerate(cells):
        if by_cell.get(ci):
            E, R = by_cell[ci][0].estimate.shape[0], sum(len(r.n) for r in by_cell[ci])
            plan.append((ci, cell, E, R, total))
            total += E * V * R
    num = {"replicate": np.empty(total, dtype=np.int64)}
    for k in ("estimate", "se", "lower", "upper", "n", "cost"):
        num[k] = np.empty(total)
    extras = []
    for ci, _cell, E, R, first in plan:
        mine = by_cell.pop(ci)
        rows = slice(first, first + E * V * R)
        for k in ("estimate", "se", "lower", "upper"):  # rows ordered estimator, variable, replicate
            dst, at = num[k][rows].reshape(E, V, R), 0
            for r in mine:
                b = len(r.n)
                dst[:, :, at:at + b] = getattr(r, k).transpose(0, 2, 1)
                at += b
        num["n"][rows].reshape(E * V, R)[:] = np.concatenate([r.n for r in mine])
        num["cost"][rows].reshape(E * V, R)[:] = np.concatenate([r.cost for r in mine])
        num["replicate"][rows].reshape(E * V, R)[:] = np.concatenate(
            [np.arange(r.start, r.start + len(r.n)) for r in mine])
        extras.append(replicate_columns(mine, E, V))  # fieldwork columns, when the run has them
        del mine
    lengths = [E * V * R for _, _, E, R, _ in plan]
    none = [np.array([], dtype=object)]
    text = {
        "design": np.repeat(np.array([c.design.label for _, c, _, _, _ in plan], dtype=object), lengths),
        "estimator": np.concatenate([np.repeat(np.array([e for e, _ in c.points], dtype=object), V * R)
                                     for _, c, E, R, _ in plan] or none),
        "variance": np.concatenate([np.repeat(np.array([v for _, v in c.points], dtype=object), V * R)
                                    for _, c, E, R, _ in plan] or none),
        "variable": np.concatenate([np.tile(np.repeat(np.array(variables, dtype=object), R), E)
                                    for _, c, E, R, _ in plan] or none),
    }
    size = np.repeat(np.array([int(c.design.size) for _, c, _, _, _ in plan], dtype=np.int64), lengths)
    same = bool(any(extras)) and all(list(e) == list(extras[0]) for e in extras)
    more = ((k, np.concatenate([e.pop(k) for e in extras])) for k in (list(extras[0]) if same else []))
    table = table_frame(num.pop("replicate"), text, size, num, more)
    if any(extras) and not same:  # cells with different extra columns: aligned by pandas, NaN where a cell has none
        more = pd.concat([pd.DataFrame(e, index=pd.RangeIndex(first, first + n))
                          for e, (_, _, _, _, first), n in zip(extras, plan, lengths)])
        table = pd.concat([table, more], axis=1)
    return table


def table_frame(replicate, text: dict, size, num: dict, extras=()) -> pd.DataFrame:
    """Rows of the replicate table from their columns: ``text`` (object arrays: design, estimator, variable,
    variance), ``num`` (estimate, se, lower, upper, n, cost; emptied as it is used) and ``extras`` ((name,
    array) pairs of fieldwork columns, appended in order).  The whole table and its streamed pieces are
    both built here, so their columns and types agree."""
    columns = {"replicate": replicate}
    columns["design"] = pd.Series(text.pop("design"))  # text: the dtype pandas infers for it
    columns["size"] = size
    columns["estimator"] = pd.Series(text.pop("estimator"))
    columns["variable"] = pd.Series(text.pop("variable"))
    columns.update((k, num.pop(k)) for k in ("estimate", "se", "lower", "upper", "n", "cost"))
    columns["variance"] = pd.Series(text.pop("variance"))
    table = pd.DataFrame(columns, copy=False)
    for k, a in extras:
        table[k] = a
    return table


# ------------------------------------------------------------------ streaming cell by cell
@dataclass
class CellArrays:
    """One cell's replicates in replicate order: ``points`` holds (E, V, R) arrays (estimate, se, lower,
    upper, and with fieldwork the ``full_`` ones), E the cell's points (estimator x variance formula) and V
    the variables; ``reps`` holds (R,) arrays (n, cost, and the fieldwork counts) of replicates 0 to R - 1."""

    points: dict
    reps: dict

    @property
    def shape(self) -> tuple[int, int, int]:
        return self.points["estimate"].shape


def cell_arrays(first: BlockResult, replicates: int) -> CellArrays:
    """Empty arrays for the ``replicates`` replicates of the cell ``first`` (one of its blocks) belongs to."""
    E, _, V = first.estimate.shape
    points, reps = {}, {}
    for k, a in vars(first).items():
        if isinstance(a, np.ndarray):
            if a.ndim == 3:
                points[k] = np.empty((E, V, replicates), dtype=a.dtype)
            else:  # n and cost as the whole table holds them (float); fieldwork columns as drawn
                reps[k] = np.empty(replicates, dtype=float if k in ("n", "cost") else a.dtype)
    return CellArrays(points=points, reps=reps)


def fill_cell(arrays: CellArrays, block: BlockResult) -> None:
    """Copy one block's replicates into its cell's arrays, at the block's first replicate."""
    at, b = block.start, len(block.n)
    for k, dst in arrays.points.items():
        dst[:, :, at:at + b] = getattr(block, k).transpose(0, 2, 1)
    for k, dst in arrays.reps.items():
        dst[at:at + b] = getattr(block, k)


def simulate_cells(plan, progress=None):
    """Like :func:`simulate`, but yield (cell id, :class:`CellArrays`) of each cell, in cell order, as soon
    as its blocks (and those of every cell before it) are in; each block is copied into its cell's arrays
    on arrival and dropped, so only the cells still open are held, never every block of the run."""
    spans = block_spans(plan.replicates, plan.block_size)
    tasks = [(ci, b, s, count) for ci in range(len(plan.cells)) for b, s, count in spans]
    open_cells, left, done, next_cell = {}, dict.fromkeys(range(len(plan.cells)), len(spans)), {}, 0
    for r in _complete(plan, tasks, progress):
        if r.cell not in open_cells:
            open_cells[r.cell] = cell_arrays(r, plan.replicates)
        fill_cell(open_cells[r.cell], r)
        left[r.cell] -= 1
        if left[r.cell] == 0:
            done[r.cell] = open_cells.pop(r.cell)
        del r
        while next_cell in done:
            yield next_cell, done.pop(next_cell)
            next_cell += 1


def cell_pieces(cell: Cell, arrays: CellArrays, variables, rows: int):
    """The replicate-table rows of one cell (in the table's order: point, variable, replicate) as
    DataFrames of at most ``rows`` rows each (see :func:`table_frame`)."""
    E, V, R = arrays.shape
    point_est = np.array([e for e, _ in cell.points], dtype=object)
    point_var = np.array([v for _, v in cell.points], dtype=object)
    names = np.array(variables, dtype=object)
    label = np.array([cell.design.label], dtype=object)
    flat = {k: a.reshape(-1) for k, a in arrays.points.items()}
    extras = [k for k in REPLICATE_COLUMNS if k in flat or k in arrays.reps]
    for a in range(0, E * V * R, rows):
        i = np.arange(a, min(a + rows, E * V * R))
        rep, var, point = i % R, (i // R) % V, i // (V * R)  # rep: the replicate number (0 to R - 1)
        # object arrays by indexing one array of the labels: every row points to the same str, whereas
        # np.full would make a new str object for each row (about 60 bytes a row)
        text = {"design": label[np.zeros(len(i), dtype=np.intp)], "estimator": point_est[point],
                "variable": names[var], "variance": point_var[point]}
        num = {k: flat[k][i[0]:i[-1] + 1] for k in ("estimate", "se", "lower", "upper")}
        num |= {k: arrays.reps[k][rep] for k in ("n", "cost")}
        more = ((k, flat[k][i[0]:i[-1] + 1] if k in flat else arrays.reps[k][rep]) for k in extras)
        yield table_frame(rep, text, np.full(len(i), int(cell.design.size), dtype=np.int64),
                          num, more)
