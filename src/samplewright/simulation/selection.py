"""Drawing the one sample fieldwork uses, its selection record, and the replay an auditor runs.

The sample is drawn by the design's own ``draw`` (``design.draw(frame, rng, 1, keep_units=True)``),
the code every rehearsal replicate goes through, so the real sample comes from the selection
rule that was scored.  Its Generator is ``SeedSequence(seed, spawn_key=(*draw_key(label), size))``:
``draw_key`` hashes the label with a prefix of its own, so the sample never repeats a
rehearsal replicate drawn with the same seed.

Columns of the sample, after every frame column of each selected unit:

- ``selection_order`` 1, 2, ... in the order the design drew the units;
- ``stratum`` (stratified designs) and ``psu`` (cluster designs), as labels of the frame;
- ``stage1_probability`` and ``stage2_probability`` (two-stage designs): the cluster's
  first-stage probability and the unit's probability within it, take_c / M_c;
- ``inclusion_probability``: pi_i from the design's ``inclusion_probabilities`` (the product
  of the two stages for two-stage designs);
- ``design_weight``: 1 / pi_i; for designs that can select a unit more than once (srs and pps
  with ``replace = true``, systematic with several starts) one row per distinct unit with its
  ``hits``, and the weight hits / E(hits_i) with E(hits_i) = n p_i (the Hansen-Hurwitz weight
  hits / (n p_i); Cochran 1977, sec. 9A.3), whose sum over the sample estimates N unbiasedly;
- ``certainty``: the unit (or its cluster) is taken with probability 1;
- ``reserve``: false for the main sample.

Reserves (``reserve = R``) exist where the main sample plus reserves is a sample of the same
design at a larger size: srs without replacement, stratified (per stratum) and the second
stage of two-stage cluster designs (per sampled cluster).  In each group (the frame, a stratum,
a cluster) the R reserves are the first R of a random order of the group's units not in the
main sample, so the main sample followed by its reserves is the first n_g + R of one random
order of the group: every prefix is a simple random sample of the group (Cochran 1977,
sec. 2.2), and substituting non-respondents in reserve order keeps the probabilities known.
A reserve row carries the probability and weight of the larger design (n_g + R units in its
group).
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import os
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pandas as pd

from samplewright.config.validate import closest, frame_columns
from samplewright.designs import Design
from samplewright.designs.pips import size_measure
from samplewright.errors import InputError, show
from samplewright.files import csv_writer, json_writer, parquet_writer, write_together
from samplewright.population.frame import Frame
from samplewright.simulation.engine import sha256_words
from samplewright.simulation.plan import bind_and_check
from samplewright.simulation.scenario import Scenario, load_scenario

#: prefix of the hashed label in a draw's spawn key (keeps it apart from the rehearsal's block streams)
DRAW_DOMAIN = b"samplewright draw\0"
#: the frame roles :func:`frame_columns` checks (the same call a frame load makes, see :func:`frame_table`)
_ROW_ROLES = ("target", "stratum", "cluster", "size", "order", "unit_cost", "id")
RESERVE_SUPPORT = ("reserves are available for srs without replacement, stratified, and the second stage of "
                   "two-stage cluster and stratified_cluster designs, where the main sample and its reserves "
                   "together are a sample of the same design at a larger size")
#: the record's fields that a replay must give again (besides the sample file itself)
REPLAYED_FIELDS = ("design", "rows", "strata", "sum_of_weights", "variance_estimator", "certainty_units")


def draw_key(label: str) -> tuple[int, ...]:
    """The spawn key of a design's draw: the SHA-256 of a draw prefix and its label, as eight 32-bit words."""
    return sha256_words(DRAW_DOMAIN + label.encode("utf-8"), "little")


def draw_seed(seed: int, label: str, size: int) -> np.random.SeedSequence:
    return np.random.SeedSequence(seed, spawn_key=(*draw_key(label), int(size)))


def new_seed() -> int:
    """A seed from the operating system's entropy (128 bits), for a draw given none."""
    return int(np.random.SeedSequence().entropy)


# ------------------------------------------------------------------ the seam
def _bound_design(scenario: Scenario, label: str, size: int | None) -> tuple[Frame, Design]:
    """The bound frame and the design ``label`` at one size, checked: what a run does before simulating.

    The draw binds a scenario as a run plan does (load the frame, give the design the cost model's
    stratum costs, then :func:`~samplewright.simulation.plan.bind_and_check`).  The frame errors and response model of a
    scenario are rehearsal settings and are not applied: the real sample is drawn from the frame.
    """
    labels = [d.label for d in scenario.designs]
    if label not in labels:
        raise InputError(f"design {show(label)} is not in the scenario (its designs: "
                         f"{', '.join(map(repr, labels))}){closest(str(label), labels)}")
    design = scenario.designs[labels.index(label)]
    sizes = design.sizes()
    if size is None:
        if len(sizes) > 1:
            raise InputError(f"design {label!r} has the sizes {sizes}: choose one with --size")
        size = sizes[0]
    elif int(size) not in sizes:
        raise InputError(f"design {label!r}: size {size} is not one of its sizes {sizes}")
    frame = scenario.load_frame()
    design = scenario.cost.for_design(design.at(int(size)), frame)
    return bind_and_check(scenario.cost, frame, [design]), design


def frame_table(scenario: Scenario, frame: Frame) -> pd.DataFrame:
    """The frame's columns as read (values unchanged), one row per unit of ``frame``.

    The rows are those the frame load keeps: the same check (``frame_columns``) runs on the
    table with a row-number column added, and the rows it keeps are taken from the table as read
    (so a ``missing = "drop"`` leaves out the same rows and no value is converted).
    """
    spec = scenario.frame
    roles = {k: spec.roles[k] for k in _ROW_ROLES if k in spec.roles}
    source = "synthetic frame" if spec.synthetic is not None else str(spec.path)
    raw = spec.dataframe()
    marker = "row"
    while marker in raw.columns:
        marker = f"_{marker}"
    checked, _, _ = frame_columns(raw.assign(**{marker: np.arange(len(raw))}), missing=spec.missing, source=source,
                               **roles)
    table = raw.iloc[checked[marker].to_numpy()].reset_index(drop=True)
    if len(table) != frame.N:  # pragma: no cover - the same rows a frame load keeps
        raise RuntimeError(f"the frame table has {len(table)} rows but the frame {frame.N} units")
    return table


# ------------------------------------------------------------------ drawing
def _two_stage(design: Design) -> bool:
    return design.method in ("cluster", "stratified_cluster") and design.units_per_cluster is not None


def _repeats(design: Design) -> bool:
    """Can the design select a unit more than once?"""
    return (design.method in ("srs", "pps") and bool(design.replace)) or (
        design.method == "systematic" and int(design.starts) > 1)


def _expected_hits(design: Design, frame: Frame) -> np.ndarray:
    """E(hits_i) = n p_i of every unit for designs that can select a unit more than once."""
    if design.method == "systematic":
        return design.expected_hits(frame)
    n = int(design.n)
    if design.method == "srs":
        return np.full(frame.N, n / frame.N)
    x = size_measure(frame, design.label)
    return n * x / x.sum()


def _stage_probabilities(design: Design, frame: Frame) -> tuple[np.ndarray, np.ndarray]:
    """Per unit: its cluster's first-stage probability and its probability within the cluster."""
    M = frame.cluster_sizes[frame.cluster]
    if design.method == "cluster":
        p1 = np.full(frame.N, int(design.clusters) / frame.C)
        k = design.take(frame)
    else:
        s = design.setup(frame)
        p1, k = s["pi_c"][frame.cluster], s["k"]
    return p1, np.minimum(M, k) / M


def _reserve_groups(design: Design, frame: Frame) -> tuple[np.ndarray, list[str]]:
    """Each unit's reserve group (the frame, its stratum, or its cluster) and the groups' names."""
    if design.method == "srs":
        return np.zeros(frame.N, dtype=np.int64), ["the frame"]
    if design.method == "stratified":
        cut = design.strata_frame(frame)
        return cut.stratum, [f"stratum {str(lab)!r}" for lab in cut.stratum_labels]
    return frame.cluster, [f"cluster {str(lab)!r}" for lab in frame.cluster_labels]


def check_reserve(design: Design, frame: Frame, reserve: int) -> None:
    """Refuse reserves a design has no nested larger sample for, or more than a group has left."""
    if reserve == 0:
        return
    if reserve < 0:
        raise InputError(f"--reserve must be a whole number of at least 0, got {reserve}")
    nested = (design.method == "srs" and not design.replace) or design.method == "stratified" or _two_stage(design)
    if not nested:
        why = {"srs": "with replacement a reserve could repeat a sampled unit",
               "cluster": "it takes every unit of its clusters, leaving none in reserve",
               "stratified_cluster": "it takes every unit of its clusters, leaving none in reserve"}.get(
            design.method, "its selection has no nested larger sample to take reserves from")
        raise InputError(f"--reserve: design {design.label!r} ({design.method}) cannot have reserves: {why}; "
                         f"{RESERVE_SUPPORT}")
    group, names = _reserve_groups(design, frame)
    population = np.bincount(group, minlength=len(names))
    if design.method == "srs":
        taken = np.array([int(design.n)])
    elif design.method == "stratified":
        taken = design.n_h(frame)
    else:
        k = design.take(frame) if design.method == "cluster" else design.setup(frame)["k"]
        taken = np.minimum(population, k)
    left = population - taken
    g = int(np.argmin(left))
    if reserve > left[g]:
        raise InputError(f"--reserve {reserve} is more than the {int(left[g])} unit(s) {names[g]} has beyond "
                         f"its sample of {int(taken[g])}; give --reserve {int(left[g])} or less")


@dataclass
class Selection:
    """The drawn units (main sample, then reserves) and their selection columns, one entry per row."""

    units: np.ndarray
    columns: dict


def select(frame: Frame, design: Design, seed: int, reserve: int = 0) -> Selection:
    """Draw one sample of ``design`` (at one size) and, after it, ``reserve`` reserves per group."""
    check_reserve(design, frame, reserve)
    rng = np.random.default_rng(draw_seed(seed, design.label, design.size))
    block = design.draw(frame, rng, 1, keep_units=True)
    units = np.asarray(block.units[0], dtype=np.int64)
    if block.mask is not None and block.mask.shape[-1] == units.size:  # a random-size sample, padded
        units = units[np.asarray(block.mask)[0]]
    units = units[units >= 0]  # two-stage and whole-cluster layouts pad with -1
    pi = design.inclusion_probabilities(frame)
    hits = None
    if _repeats(design):  # one row per distinct unit, in the order of first selection
        _, first, counts = np.unique(units, return_index=True, return_counts=True)
        order = np.argsort(first)
        units, hits = units[first[order]], counts[order]
        weight = hits / _expected_hits(design, frame)[units]
    else:
        weight = 1.0 / pi[units]
    p1 = p2 = None
    if _two_stage(design):
        p1, p2 = _stage_probabilities(design, frame)
    first_stage = pi if p1 is None else p1  # a unit, or its cluster, taken for certain
    row_pi, row_p2 = pi[units], None if p2 is None else p2[units]
    main = units.size
    if reserve:
        extra, within = _reserves(design, frame, units, reserve, rng)
        units = np.concatenate([units, extra])
        larger = within if p1 is None else p1[extra] * within  # pi of the larger design
        row_pi = np.concatenate([row_pi, larger])
        weight = np.concatenate([weight, 1.0 / larger])
        if row_p2 is not None:
            row_p2 = np.concatenate([row_p2, within])
    out = {"selection_order": np.arange(1, units.size + 1)}
    if design.method in ("stratified", "stratified_cluster"):
        cut = design.strata_frame(frame)
        out["stratum"] = np.asarray(cut.stratum_labels, dtype=object)[cut.stratum[units]]
    if design.method in ("cluster", "stratified_cluster"):
        out["psu"] = np.asarray(frame.cluster_labels, dtype=object)[frame.cluster[units]]
    if p1 is not None:
        out["stage1_probability"], out["stage2_probability"] = p1[units], row_p2
    out["inclusion_probability"] = row_pi
    out["design_weight"] = weight
    if hits is not None:
        out["hits"] = hits
    out["certainty"] = first_stage[units] >= 1.0
    out["reserve"] = np.arange(units.size) >= main
    return Selection(units=units, columns=out)


def _reserves(design, frame, main_units, reserve, rng) -> tuple[np.ndarray, np.ndarray]:
    """The reserves, group by group, ``reserve`` each in substitution order, and each one's
    probability within its group in the larger design, (n_g + R) / N_g.

    Groups follow the order they first appear in the main sample; within a group the reserves
    are the first R of a random order of its units outside the main sample.
    """
    group, _ = _reserve_groups(design, frame)
    population = np.bincount(group)
    taken = np.bincount(group[main_units], minlength=population.size)
    in_main = np.zeros(frame.N, dtype=bool)
    in_main[main_units] = True
    picked = [rng.permutation(np.flatnonzero((group == g) & ~in_main))[:reserve]
              for g in dict.fromkeys(group[main_units].tolist())]
    extra = np.concatenate(picked).astype(np.int64)
    return extra, (taken[group[extra]] + reserve) / population[group[extra]]


# ------------------------------------------------------------------ the sample table and its record
def sample_table(table: pd.DataFrame, selection: Selection) -> tuple[pd.DataFrame, dict]:
    """Every frame column of the selected units, then the selection columns.

    A frame column named like a selection column is renamed ``frame_<name>`` (returned as a
    mapping) so that no name appears twice.
    """
    rows = table.iloc[selection.units].reset_index(drop=True)
    renamed = {}
    for name in rows.columns:
        if name in selection.columns:
            new = f"frame_{name}"
            while new in rows.columns or new in selection.columns:
                new = f"frame_{new}"
            renamed[name] = new
    rows = rows.rename(columns=renamed)
    for name, values in selection.columns.items():
        rows[name] = values
    return rows, renamed


def file_sha256(path) -> str | None:
    if path is None:
        return None
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def _strata_counts(design: Design, frame: Frame, sample: pd.DataFrame) -> list[dict]:
    """Population and sample counts per design stratum (one entry "all" for a design without strata)."""
    main = sample[~sample["reserve"].astype(bool)]
    stratified = "stratum" in sample.columns and design.method in ("stratified", "stratified_cluster")
    cut = design.strata_frame(frame)
    labels = list(cut.stratum_labels) if stratified else ["all"]
    unit_stratum = cut.stratum if stratified else np.zeros(frame.N, dtype=np.int64)
    population = np.bincount(unit_stratum, minlength=len(labels))
    out = []
    for h, label in enumerate(labels):
        mine = sample["stratum"] == label if stratified else np.ones(len(sample), dtype=bool)
        in_main = main["stratum"] == label if stratified else np.ones(len(main), dtype=bool)
        entry = {"stratum": str(label), "population_units": int(population[h]),
                 "sample_units": int(in_main.sum()),
                 "reserve_units": int((mine & sample["reserve"].astype(bool)).sum())}
        if "psu" in sample.columns:
            pop_clusters = np.unique(frame.cluster[unit_stratum == h]).size
            entry.update(population_clusters=int(pop_clusters), sample_clusters=int(main.loc[in_main, "psu"].nunique()))
        out.append(entry)
    return out


def _certainty_units(frame: Frame, sample: pd.DataFrame) -> list[dict]:
    """The main-sample rows taken with certainty (their selection order, and id when the frame has one)."""
    rows = sample[sample["certainty"].astype(bool) & ~sample["reserve"].astype(bool)]
    id_col = frame.roles.get("id")
    out = []
    for _, row in rows.iterrows():
        entry = {"selection_order": int(row["selection_order"])}
        if id_col is not None and id_col in sample.columns:
            value = row[id_col]
            entry["id"] = value.item() if isinstance(value, np.generic) else value
        out.append(entry)
    return out


def draw_sample(scenario: Scenario, label: str, size: int | None = None, seed: int | None = None,
                reserve: int = 0, version: str = "", command: str = "") -> pd.DataFrame:
    """One sample of design ``label`` with its selection record in ``attrs["selection"]`` (module notes)."""
    frame, design = _bound_design(scenario, label, size)
    seed = new_seed() if seed is None else int(seed)
    if seed < 0:
        raise InputError(f"seed must be a whole number of at least 0, got {seed}")
    reserve = int(reserve)
    selection = select(frame, design, seed, reserve)
    sample, renamed = sample_table(frame_table(scenario, frame), selection)
    main = sample[~sample["reserve"]]
    repeats = _repeats(design)
    record = {
        "tool": "samplewright",
        "version": version,
        "created_utc": datetime.now(UTC).isoformat(timespec="seconds"),
        "command": command,
        "seed": seed,
        "random_stream": {"generator": "numpy.random.PCG64",
                          "seed_sequence": {"entropy": seed, "spawn_key": [*draw_key(label), int(design.size)]}},
        "scenario": {"path": None if scenario.source is None else str(Path(scenario.source).resolve()),
                     "sha256": file_sha256(scenario.source)},
        "frame": {"path": None if scenario.frame.path is None else str(Path(scenario.frame.path).resolve()),
                  "sha256": file_sha256(scenario.frame.path), "units": frame.N,
                  "dropped_rows": int(frame.roles.get("dropped_rows", 0)), "content_sha256": frame.content_hash},
        "design": {"label": design.label, "method": design.method,
                   "parameters": design.settings},
        "size": int(design.size),
        "size_key": design.size_key,
        "reserve": reserve,
        "rows": len(sample),
        "strata": _strata_counts(design, frame, sample),
        "sum_of_weights": float(main["design_weight"].sum()),
        "variance_estimator": design.variance_name,
        "certainty_units": _certainty_units(frame, sample),
        "weights": ("design_weight = hits / (n p_i), the Hansen-Hurwitz weight of a unit selected hits times"
                    if repeats else "design_weight = 1 / inclusion_probability (Horvitz-Thompson)"),
        "renamed_frame_columns": renamed,
        "notes": design.notes(frame) + [f"frame column {old!r} is written as {new!r}: the sample has a "
                                        f"selection column of that name" for old, new in renamed.items()],
        "columns": [str(c) for c in sample.columns],
    }
    sample.attrs["selection"] = record
    return sample


SUFFIXES = (".csv", ".parquet")


def _writer(sample: pd.DataFrame, suffix: str):
    plain = sample.copy()
    plain.attrs = {}
    return csv_writer(plain) if suffix == ".csv" else parquet_writer(plain)


def record_path(out) -> Path:
    return Path(out).with_suffix(".json")


def write_sample(sample: pd.DataFrame, out, force: bool = False) -> tuple[Path, Path]:
    """Write the sample (``out``, .csv or .parquet) and its record (same name, .json) together."""
    out = Path(out)
    suffix = out.suffix.lower()
    if suffix not in SUFFIXES:
        raise InputError(f"--out {str(out)!r}: use a .csv or .parquet file name")
    rec_path = record_path(out)
    record = dict(sample.attrs["selection"])
    for path in (out, rec_path):
        if path.exists() and not force:
            raise InputError(f"{str(path)!r} exists; use --force to overwrite it or choose another --out")
    if not out.parent.is_dir():
        raise InputError(f"--out {str(out)!r}: folder {str(out.parent)!r} does not exist")
    inputs = [record["scenario"]["path"], record["frame"]["path"]]
    if any(p is not None and Path(p).resolve() in (out.resolve(), rec_path.resolve()) for p in inputs):
        raise InputError(f"--out {str(out)!r} would overwrite the scenario or frame file; choose another name")
    folder = rec_path.resolve().parent
    for key in ("scenario", "frame"):  # paths relative to the record, so the folder can move as a whole
        if record[key]["path"] is not None:
            record[key] = {**record[key], "path": os.path.relpath(record[key]["path"], folder)}
    write_sample_file = _writer(sample, suffix)
    held = {}

    def sample_then_hash(tmp):
        write_sample_file(tmp)
        held["sha256"] = file_sha256(tmp)

    def record_writer(tmp):
        record["sample"] = {"file": out.name, "format": suffix[1:], "sha256": held["sha256"]}
        json_writer(record)(tmp)

    write_together([(out, sample_then_hash), (rec_path, record_writer)])
    sample.attrs["selection"] = record
    return out, rec_path


# ------------------------------------------------------------------ the replay
def _cells(data: bytes | pd.DataFrame, fmt: str) -> list[list[str]]:
    """A sample file's header and rows as text cells (CSV as written; Parquet values as text)."""
    if fmt == "csv":
        return list(csv.reader(io.StringIO(data.decode("utf-8", errors="replace"))))
    return [[str(c) for c in data.columns]] + [[str(v) for v in row] for row in data.itertuples(index=False)]


def _first_difference(found: list[list[str]], expected: list[list[str]]) -> str | None:
    if found[:1] != expected[:1]:
        return f"its columns differ from the replay's ({len(found[0]) if found else 0} against {len(expected[0])})"
    header = expected[0]
    for r, (a, b) in enumerate(zip(found[1:], expected[1:]), start=1):
        for c, name in enumerate(header):
            x = a[c] if c < len(a) else "(missing)"
            if x != b[c]:
                return f"data row {r}, column {name!r}: the file has {show(x)}, the replay gives {show(b[c])}"
    if len(found) != len(expected):
        return f"it has {len(found) - 1} data rows, the replay {len(expected) - 1}"
    return None


def check_record(path) -> str:
    """Re-draw the sample a record describes and compare it with the sample file beside it.

    Returns the line to print when everything matches; raises InputError naming the first
    difference (a changed scenario or frame file, a record field, a row and column of the file).
    """
    from samplewright.population.reading import input_file

    rec_path = input_file(path, "selection record")
    folder = rec_path.resolve().parent
    try:
        record = json.loads(rec_path.read_text(encoding="utf-8"))
        label, size, seed, reserve = (record["design"]["label"], record["size"], record["seed"],
                                      record["reserve"])
        files = {what: None if record[what]["path"] is None else folder / record[what]["path"]
                 for what in ("scenario", "frame")}
        sample_name, fmt = record["sample"]["file"], record["sample"]["format"]
        if not (isinstance(label, str) and all(isinstance(v, int) and not isinstance(v, bool) and v >= 0
                                               for v in (size, seed, reserve))):
            raise ValueError("design label, size, seed or reserve of the wrong type")
        if Path(sample_name).name != sample_name or fmt not in ("csv", "parquet") or files["scenario"] is None:
            raise ValueError("the sample must be a file beside the record, .csv or .parquet, from a scenario file")
    except (OSError, UnicodeDecodeError, ValueError, KeyError, TypeError) as exc:
        raise InputError(f"selection record {str(rec_path)!r} could not be read as a record "
                         f"({type(exc).__name__}: {exc})") from None
    for what, file in files.items():
        if file is None:
            continue
        if not file.is_file():
            raise InputError(f"{what} file {str(file)!r} named by the record does not exist")
        if file_sha256(file) != record[what]["sha256"]:
            raise InputError(f"{what} file {str(file)!r} changed since the draw: its sha256 is not the one "
                             f"recorded; the sample cannot be replayed from it")
    scenario_path = files["scenario"]
    replay = draw_sample(load_scenario(scenario_path), label, size, seed, reserve)
    redrawn = replay.attrs["selection"]
    for key in REPLAYED_FIELDS:
        if redrawn[key] != record.get(key):
            raise InputError(f"selection record {str(rec_path)!r}: field {key!r} is {show(record.get(key))} but "
                             f"the replay gives {show(redrawn[key])}")
    sample_path = folder / sample_name
    if not sample_path.is_file():
        raise InputError(f"sample file {str(sample_path)!r} named by the record does not exist")
    if fmt == "csv":
        buffer = io.StringIO()
        _writer(replay, ".csv")(buffer)
        found, expected = _cells(sample_path.read_bytes(), "csv"), _cells(buffer.getvalue().encode(), "csv")
    else:
        found = _cells(pd.read_parquet(sample_path), "parquet")
        expected = _cells(replay, "parquet")
    difference = _first_difference(found, expected)
    if difference is not None:
        raise InputError(f"sample file {str(sample_path)!r} does not match the replay: {difference}")
    if file_sha256(sample_path) != record["sample"].get("sha256"):
        raise InputError(f"sample file {str(sample_path)!r}: every cell matches the replay but its bytes are not "
                         f"the ones recorded (sha256 differs from the record's)")
    return (f"ok: {sample_path.name} matches the replay of design {label!r} at {record['size_key']} = {size} "
            f"with seed {seed} ({len(expected) - 1} rows)")
