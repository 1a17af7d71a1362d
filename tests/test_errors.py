"""One test per refusal: exit code 2, one ``error:`` line naming the culprit, no traceback.

Also: warnings that are not errors (printed once, recorded in run.json) and the
"nothing lost" guarantees (no overwrite without --force, no partial files).

The frame is an invented expense-claims audit (values exercise code only; no result here
is checked against a published figure except the Cochran skewness rule, whose source is
given beside its test).
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from samplewright import Frame
from samplewright.cli.main import main
from samplewright.errors import InputError

AS_ROOT = hasattr(os, "geteuid") and os.geteuid() == 0


# ------------------------------------------------------------------ helpers
def claims_frame() -> pd.DataFrame:
    """24 claims: 3 offices (strata) x 2 batches each (clusters) x 4 claims."""
    rng = np.random.default_rng(7)
    rows = []
    k = 0
    for office in ["north", "south", "west"]:
        for b in range(2):
            for _ in range(4):
                k += 1
                rows.append({"claim_id": f"C{k:03d}", "office": office, "batch": f"{office}-{b}",
                             "amount": round(float(rng.gamma(2.0, 60.0)), 2), "pages": int(rng.integers(1, 9)),
                             "handling": 2.5})
    return pd.DataFrame(rows)


FRAME = """\
[frame]
path = "claims.csv"
target = "amount"
stratum = "office"
cluster = "batch"
id = "claim_id"
{frame_extra}
"""

SRS = """\
[[design]]
label = "simple"
method = "srs"
n = 6
"""


def setup(tmp_path: Path, design: str = SRS, top: str = "", frame_extra: str = "", df: pd.DataFrame | None = None,
          raw_frame: str | None = None) -> Path:
    """Write claims.csv and scenario.toml into tmp_path; return the scenario path."""
    if raw_frame is not None:
        (tmp_path / "claims.csv").write_text(raw_frame)
    else:
        (claims_frame() if df is None else df).to_csv(tmp_path / "claims.csv", index=False)
    default = "" if top.lstrip().startswith("replicates") else "replicates = 600\n"
    text = default + top + "\n" + FRAME.format(frame_extra=frame_extra) + "\n" + design
    p = tmp_path / "scenario.toml"
    p.write_text(text)
    return p


def cli(argv, capsys):
    code = main([str(a) for a in argv])
    out = capsys.readouterr()
    return code, out.out, out.err


def refuse(argv, capsys, *needles) -> str:
    """Run the CLI and assert a clean refusal whose one line contains every needle."""
    code, _, err = cli(argv, capsys)
    assert "Traceback" not in err
    assert code == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("error: "), err
    for n in needles:
        assert n in lines[0], f"{n!r} not in {lines[0]!r}"
    return lines[0]


def run_refused(tmp_path, capsys, *needles, extra=(), **kw) -> str:
    sc = setup(tmp_path, **kw)
    return refuse(["run", sc, "--out", tmp_path / "out", "--quiet", *extra], capsys, *needles)


def run_ok(tmp_path, capsys, extra=(), **kw):
    sc = setup(tmp_path, **kw)
    code, _, err = cli(["run", sc, "--out", tmp_path / "out", "--quiet", *extra], capsys)
    assert code == 0, err
    assert "Traceback" not in err
    return json.loads((tmp_path / "out" / "run.json").read_text()), err


def folder_digest(p: Path) -> dict:
    return {str(f.relative_to(p)): hashlib.sha256(f.read_bytes()).hexdigest()
            for f in sorted(p.rglob("*")) if f.is_file()}


# ------------------------------------------------------------------ scenario file
def test_scenario_file_missing(tmp_path, capsys):
    refuse(["run", tmp_path / "nope.toml", "--out", tmp_path / "out"], capsys, "nope.toml", "does not exist")


def test_malformed_toml_names_file_and_line(tmp_path, capsys):
    p = tmp_path / "bad.toml"
    p.write_text('title = "x"\nreplicates = 100\n[frame\npath = "a.csv"\n')
    refuse(["run", p, "--out", tmp_path / "out"], capsys, "bad.toml", "malformed TOML", "line 3")


def test_scenario_not_utf8(tmp_path, capsys):
    p = tmp_path / "latin.toml"
    p.write_bytes('title = "caf\xe9"\n'.encode("latin-1"))
    refuse(["run", p, "--out", tmp_path / "out"], capsys, "latin.toml", "could not be read")


@pytest.mark.parametrize("top,needles", [
    ("replicats = 100", ("unknown key 'replicats'", "did you mean 'replicates'")),
    ("confidense = 0.9", ("unknown key 'confidense'", "did you mean 'confidence'")),
])
def test_unknown_top_key_closest_match(tmp_path, capsys, top, needles):
    run_refused(tmp_path, capsys, "scenario.toml", *needles, top=top)


def test_unknown_frame_key_closest_match(tmp_path, capsys):
    run_refused(tmp_path, capsys, "[frame]", "unknown key 'stratun'", "did you mean 'stratum'",
                frame_extra='stratun = "office"')


def test_unknown_design_key_closest_match(tmp_path, capsys):
    design = '[[design]]\nlabel = "by office"\nmethod = "stratified"\nn = 8\nallocaton = "neyman"\n'
    run_refused(tmp_path, capsys, "design 'by office'", "unknown key 'allocaton'", "did you mean 'allocation'",
                design=design)


def test_unknown_method_closest_match(tmp_path, capsys):
    design = '[[design]]\nlabel = "x"\nmethod = "stratifed"\nn = 8\n'
    run_refused(tmp_path, capsys, "method 'stratifed'", "did you mean 'stratified'", design=design)


def test_unknown_estimator(tmp_path, capsys):
    run_refused(tmp_path, capsys, "estimator 'hajeck'", "did you mean 'hajek'",
                design=SRS + 'estimators = ["hajeck"]\n')


def test_unknown_cost_key(tmp_path, capsys):
    run_refused(tmp_path, capsys, "[cost]", "unknown key 'per_units'", "did you mean 'per_unit'",
                design=SRS + "\n[cost]\nper_units = 3.0\n")


# ------------------------------------------------------------------ wrong types
@pytest.mark.parametrize("top,needles", [
    ('replicates = "many"', ("replicates", "whole number", "'many'")),
    ("replicates = 2.5", ("replicates", "whole number", "2.5")),
    ('confidence = "high"', ("confidence", "number", "'high'")),
    ("seed = true", ("seed", "whole number", "True")),
    ("block_size = [1, 2]", ("block_size", "whole number")),
    ("title = 5", ("title", "text", "5")),
])
def test_wrong_type_top_level(tmp_path, capsys, top, needles):
    run_refused(tmp_path, capsys, *needles, top=top)


@pytest.mark.parametrize("line,needles", [
    ("n = 2.5", ("design 'simple'", "n", "whole number", "2.5")),
    ('n = "six"', ("design 'simple'", "n", "whole number", "'six'")),
    ('replace = "yes"', ("design 'simple'", "replace", "true or false", "'yes'")),
    ("estimators = 3", ("design 'simple'", "estimators", "3")),
    ("estimators = [{ a = 1 }]", ("design 'simple'", "estimator", "{'a': 1}")),
    ("label = 7", ("label", "text", "7")),
])
def test_wrong_type_design(tmp_path, capsys, line, needles):
    design = SRS.replace('label = "simple"\n', "") if line.startswith("label") else SRS
    design = design.replace("n = 6\n", "") if line.startswith("n =") else design
    design = design.replace('method = "srs"', 'method = "srs"\n' + line) if line.startswith("label") else design + line
    run_refused(tmp_path, capsys, *needles, design=design)


def test_wrong_type_cluster_keys(tmp_path, capsys):
    design = '[[design]]\nlabel = "batches"\nmethod = "cluster"\nclusters = 2\nunits_per_cluster = "all"\n'
    run_refused(tmp_path, capsys, "design 'batches'", "units_per_cluster", "whole number", "'all'", design=design)


def test_wrong_type_frame_role(tmp_path, capsys):
    run_refused(tmp_path, capsys, "[frame]", "unit_cost", "text", "3", frame_extra="unit_cost = 3")


def test_wrong_type_cost(tmp_path, capsys):
    run_refused(tmp_path, capsys, "[cost]", "per_unit", "number", "'cheap'",
                design=SRS + '\n[cost]\nper_unit = "cheap"\n')


def test_frame_not_a_table(tmp_path, capsys):
    p = tmp_path / "s.toml"
    p.write_text('frame = "claims.csv"\n' + SRS)
    refuse(["run", p, "--out", tmp_path / "out"], capsys, "[frame]", "table", "str")


def test_design_not_a_list_of_tables(tmp_path, capsys):
    p = tmp_path / "s.toml"
    p.write_text('design = ["srs"]\n' + FRAME.format(frame_extra=""))
    (tmp_path / "claims.csv").write_text(claims_frame().to_csv(index=False))
    refuse(["run", p, "--out", tmp_path / "out"], capsys, "[[design]] #1", "table")


def test_synthetic_wrong_type(tmp_path, capsys):
    p = tmp_path / "s.toml"
    p.write_text('[frame.synthetic]\nunits = "lots"\n' + SRS)
    refuse(["run", p, "--out", tmp_path / "out"], capsys, "[frame.synthetic]", "units", "whole number", "'lots'")


# ------------------------------------------------------------------ missing required keys
def test_missing_frame_table(tmp_path, capsys):
    p = tmp_path / "s.toml"
    p.write_text(SRS)
    refuse(["run", p, "--out", tmp_path / "out"], capsys, "[frame]", "missing")


def test_missing_designs(tmp_path, capsys):
    run_refused(tmp_path, capsys, "[[design]]", "missing", design="")


def test_missing_method(tmp_path, capsys):
    run_refused(tmp_path, capsys, "[[design]] #1", "missing required key 'method'",
                design='[[design]]\nlabel = "x"\nn = 5\n')


def test_missing_sample_size(tmp_path, capsys):
    run_refused(tmp_path, capsys, "design 'simple'", "missing required key 'n'",
                design='[[design]]\nlabel = "simple"\nmethod = "srs"\n')


def test_missing_target(tmp_path, capsys):
    p = tmp_path / "s.toml"
    p.write_text('[frame]\npath = "claims.csv"\n' + SRS)
    refuse(["run", p, "--out", tmp_path / "out"], capsys, "[frame]", "missing required key 'target'")


def test_missing_synthetic_units(tmp_path, capsys):
    p = tmp_path / "s.toml"
    p.write_text("[frame.synthetic]\nseed = 3\n" + SRS)
    refuse(["run", p, "--out", tmp_path / "out"], capsys, "[frame.synthetic]", "'units'")


def test_duplicate_design_labels(tmp_path, capsys):
    run_refused(tmp_path, capsys, "'simple'", "used twice", design=SRS + "\n" + SRS)


# ------------------------------------------------------------------ frame file
def test_frame_file_missing(tmp_path, capsys):
    sc = setup(tmp_path)
    (tmp_path / "claims.csv").unlink()
    refuse(["run", sc, "--out", tmp_path / "out"], capsys, "claims.csv", "does not exist")


def test_frame_file_empty(tmp_path, capsys):
    run_refused(tmp_path, capsys, "claims.csv", "is empty", raw_frame="")


def test_frame_file_header_only(tmp_path, capsys):
    run_refused(tmp_path, capsys, "claims.csv", "no rows", raw_frame="claim_id,office,batch,amount\n")


def test_frame_file_is_a_folder(tmp_path, capsys):
    sc = setup(tmp_path)
    (tmp_path / "claims.csv").unlink()
    (tmp_path / "claims.csv").mkdir()
    refuse(["run", sc, "--out", tmp_path / "out"], capsys, "claims.csv", "directory")


def test_frame_file_unknown_format(tmp_path, capsys):
    sc = setup(tmp_path)
    sc.write_text(sc.read_text().replace("claims.csv", "claims.ods"))
    (tmp_path / "claims.ods").write_text("x")
    refuse(["run", sc, "--out", tmp_path / "out"], capsys, "claims.ods", "unknown format", ".xlsx or .parquet")


@pytest.mark.skipif(AS_ROOT or os.name != "posix", reason="file permissions do not bind root")
def test_frame_file_unreadable_permissions(tmp_path, capsys):
    sc = setup(tmp_path)
    (tmp_path / "claims.csv").chmod(0)
    try:
        refuse(["run", sc, "--out", tmp_path / "out"], capsys, "claims.csv", "could not be read")
    finally:
        (tmp_path / "claims.csv").chmod(0o644)


def test_frame_file_unreadable(tmp_path, capsys, monkeypatch):
    # the same path as a permission failure, forced (root bypasses file permissions)
    def denied(*a, **k):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(pd, "read_csv", denied)
    run_refused(tmp_path, capsys, "claims.csv", "could not be read", "Permission denied")


def test_frame_file_corrupt_parquet(tmp_path, capsys):
    sc = setup(tmp_path)
    sc.write_text(sc.read_text().replace("claims.csv", "claims.parquet"))
    (tmp_path / "claims.parquet").write_bytes(b"not a parquet file at all")
    refuse(["run", sc, "--out", tmp_path / "out"], capsys, "claims.parquet", "could not be read")


# ------------------------------------------------------------------ frame columns
def test_role_column_missing_closest(tmp_path, capsys):
    sc = setup(tmp_path)
    sc.write_text(sc.read_text().replace('stratum = "office"', 'stratum = "ofice"'))
    refuse(["run", sc, "--out", tmp_path / "out"], capsys, "claims.csv", "stratum column 'ofice'",
           "did you mean 'office'")


def test_target_column_missing_closest(tmp_path, capsys):
    sc = setup(tmp_path)
    sc.write_text(sc.read_text().replace('target = "amount"', 'target = "amont"'))
    refuse(["run", sc, "--out", tmp_path / "out"], capsys, "target column 'amont'", "did you mean 'amount'")


def test_target_non_numeric_count_and_rows(tmp_path, capsys):
    df = claims_frame().astype({"amount": object})
    df.loc[[3, 10], "amount"] = ["unknown", "12,50"]
    msg = run_refused(tmp_path, capsys, "claims.csv", "'amount'", "2 non-numeric", "'unknown'", df=df)
    assert "5, 12" in msg  # spreadsheet rows: header is row 1


def test_target_blank_refused(tmp_path, capsys):
    df = claims_frame()
    df.loc[[0, 7, 8], "amount"] = np.nan
    msg = run_refused(tmp_path, capsys, "'amount'", "3 missing or non-finite", 'missing = "drop"', df=df)
    assert "2, 9, 10" in msg


def test_target_infinite_refused(tmp_path, capsys):
    df = claims_frame()
    df.loc[4, "amount"] = np.inf
    run_refused(tmp_path, capsys, "'amount'", "1 missing or non-finite", "row(s) 6", df=df)


@pytest.mark.slow
def test_missing_drop_drops_and_reports(tmp_path, capsys):
    df = claims_frame().astype({"amount": object})
    df.loc[[0, 5], "amount"] = [np.nan, "pending"]
    info, err = run_ok(tmp_path, capsys, df=df, frame_extra='missing = "drop"')
    assert info["frame"]["units"] == 22
    assert any("2 frame rows" in w for w in info["warnings"])
    assert err.count("2 frame rows") == 1


def test_missing_value_not_accepted(tmp_path, capsys):
    run_refused(tmp_path, capsys, "[frame]", "missing = 'skip'", "'refuse' or 'drop'", frame_extra='missing = "skip"')


def test_rows_after_drop_are_file_rows(tmp_path, capsys):
    # a blank stratum label after dropped rows is reported at its row in the file
    df = claims_frame()
    df.loc[[0, 1], "amount"] = np.nan
    df.loc[6, "office"] = np.nan
    run_refused(tmp_path, capsys, "stratum column 'office'", "blank", "row(s) 8", df=df, frame_extra='missing = "drop"')


def test_blank_cluster_label(tmp_path, capsys):
    df = claims_frame()
    df.loc[13, "batch"] = np.nan
    run_refused(tmp_path, capsys, "cluster column 'batch'", "blank", "row(s) 15", df=df)


def test_duplicate_ids(tmp_path, capsys):
    df = claims_frame()
    df.loc[9, "claim_id"] = "C002"
    run_refused(tmp_path, capsys, "id column 'claim_id'", "2 rows", "'C002'", "3, 11", df=df)


def test_cluster_in_two_strata(tmp_path, capsys):
    df = claims_frame()
    df.loc[8, "batch"] = "north-0"  # a south claim in a north batch
    run_refused(tmp_path, capsys, "cluster 'north-0'", "'batch'", "more than one stratum", "north, south", df=df)


def test_negative_unit_cost_column(tmp_path, capsys):
    df = claims_frame()
    df.loc[2, "handling"] = -1.0
    run_refused(tmp_path, capsys, "unit_cost column 'handling'", "negative", "row(s) 4", df=df,
                frame_extra='unit_cost = "handling"')


def test_negative_cost_table(tmp_path, capsys):
    run_refused(tmp_path, capsys, "[cost]", "per_unit", "at least 0", "-2", design=SRS + "\n[cost]\nper_unit = -2.0\n")


def test_size_column_non_numeric(tmp_path, capsys):
    df = claims_frame().astype({"pages": object})
    df.loc[1, "pages"] = "many"
    run_refused(tmp_path, capsys, "size column 'pages'", "non-numeric", "'many'", df=df, frame_extra='size = "pages"')


def test_mixed_type_labels_do_not_crash():
    # labels of mixed Python types (a DataFrame built in code) are compared as text
    df = pd.DataFrame({"y": [1.0, 2.0, 3.0, 4.0], "s": ["a", 1, "a", 1], "c": [1, "x", 1, "x"]})
    f = Frame.from_dataframe(df, target="y", stratum="s", cluster="c")
    assert f.H == 2 and f.C == 2


# ------------------------------------------------------------------ design against frame
def test_n_zero_refused(tmp_path, capsys):
    run_refused(tmp_path, capsys, "design 'simple'", "n", "at least 1", "0", design=SRS.replace("n = 6", "n = 0"))


def test_n_negative_in_sweep_refused(tmp_path, capsys):
    run_refused(tmp_path, capsys, "design 'simple'", "n", "at least 1", "-3",
                design=SRS.replace("n = 6", "n = [4, -3]"))


def test_absurd_sample_size_refused_before_allocating(tmp_path, capsys):
    run_refused(tmp_path, capsys, "design 'simple'", "n", "at most 10000000", "9223372036854775807",
                design=SRS.replace("n = 6", "n = 9223372036854775807\nreplace = true"))


def test_absurd_synthetic_frame_refused(tmp_path, capsys):
    p = tmp_path / "s.toml"
    p.write_text("[frame.synthetic]\nunits = 2147483648\n" + SRS)
    refuse(["run", p, "--out", tmp_path / "out"], capsys, "[frame.synthetic]", "units", "at most 50000000")


def test_n_above_population_without_replacement(tmp_path, capsys):
    run_refused(tmp_path, capsys, "design 'simple'", "n = 30", "24 units", "replace = true",
                design=SRS.replace("n = 6", "n = 30"))


@pytest.mark.slow
def test_n_above_population_with_replacement_runs(tmp_path, capsys):
    info, _ = run_ok(tmp_path, capsys, design=SRS.replace("n = 6", "n = 30\nreplace = true"))
    assert info["frame"]["units"] == 24


def test_systematic_n_above_population(tmp_path, capsys):
    run_refused(tmp_path, capsys, "design 'every k'", "n = 25", "24 units",
                design='[[design]]\nlabel = "every k"\nmethod = "systematic"\nn = 25\n')


def test_stratified_n_below_twice_strata(tmp_path, capsys):
    design = '[[design]]\nlabel = "by office"\nmethod = "stratified"\nn = 5\n'
    run_refused(tmp_path, capsys, "design 'by office'", "n = 5", "3 strata", "n >= 6", design=design)


def test_stratified_n_above_population(tmp_path, capsys):
    design = '[[design]]\nlabel = "by office"\nmethod = "stratified"\nn = 25\n'
    run_refused(tmp_path, capsys, "design 'by office'", "n = 25", "24 units", design=design)


def test_stratified_unknown_allocation(tmp_path, capsys):
    design = '[[design]]\nlabel = "by office"\nmethod = "stratified"\nn = 8\nallocation = "neymann"\n'
    run_refused(tmp_path, capsys, "design 'by office'", "allocation 'neymann'", "neyman", design=design)


def test_stratified_without_stratum_column(tmp_path, capsys):
    sc = setup(tmp_path, design='[[design]]\nlabel = "by office"\nmethod = "stratified"\nn = 8\n')
    sc.write_text(sc.read_text().replace('stratum = "office"\n', "").replace('cluster = "batch"\n', ""))
    refuse(["run", sc, "--out", tmp_path / "out"], capsys, "design 'by office'", "needs a stratum column")


def test_stratum_with_one_unit_refused(tmp_path, capsys):
    df = claims_frame()
    df.loc[23, ["office", "batch"]] = ["east", "east-0"]  # east has one claim
    design = '[[design]]\nlabel = "by office"\nmethod = "stratified"\nn = 8\n'
    run_refused(tmp_path, capsys, "design 'by office'", "stratum 'east'", "one unit", df=df, design=design)


def test_allocation_a_stratum_cannot_hold(monkeypatch):
    # a rule (now or added later) that gives a stratum more units than it has is refused by name
    from samplewright.designs import stratified as mod

    f = Frame.from_dataframe(claims_frame(), target="amount", stratum="office")
    monkeypatch.setattr(mod, "allocate", lambda n, *a, **k: np.array([2, 9, 1]))
    with pytest.raises(InputError, match=r"design 'by office'.*stratum 'south'.*9 units.*only 8"):
        mod.Stratified("by office", n=12).check(f)


def test_clusters_more_than_available(tmp_path, capsys):
    design = '[[design]]\nlabel = "batches"\nmethod = "cluster"\nclusters = 7\n'
    run_refused(tmp_path, capsys, "design 'batches'", "clusters = 7", "6 clusters", design=design)


def test_cluster_design_without_cluster_column(tmp_path, capsys):
    sc = setup(tmp_path, design='[[design]]\nlabel = "batches"\nmethod = "cluster"\nclusters = 2\n')
    sc.write_text(sc.read_text().replace('cluster = "batch"\n', ""))
    refuse(["run", sc, "--out", tmp_path / "out"], capsys, "design 'batches'", "needs a cluster column")


def test_units_per_cluster_larger_than_cluster_refused(tmp_path, capsys):
    design = '[[design]]\nlabel = "batches"\nmethod = "cluster"\nclusters = 2\nunits_per_cluster = 5\n'
    run_refused(tmp_path, capsys, "design 'batches'", "units_per_cluster = 5", "4 units", "cap_units = true",
                design=design)


@pytest.mark.slow
def test_units_per_cluster_capped_runs(tmp_path, capsys):
    design = ('[[design]]\nlabel = "batches"\nmethod = "cluster"\nclusters = 2\nunits_per_cluster = 5\n'
              "cap_units = true\n")
    info, _ = run_ok(tmp_path, capsys, design=design)
    assert info["designs"][0]["label"] == "batches"


@pytest.mark.slow
def test_huge_units_per_cluster_capped_runs(tmp_path, capsys):
    # a cap far above every cluster must not allocate arrays of that size
    design = ('[[design]]\nlabel = "batches"\nmethod = "cluster"\nclusters = 2\n'
              "units_per_cluster = 9223372036854775807\ncap_units = true\n")
    run_ok(tmp_path, capsys, design=design)


def _size_based_methods() -> list[str]:
    """Registered methods that refuse a frame without a size column (found by asking each one)."""
    from samplewright.designs import DESIGN_CLASSES

    f = Frame.from_dataframe(claims_frame(), target="amount")
    out = []
    for m, cls in DESIGN_CLASSES.items():
        try:
            cls("probe", **{cls.size_key: 4}, **({"replace": True} if m == "pps" else {})).check(f)
        except InputError as exc:
            if "size" in str(exc):
                out.append(m)
    return out


SIZE_METHODS = _size_based_methods()


def sized_design(method: str) -> str:
    """A [[design]] table of ``method`` at n = 4 (``pps`` is the with-replacement method)."""
    extra = "replace = true\n" if method == "pps" else ""
    return f'[[design]]\nlabel = "sized"\nmethod = "{method}"\nn = 4\n{extra}'


def test_size_based_designs_exist():
    assert {"pps", "pps_systematic", "sampford", "pareto"} <= set(SIZE_METHODS)


@pytest.mark.parametrize("method", SIZE_METHODS)
def test_size_design_without_size_column(tmp_path, capsys, method):
    design = sized_design(method)
    run_refused(tmp_path, capsys, "design 'sized'", "size", design=design)


@pytest.mark.parametrize("method", SIZE_METHODS)
@pytest.mark.parametrize("bad", [0, -3])
def test_size_design_non_positive_size(tmp_path, capsys, method, bad):
    df = claims_frame()
    df.loc[[4, 17], "pages"] = bad
    design = sized_design(method)
    run_refused(tmp_path, capsys, "design 'sized'", "size column 'pages'", "above 0", "2 value(s)",
                f"first {bad} at row(s) 6, 19", df=df, design=design, frame_extra='size = "pages"')


@pytest.mark.parametrize("method", SIZE_METHODS[:1])
def test_size_rows_after_dropped_rows(tmp_path, capsys, method):
    df = claims_frame()
    df.loc[0, "amount"] = np.nan
    df.loc[5, "pages"] = 0
    design = sized_design(method)
    run_refused(tmp_path, capsys, "size column 'pages'", "unit(s) 5 (counted after the 1 dropped rows)",
                df=df, design=design, frame_extra='size = "pages"\nmissing = "drop"')


@pytest.mark.slow
def test_size_design_positive_size_runs(tmp_path, capsys):
    design = sized_design(SIZE_METHODS[0])
    run_ok(tmp_path, capsys, design=design, frame_extra='size = "pages"')


# ------------------------------------------------------------------ run settings
def test_replicates_zero_in_scenario(tmp_path, capsys):
    sc = setup(tmp_path)
    sc.write_text(sc.read_text().replace("replicates = 600", "replicates = 0"))
    refuse(["run", sc, "--out", tmp_path / "out"], capsys, "replicates", "at least 1", "got 0")


@pytest.mark.parametrize("opt,value,needles", [
    ("--replicates", "0", ("--replicates", "at least 1", "'0'")),
    ("--replicates", "-5", ("--replicates", "at least 1", "'-5'")),
    ("--replicates", "ten", ("--replicates", "whole number", "'ten'")),
    ("--jobs", "0", ("--jobs", "at least 1", "'0'")),
    ("--seed", "-1", ("--seed", "at least 0", "'-1'")),
])
def test_numeric_options(tmp_path, capsys, opt, value, needles):
    sc = setup(tmp_path)
    refuse(["run", sc, "--out", tmp_path / "out", opt, value], capsys, *needles)
    assert not (tmp_path / "out").exists()


def test_unknown_option(tmp_path, capsys):
    sc = setup(tmp_path)
    refuse(["run", sc, "--out", tmp_path / "out", "--replicas-per-design", "5"], capsys, "--replicas-per-design")


@pytest.mark.parametrize("value", ["0", "1", "1.5", "-0.2", "0.0"])
def test_confidence_outside_unit_interval(tmp_path, capsys, value):
    run_refused(tmp_path, capsys, "confidence", "strictly between 0", value, top=f"confidence = {value}")


def test_confidence_nan(tmp_path, capsys):
    run_refused(tmp_path, capsys, "confidence", "finite", top="confidence = nan")


def test_block_size_zero(tmp_path, capsys):
    run_refused(tmp_path, capsys, "block_size", "at least 1", top="block_size = 0")


# ------------------------------------------------------------------ output folder
@pytest.mark.slow
def test_output_not_empty_refused_and_unchanged(tmp_path, capsys):
    sc = setup(tmp_path)
    out = tmp_path / "out"
    code, _, err = cli(["run", sc, "--out", out, "--quiet", "--replicates", "50"], capsys)
    assert code == 0, err
    before = folder_digest(out)
    refuse(["run", sc, "--out", out, "--quiet", "--replicates", "60"], capsys, str(out), "not empty", "--force")
    assert folder_digest(out) == before
    code, _, err = cli(["run", sc, "--out", out, "--quiet", "--replicates", "60", "--force"], capsys)
    assert code == 0, err
    assert json.loads((out / "run.json").read_text())["replicates"] == 60


def test_output_is_a_file(tmp_path, capsys):
    sc = setup(tmp_path)
    (tmp_path / "out").write_text("mine")
    refuse(["run", sc, "--out", tmp_path / "out"], capsys, "out", "not a folder")
    refuse(["run", sc, "--out", tmp_path / "out", "--force"], capsys, "out", "not a folder")
    assert (tmp_path / "out").read_text() == "mine"


def test_output_inside_a_file(tmp_path, capsys):
    sc = setup(tmp_path)
    (tmp_path / "notes.txt").write_text("mine")
    refuse(["run", sc, "--out", tmp_path / "notes.txt" / "out"], capsys, "notes.txt", "cannot be created")


def test_output_unwritable(tmp_path, capsys, monkeypatch):
    sc = setup(tmp_path)

    def denied(self, *a, **k):
        raise PermissionError(13, "Permission denied", str(self))

    monkeypatch.setattr(Path, "mkdir", denied)
    refuse(["run", sc, "--out", tmp_path / "locked" / "out"], capsys, "locked", "cannot be created",
           "Permission denied")


@pytest.mark.skipif(AS_ROOT or os.name != "posix", reason="file permissions do not bind root")
def test_output_unwritable_permissions(tmp_path, capsys):
    sc = setup(tmp_path)
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o500)
    try:
        refuse(["run", sc, "--out", locked / "out"], capsys, "locked")
    finally:
        locked.chmod(0o700)


def test_output_filesystem_root_refused(tmp_path, capsys):
    sc = setup(tmp_path)
    refuse(["run", sc, "--out", Path(tmp_path.anchor), "--force"], capsys, "unsafe", "root")


def test_output_would_overwrite_the_frame(tmp_path, capsys):
    # a frame file that carries a results-file name is never overwritten, even with --force
    sc = setup(tmp_path)
    data = tmp_path / "data"
    data.mkdir()
    (tmp_path / "claims.csv").rename(data / "summary.csv")
    sc.write_text(sc.read_text().replace('path = "claims.csv"', 'path = "data/summary.csv"'))
    before = folder_digest(data)
    refuse(["run", sc, "--out", data, "--force"], capsys, "summary.csv", "frame")
    assert folder_digest(data) == before


def test_synth_refuses_existing_file(tmp_path, capsys):
    p = tmp_path / "s.toml"
    p.write_text("[frame.synthetic]\nunits = 50\n" + SRS)
    (tmp_path / "frame.csv").write_text("mine")
    refuse(["synth", p, "--out", tmp_path / "frame.csv"], capsys, "frame.csv", "exists", "--force")
    assert (tmp_path / "frame.csv").read_text() == "mine"


def test_synth_into_unwritable_folder(tmp_path, capsys, monkeypatch):
    from samplewright import files

    p = tmp_path / "s.toml"
    p.write_text("[frame.synthetic]\nunits = 50\n" + SRS)

    def denied(*a, **k):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(files, "_new_temp", denied)  # creating the temporary file is refused
    refuse(["synth", p, "--out", tmp_path / "frame.csv"], capsys, "frame.csv", "cannot be written")


# ------------------------------------------------------------------ nothing lost
def test_interrupted_write_leaves_no_partial_file(tmp_path, monkeypatch):
    from samplewright import files

    df = pd.DataFrame({"a": np.arange(1000)})

    def half_then_fail(self, path, *a, **k):
        Path(path).write_text("a\n0\n1\n")  # part of the file, then the failure
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(pd.DataFrame, "to_csv", half_then_fail)
    with pytest.raises(InputError, match="summary.csv.*cannot be written: No space left"):
        files.write_csv(df, tmp_path / "summary.csv")
    assert list(tmp_path.iterdir()) == []


def test_interrupted_write_keeps_previous_file(tmp_path, monkeypatch):
    from samplewright import files

    (tmp_path / "summary.csv").write_text("old complete file\n")

    def interrupted(self, path, *a, **k):
        Path(path).write_text("partial")
        raise KeyboardInterrupt

    monkeypatch.setattr(pd.DataFrame, "to_csv", interrupted)
    with pytest.raises(KeyboardInterrupt):
        files.write_csv(pd.DataFrame({"a": [1]}), tmp_path / "summary.csv")
    assert [p.name for p in tmp_path.iterdir()] == ["summary.csv"]
    assert (tmp_path / "summary.csv").read_text() == "old complete file\n"


@pytest.mark.slow
def test_interrupted_run_leaves_no_partial_results(tmp_path, capsys, monkeypatch):
    # the run's writer fails on its second file: no temporary file remains and no run.json
    # (whose presence marks a complete set) is written, nor an old one kept beside new files
    sc = setup(tmp_path)
    out = tmp_path / "out"
    code, _, err = cli(["run", sc, "--out", out, "--quiet", "--replicates", "40"], capsys)
    assert code == 0, err
    calls = {"n": 0}
    real = pd.DataFrame.to_csv

    def fail_second(self, path, *a, **k):
        calls["n"] += 1
        if calls["n"] == 1:
            Path(path).write_text("half")
            raise KeyboardInterrupt
        return real(self, path, *a, **k)

    monkeypatch.setattr(pd.DataFrame, "to_csv", fail_second)
    code, _, err = cli(["run", sc, "--out", out, "--quiet", "--replicates", "50", "--force"], capsys)
    assert code == 130
    assert "Traceback" not in err
    names = sorted(p.name for p in out.iterdir())
    assert not [n for n in names if n.endswith(".tmp")], names
    assert "run.json" not in names, names


@pytest.mark.slow
def test_every_output_file_is_renamed_into_place(tmp_path, capsys, monkeypatch):
    # every file a run leaves in --out arrived by a rename from a temporary name (atomic_write)
    renamed = set()
    real = os.replace

    def spy(src, dst, *a, **k):
        renamed.add(Path(dst).resolve())
        return real(src, dst, *a, **k)

    monkeypatch.setattr(os, "replace", spy)
    sc = setup(tmp_path)
    out = tmp_path / "out"
    code, _, err = cli(["run", sc, "--out", out, "--quiet", "--replicates", "40"], capsys)
    assert code == 0, err
    files = {f.resolve() for f in out.rglob("*") if f.is_file()}
    assert {"run.json", "summary.csv", "replicates.parquet"} <= {f.name for f in files}
    assert files <= renamed, sorted(str(f) for f in files - renamed)
    assert not [f for f in files if f.name.endswith(".tmp")]


# ------------------------------------------------------------------ warnings (not errors)
def _stderr_warnings(err: str) -> list[str]:
    return [ln for ln in err.splitlines() if ln.startswith("warning: ")]


@pytest.mark.slow
def test_warning_tiny_stratum(tmp_path, capsys):
    df = claims_frame()
    df.loc[21:23, ["office", "batch"]] = ["east", "east-0"]  # east has three claims
    info, err = run_ok(tmp_path, capsys, df=df)
    assert any("tiny strata" in w and "east" in w for w in info["warnings"])
    assert sum("tiny strata" in w for w in _stderr_warnings(err)) == 1


@pytest.mark.slow
def test_warning_large_sampling_fraction(tmp_path, capsys):
    info, err = run_ok(tmp_path, capsys, design=SRS.replace("n = 6", "n = 20"))
    assert any("samples 83% of the frame" in w for w in info["warnings"])
    assert sum("% of the frame" in w for w in _stderr_warnings(err)) == 1


@pytest.mark.slow
def test_warning_few_replicates(tmp_path, capsys):
    info, err = run_ok(tmp_path, capsys, extra=("--replicates", "100"))
    # MCSE of a 95% coverage from 100 replicates: sqrt(0.95 * 0.05 / 100) = 0.0218 (Morris et al. 2019, Table 6)
    assert any("only 100 replicates" in w and "0.022" in w for w in info["warnings"])
    assert sum("only 100 replicates" in w for w in _stderr_warnings(err)) == 1


@pytest.mark.slow
def test_no_warning_when_nothing_to_say(tmp_path, capsys):
    df = pd.DataFrame({"claim_id": [f"C{i}" for i in range(400)], "office": "north", "batch": "b",
                       "amount": np.tile([10.0, 11.0, 12.0, 13.0], 100), "pages": 1, "handling": 1.0})
    sc = setup(tmp_path, df=df, design=SRS.replace("n = 6", "n = 40"))
    sc.write_text(sc.read_text().replace("replicates = 600", "replicates = 500"))
    code, _, err = cli(["run", sc, "--out", tmp_path / "out", "--quiet"], capsys)
    assert code == 0, err
    assert _stderr_warnings(err) == []
    assert json.loads((tmp_path / "out" / "run.json").read_text())["warnings"] == []


def test_cochran_skewness_rule():
    # Cochran (1977), Sampling Techniques, sec. 2.15: the normal approximation for the mean
    # needs n > 25 G1^2, G1 the population skewness (Fisher's coefficient; scipy.stats.skew
    # with bias=False is the reference computation).
    from samplewright.designs import SRS as SRSDesign
    from samplewright.diagnostics.checks import design_warnings
    from samplewright.simulation.engine import make_cells

    y = np.concatenate([np.ones(180), np.full(20, 30.0)])
    f = Frame.from_dataframe(pd.DataFrame({"y": y}), target="y")
    g1 = stats.skew(y, bias=False)
    threshold = 25 * g1**2
    assert 150 < threshold < 200  # G1 = 2.69 here, so the bound sits between the two sizes tried
    below = int(np.floor(threshold)) - 1
    above = int(np.ceil(threshold)) + 1
    for n, expect in ((below, True), (above, False)):
        cells = make_cells([SRSDesign("simple", n=n)], [("ht",)])
        notes = design_warnings(f, cells, 1000)
        assert any("Cochran" in w for w in notes) is expect, (n, notes)


@pytest.mark.slow
def test_duplicate_warnings_printed_once(tmp_path, capsys, monkeypatch):
    from samplewright import api

    monkeypatch.setattr(api, "frame_warnings", lambda frame: ["the same thing"])
    monkeypatch.setattr(api, "design_warnings", lambda frame, cells, R: ["the same thing", "another"])
    info, err = run_ok(tmp_path, capsys)
    assert info["warnings"] == ["the same thing", "another"]
    assert _stderr_warnings(err) == ["warning: the same thing", "warning: another"]


@pytest.mark.slow
def test_warnings_go_to_stderr_not_errors(tmp_path, capsys):
    sc = setup(tmp_path)
    code, out, err = cli(["run", sc, "--out", tmp_path / "out", "--replicates", "50"], capsys)
    assert code == 0
    assert "warning:" not in out
    assert "error:" not in err


def test_error_messages_one_line_for_api_users():
    # the Python API raises the same InputError the CLI prints
    from samplewright.simulation.scenario import scenario_from_dict

    with pytest.raises(InputError, match="unknown key 'replicats'"):
        scenario_from_dict({"replicats": 3, "frame": {"synthetic": {"units": 30}},
                            "design": [{"label": "a", "method": "srs", "n": 3}]})
