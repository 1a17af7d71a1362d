"""Read a finished run folder back into a :class:`~samplewright.result.RunResult` (no simulation)."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd

from ..errors import InputError
from ..result import ALLOCATION_COLUMNS, RunResult


def _read_json(path: Path):
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: could not be read: {exc}") from None
    except json.JSONDecodeError as exc:
        raise InputError(f"{path}: malformed JSON at line {exc.lineno}: {exc.msg}") from None


def _read_csv(path: Path) -> pd.DataFrame:
    try:
        return pd.read_csv(path)
    except (OSError, UnicodeDecodeError, pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise InputError(f"{path}: could not be read as CSV: {exc}") from None


def read_run(folder) -> RunResult:
    """Read the result tables of a finished run in ``folder``.

    ``run.json`` and ``summary.csv`` are required; ``replicates.parquet`` may be missing (the
    figures that need it are then left out); ``allocation.csv``, ``frontier.csv``,
    ``recommendation.json`` and ``frame_order.csv`` are read when present.

    Examples
    --------
    >>> import tempfile
    >>> from samplewright import scenario_from_dict, run
    >>> res = run(scenario_from_dict({"frame": {"synthetic": {"units": 300}},
    ...                               "design": [{"label": "simple", "method": "srs", "n": 30}]}),
    ...           replicates=50, seed=1)
    >>> back = read_run(res.write(tempfile.mkdtemp()))
    >>> len(back.replicates)
    100
    """
    p = Path(folder)
    if not p.is_dir():
        raise InputError(f"run folder {str(p)!r} does not exist or is not a folder")
    for name in ("run.json", "summary.csv"):
        if not (p / name).exists():
            raise InputError(
                f"{p}: {name} is missing; this is not a finished samplewright run "
                f"(run `samplewright run SCENARIO --out {p}` first)"
            )
    info = _read_json(p / "run.json")
    if not isinstance(info, dict):
        raise InputError(f"{p / 'run.json'}: expected a JSON object")
    summary = _read_csv(p / "summary.csv")
    for col in ("design", "size", "estimator", "variable", "coverage"):
        if col not in summary.columns:
            raise InputError(f"{p / 'summary.csv'}: column {col!r} is missing")
    reps_path = p / "replicates.parquet"
    if reps_path.exists():
        try:
            replicates = pd.read_parquet(reps_path)
        except Exception as exc:  # pyarrow raises several types for a damaged file
            raise InputError(f"{reps_path}: could not be read as Parquet: {exc}") from None
    else:
        replicates = pd.DataFrame(
            columns=[
                "replicate",
                "design",
                "size",
                "estimator",
                "variable",
                "estimate",
                "se",
                "lower",
                "upper",
                "n",
                "cost",
            ]
        )
    alloc_path = p / "allocation.csv"
    allocation = _read_csv(alloc_path) if alloc_path.exists() else pd.DataFrame(columns=ALLOCATION_COLUMNS)
    frontier = _read_csv(p / "frontier.csv") if (p / "frontier.csv").exists() else None
    rec = _read_json(p / "recommendation.json") if (p / "recommendation.json").exists() else None
    order = _read_csv(p / "frame_order.csv") if (p / "frame_order.csv").exists() else None
    return RunResult(
        summary=summary,
        replicates=replicates,
        allocation=allocation,
        info=info,
        frontier=frontier,
        recommendation=rec,
        warnings=list(info.get("warnings") or []),
        frame_order=order,
    )
