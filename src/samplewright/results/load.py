"""Read a finished run folder back into a :class:`~samplewright.results.result.RunResult` (no simulation),
and redraw its report."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd

from samplewright.errors import InputError
from samplewright.evaluation.measures import SUMMARY_COLUMNS
from samplewright.files import restore_table
from samplewright.report import write_report
from samplewright.results.result import ALLOCATION_COLUMNS, STRESS_FILES, RunResult

#: columns of each CSV file the report reads: (required, of which numeric)
TEXT_KEYS = ("design", "method", "estimator", "variable", "variance")
CSV_COLUMNS = {
    "summary.csv": (SUMMARY_COLUMNS, [c for c in SUMMARY_COLUMNS if c not in TEXT_KEYS]),
    "allocation.csv": (ALLOCATION_COLUMNS, ["size", "population_units", "sample_units"]),
    "frontier.csv": (["design", "size", "estimator", "variable", "mean_cost", "moe"], ["size", "mean_cost", "moe"]),
    "frame_order.csv": (["order", "variable", "position", "value"], ["position", "value"]),
    "stress.csv": (["point", "design", "size", "estimator", "variable", "moe", "mean_cost"],
                   ["point", "size", "moe", "mean_cost"]),
    "stress_verdict.csv": (["point", "pick"], ["point"]),
    "break_even.csv": (["assumption", "from_value", "to_value", "break_even", "low", "high"],
                       ["from_value", "to_value", "break_even", "low", "high"]),
}
_NUMBER = (int, float)
#: top-level keys of run.json and recommendation.json the report reads, with their JSON types (or null)
JSON_KEYS = {
    "run.json": {"title": (str,), "scenario": (str,), "scenario_hash": (str,), "confidence": _NUMBER,
                 "replicates": (int,), "seed": (int,), "seed_entropy": (int,), "block_size": (int,),
                 "jobs": (int,), "exact": (bool,), "frame": (dict,), "designs": (list,), "versions": (dict,),
                 "warnings": (list,), "frame_order": (list,), "stopping": (dict,), "fieldwork": (dict,),
                 "goal": (dict,), "labels": (dict,)},
    "recommendation.json": {"statement": (str,), "goal": (dict,), "passed_over": (list,),
                            "cheapest_meeting_moe": (dict,), "best_within_budget": (dict,),
                            "interpolated": (list,), "units": (dict,)},
}
#: lists whose items must be JSON objects (or, for warnings, strings)
JSON_ITEMS = {"designs": dict, "frame_order": dict, "passed_over": dict, "interpolated": dict, "warnings": str}


def _type_name(v) -> str:
    return {dict: "an object", list: "a list", str: "a string", bool: "true/false"}.get(type(v), "a number")


def _read_json(path: Path) -> dict:
    """A JSON object whose known keys have the types the report expects; else one InputError naming the file."""
    try:
        obj = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: could not be read: {exc}") from None
    except json.JSONDecodeError as exc:
        raise InputError(f"{path}: malformed JSON at line {exc.lineno}: {exc.msg}") from None
    except RecursionError:
        raise InputError(f"{path}: malformed JSON: nested too deeply") from None
    if not isinstance(obj, dict):
        raise InputError(f"{path}: expected a JSON object, found {_type_name(obj)}")
    for key, types in JSON_KEYS.get(path.name, {}).items():
        v = obj.get(key)
        if v is None:
            continue
        if not isinstance(v, types) or (isinstance(v, bool) and bool not in types):
            raise InputError(f"{path}: {key!r} should be {_type_name(types[0]())} or null, "
                             f"found {_type_name(v)}")
        if key in JSON_ITEMS and not all(isinstance(x, JSON_ITEMS[key]) for x in v):
            raise InputError(f"{path}: every item of {key!r} should be {_type_name(JSON_ITEMS[key]())}")
    conf = obj.get("confidence") if path.name == "run.json" else None
    if conf is not None and not 0 < conf < 1:
        raise InputError(f"{path}: 'confidence' should lie between 0 and 1, found {conf!r}")
    return obj


def _ends_with_newline(path: Path) -> bool:
    """Every CSV file samplewright writes ends with a line break; one cut short mid-row does not."""
    with open(path, "rb") as fh:
        fh.seek(0, 2)
        if fh.tell() == 0:
            return True
        fh.seek(-1, 2)
        return fh.read(1) in (b"\n", b"\r")


def _read_csv(path: Path) -> pd.DataFrame:
    """A CSV result table with its required columns, numeric where numbers belong, formula guards undone."""
    try:
        df = pd.read_csv(path)
    except (OSError, UnicodeDecodeError, pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise InputError(f"{path}: could not be read as CSV: {exc}") from None
    if not _ends_with_newline(path):
        raise InputError(f"{path}: ends in the middle of a row; the file is truncated")
    df = restore_table(df)
    need, numeric = CSV_COLUMNS.get(path.name, ([], []))
    missing = [c for c in need if c not in df.columns]
    if missing:
        raise InputError(f"{path}: column{'s' if len(missing) > 1 else ''} {', '.join(map(repr, missing))} "
                         f"missing; the file is truncated or was not written by samplewright")
    for c in numeric:
        if not (pd.api.types.is_numeric_dtype(df[c]) or df[c].isna().all()):
            raise InputError(f"{path}: column {c!r} holds text where numbers belong; the file is damaged")
    keys = [c for c in ("design", "size", "estimator", "variable") if c in need]
    keys += ["variance"] if keys and "variance" in df.columns else []
    if keys and df[keys].isna().any(axis=None):
        raise InputError(f"{path}: a row has a blank {', '.join(keys)}; the file is truncated or damaged")
    return df


def _with_variance(table: pd.DataFrame, info: dict) -> pd.DataFrame:
    """A table of a run written before designs listed variance formulas gains its ``variance`` column:
    each design had one formula then, the one run.json names for it."""
    if "variance" in table.columns or not len(table):
        return table
    named = {d.get("label"): d.get("variance") for d in info.get("designs") or []}
    return table.assign(variance=table["design"].map(named))


def read_run(folder) -> RunResult:
    """Read the result tables of a finished run in ``folder``.

    ``run.json`` and ``summary.csv`` are required; ``replicates.parquet`` may be missing (the
    figures that need it are then left out); ``allocation.csv``, ``frontier.csv``,
    ``recommendation.json``, ``frame_order.csv``, a stress run's ``stress.csv``, ``stress_verdict.csv`` and
    ``break_even.csv``, and a proposal's ``candidates.csv`` are read when present.

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
    summary = _read_csv(p / "summary.csv")
    if not len(summary):
        raise InputError(f"{p / 'summary.csv'}: has no rows; the file is truncated")
    reps_path = p / "replicates.parquet"
    if reps_path.exists():
        try:
            replicates = pd.read_parquet(reps_path)
        except Exception as exc:  # noqa: BLE001 -- pyarrow raises several types for a damaged file
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
                "variance",
            ]
        )
    alloc_path = p / "allocation.csv"
    allocation = _read_csv(alloc_path) if alloc_path.exists() else pd.DataFrame(columns=ALLOCATION_COLUMNS)
    frontier = _read_csv(p / "frontier.csv") if (p / "frontier.csv").exists() else None
    rec = _read_json(p / "recommendation.json") if (p / "recommendation.json").exists() else None
    order = _read_csv(p / "frame_order.csv") if (p / "frame_order.csv").exists() else None
    stress = [_read_csv(p / name) if (p / name).exists() else None for name in STRESS_FILES]
    candidates = _read_csv(p / "candidates.csv") if (p / "candidates.csv").exists() else None  # a proposal's
    return RunResult(
        summary=_with_variance(summary, info),
        replicates=_with_variance(replicates, info),
        allocation=allocation,
        info=info,
        frontier=None if frontier is None else _with_variance(frontier, info),
        recommendation=rec,
        warnings=list(info.get("warnings") or []),
        frame_order=order,
        stress=stress[0],
        stress_verdict=stress[1],
        break_even=stress[2],
        candidates=candidates,
    )


def report_folder(folder, svg: bool = False, force: bool = False, log=None) -> Path:
    """Rebuild the report of a finished run folder without re-simulating; returns report.html's path."""
    return write_report(read_run(folder), folder, svg=svg, force=force, log=log)
