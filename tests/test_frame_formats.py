"""Frame files as offices send them: CSV dialects and encodings, spreadsheets, Parquet.

Every file is written by the test from an exact small frame; the expected values are that frame's
own numbers and labels, so each check compares against the frame the file was made from.
"""

from __future__ import annotations

import shlex
import subprocess
import sys
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from samplewright.cli.main import main
from samplewright.errors import InputError
from samplewright.files import write_csv
from samplewright.population import reading
from samplewright.population.reading import read_table

openpyxl = pytest.importorskip("openpyxl")

#: the exact frame every format below is written from (amounts with two decimals, some over 1,000)
IDS = list(range(1, 25))
REGIONS = ["Köln", "Nord", "Süd"] * 8
AMOUNTS = [round(50.25 + 97.5 * i + (i % 5) * 13.37, 2) for i in range(24)]


def frame_df() -> pd.DataFrame:
    return pd.DataFrame({"id": IDS, "region": REGIONS, "amount": AMOUNTS})


def european(v: float) -> str:
    """1234.5 -> '1.234,50' (thousands '.', decimal ',')."""
    return f"{v:,.2f}".replace(",", "_").replace(".", ",").replace("_", ".")


def write_rows(path: Path, rows, sep: str, encoding: str = "utf-8", newline: str = "\n", tail: str = "") -> Path:
    text = newline.join(sep.join(str(c) for c in r) for r in rows) + newline + tail
    path.write_bytes(text.encode(encoding))
    return path


def rows_of(df: pd.DataFrame, fmt=str):
    return [list(df.columns)] + [[r.id, r.region, fmt(r.amount)] for r in df.itertuples()]


def write_xlsx(path: Path, rows, title: str = "Frame") -> Path:
    book = openpyxl.Workbook()
    ws = book.active
    ws.title = title
    for r in rows:
        ws.append(r)
    book.save(path)
    return path


def expect_frame(df: pd.DataFrame) -> None:
    """``df`` holds exactly the frame the file was written from."""
    assert list(df.columns) == ["id", "region", "amount"]
    assert df["id"].tolist() == IDS
    assert df["region"].tolist() == REGIONS
    assert df["amount"].dtype == np.float64 and df["amount"].tolist() == AMOUNTS


# ------------------------------------------------------------------ dialects and encodings
DIALECTS = {
    "comma": {"sep": ",", "fmt": repr},
    "semicolon_decimal_comma": {"sep": ";", "fmt": european},
    "semicolon_quoted": {"sep": ";", "fmt": lambda v: '"' + european(v) + '"'},
    "tab": {"sep": "\t", "fmt": repr},
    "pipe": {"sep": "|", "fmt": repr},
    "comma_quoted_thousands": {"sep": ",", "fmt": lambda v: f'"{v:,.2f}"'},
    "crlf_trailing_blank_lines": {"sep": ";", "fmt": european, "newline": "\r\n", "tail": "\r\n\r\n"},
}


@pytest.mark.parametrize("name", sorted(DIALECTS))
def test_dialect_detected(tmp_path, name):
    d = DIALECTS[name]
    p = write_rows(tmp_path / "f.csv", rows_of(frame_df(), d["fmt"]), d["sep"], newline=d.get("newline", "\n"),
                   tail=d.get("tail", ""))
    expect_frame(read_table(p))


@pytest.mark.parametrize("encoding", ["utf-8", "utf-8-sig", "utf-16", "cp1252"])
def test_encoding_detected_and_stated(tmp_path, encoding):
    p = write_rows(tmp_path / "f.csv", rows_of(frame_df(), european), ";", encoding=encoding)
    expect_frame(read_table(p))  # "Köln" and "Süd" come back whole
    expect_frame(read_table(p, encoding=encoding))


def test_stated_keys_settle_what_detection_cannot(tmp_path):
    # "1,234" alone could be 1234 or 1.234: stated as decimal comma it is 1.234
    p = write_rows(tmp_path / "f.csv", [["y", "g"], ["1,234", "a"], ["2,5", "b"]], ";")
    assert read_table(p, decimal=",")["y"].tolist() == [1.234, 2.5]
    p = write_rows(tmp_path / "g.csv", [["y", "g"], ["1 234,5", "a"], ["2,5", "b"]], ";")
    assert read_table(p, decimal=",", thousands=" ")["y"].tolist() == [1234.5, 2.5]


def test_bad_grouping_is_not_read_as_thousands(tmp_path):
    # "1.5" in a decimal-comma file is neither a number there nor a thousands group: it stays text
    p = write_rows(tmp_path / "f.csv", [["y", "g"], ["1.234,5", "a"], ["1.5", "b"]], ";")
    assert read_table(p)["y"].tolist() == ["1.234,5", "1.5"]


def test_percent_only_when_stated(tmp_path, capsys):
    p = write_rows(tmp_path / "f.csv", [["y", "rate"], ["1", "12%"], ["2", "5,5%"]], ";")
    assert read_table(p, percent=True)["rate"].tolist() == [0.12, 0.055]
    assert read_table(p)["rate"].tolist() == ["12%", "5,5%"]
    sc = scenario(tmp_path, "f.csv", 'target = "rate"')
    refused(["run", sc, "--out", tmp_path / "out"], capsys, "'rate'", "non-numeric", "row(s) 2")


def test_semicolon_file_read_with_comma_names_the_semicolon(tmp_path, capsys):
    write_rows(tmp_path / "f.csv", rows_of(frame_df(), european), ";")
    sc = scenario(tmp_path, "f.csv", 'target = "amount"\nseparator = ","')
    line = refused(["run", sc, "--out", tmp_path / "out"], capsys, "one column", "';'", "semicolon")
    assert "Köln" not in line  # the file's content is not echoed


# ------------------------------------------------------------------ spreadsheets
def test_xlsx_sheet_by_name_and_index_and_header_row(tmp_path):
    book = openpyxl.Workbook()
    book.active.title = "notes"
    ws = book.create_sheet("Frame")
    ws.append(["exported 2026-01-01"])
    for r in rows_of(frame_df(), float):
        ws.append(r)
    book.save(tmp_path / "f.xlsx")
    expect_frame(read_table(tmp_path / "f.xlsx", sheet="Frame", header_row=2))
    expect_frame(read_table(tmp_path / "f.xlsx", sheet=1, header_row=2))
    with pytest.raises(InputError, match="no sheet named 'Fram'"):
        read_table(tmp_path / "f.xlsx", sheet="Fram")


def test_xlsx_formula_cell_reads_its_cached_value(tmp_path):
    p = write_xlsx(tmp_path / "f.xlsx", [["y", "double"], [2.5, "=A2*2"], [4.0, "=A3*2"]])
    # openpyxl saves formulas without a value; store the value a spreadsheet would have saved
    with zipfile.ZipFile(p) as z:
        parts = {n: z.read(n) for n in z.namelist()}
    sheet = parts["xl/worksheets/sheet1.xml"].decode()
    for cell, value in (("B2", "5"), ("B3", "8")):
        start = sheet.index(f'<c r="{cell}"')
        end = sheet.index("</c>", start)
        formula = sheet[sheet.index("<f>", start):sheet.index("</f>", start) + 4]
        sheet = sheet[:start] + f'<c r="{cell}">{formula}<v>{value}</v>' + sheet[end:]
    parts["xl/worksheets/sheet1.xml"] = sheet.encode()
    with zipfile.ZipFile(p, "w") as z:
        for n, data in parts.items():
            z.writestr(n, data)
    assert read_table(p)["double"].tolist() == [5.0, 8.0]


def test_xlsx_merged_and_blank_header_cells_are_named(tmp_path):
    p = write_xlsx(tmp_path / "m.xlsx", [["y", "g", ""], [1.0, "a", 2.0]], title="Sheet1")
    book = openpyxl.load_workbook(p)
    book["Sheet1"].merge_cells("B1:C1")
    book.save(p)
    with pytest.raises(InputError, match=r"Sheet1!B1 is merged \(B1:C1\)"):
        read_table(p)
    p = write_xlsx(tmp_path / "b.xlsx", [["y", None, "h"], [1.0, "a", 2.0]], title="Sheet1")
    with pytest.raises(InputError, match="Sheet1!B1 is blank"):
        read_table(p)


def test_xls_is_refused_with_a_hint(tmp_path):
    (tmp_path / "f.xls").write_bytes(b"\xd0\xcf\x11\xe0")
    with pytest.raises(InputError, match="save it as .xlsx"):
        read_table(tmp_path / "f.xls")


# ------------------------------------------------------------------ honest columns
def test_stray_characters_reported_with_spreadsheet_rows(tmp_path, capsys):
    rows = rows_of(frame_df(), repr)
    rows[5][2] = "1O4.5"  # a letter O for a zero, on spreadsheet row 6
    write_rows(tmp_path / "f.csv", rows, ",")
    sc = scenario(tmp_path, "f.csv", 'target = "amount"')
    refused(["run", sc, "--out", tmp_path / "out"], capsys, "'amount'", "'1O4.5'", "row(s) 6")


@pytest.mark.parametrize("suffix", [".csv", ".xlsx"])
def test_duplicate_header_after_trimming_is_refused(tmp_path, suffix):
    rows = [["y", "g", "y "], [1.0, "a", 2.0]]
    p = (write_rows(tmp_path / "f.csv", rows, ",") if suffix == ".csv" else write_xlsx(tmp_path / "f.xlsx", rows))
    with pytest.raises(InputError, match="'y' appears twice"):
        read_table(p)


def test_spaces_trimmed_with_a_warning(tmp_path, capsys):
    p = write_rows(tmp_path / "f.csv", [[" y", "g "], ["1", " a"], ["2", "b  "]], ",")
    df = read_table(p)
    assert list(df.columns) == ["y", "g"] and df["g"].tolist() == ["a", "b"]
    err = capsys.readouterr().err
    assert err.startswith("warning: ") and "2 column name(s) and 2 text cell(s)" in err


def test_formula_guard_undone_on_a_frame_samplewright_wrote(tmp_path):
    labels = ["=1+2", "+x", "-y", "@z", "\tt", "'=q", "-1.5", "plain"]
    write_csv(pd.DataFrame({"y": np.arange(8.0), "label": labels}), tmp_path / "f.csv")
    assert read_table(tmp_path / "f.csv")["label"].tolist() == labels


# ------------------------------------------------------------------ big frames
def test_parquet_reads_only_the_role_columns(tmp_path, monkeypatch):
    import pyarrow.parquet as pq

    df = frame_df().assign(notes=["x" * 20] * 24, extra=np.arange(24.0))
    df.to_parquet(tmp_path / "f.parquet", index=False)
    asked = []
    real = pq.ParquetFile.read
    monkeypatch.setattr(pq.ParquetFile, "read",
                        lambda self, columns=None, **k: asked.append(columns) or real(self, columns=columns, **k))
    from samplewright.simulation.scenario import scenario_from_dict

    doc = {"frame": {"path": "f.parquet", "target": "amount", "stratum": "region"},
           "design": [{"label": "s", "method": "srs", "n": 4}]}
    frame = scenario_from_dict(doc, base=tmp_path).load_frame()
    assert asked == [["amount", "region"]]
    assert frame.total[0] == pytest.approx(sum(AMOUNTS), rel=1e-15)


@pytest.mark.parametrize("as_numbers", [False, True], ids=["text", "numbers-as-text"])
def test_parquet_text_labels_are_coded_as_the_same_text_read_from_csv(tmp_path, as_numbers):
    # a Parquet file's text strata and clusters are read as dictionaries, whose categories come in order
    # of first appearance; the frame must get the codes and labels the plain text gets (pandas.factorize
    # with sort=True over the values: labels sorted, codes in that order), as from the file's columns read
    # as plain text and, for text labels, from a CSV file of the same table
    from samplewright.population.frame import Frame

    rng = np.random.default_rng(11)
    names = ["Süd", "Nord", "Köln", "Ost"] if not as_numbers else ["2.500,25", "1.000,50", "30,75", "400,00"]
    region = np.array(names)[rng.integers(0, 4, 200)]
    cluster = np.array([f"c{r}-{i}" for r, i in zip(region, rng.integers(0, 3, 200))])
    df = pd.DataFrame({"region": region, "cluster": cluster, "y": rng.integers(0, 400, 200) / 4.0})
    df.to_parquet(tmp_path / "f.parquet", index=False)
    write_rows(tmp_path / "f.csv", [list(df.columns)] + df.astype(str).to_numpy().tolist(), ";")
    roles = {"target": "y", "stratum": "region", "cluster": "cluster", "sort_keys": ["region"]}
    read = read_table(tmp_path / "f.parquet", labels=["region", "cluster"])
    assert isinstance(read["cluster"].dtype, pd.CategoricalDtype)  # the dictionary path is the one tested
    from_parquet = Frame.load(tmp_path / "f.parquet", **roles)
    plain = [Frame.from_dataframe(read_table(tmp_path / "f.parquet"), **roles)]
    if not as_numbers:  # (the CSV reader takes the point of the y column as the decimal mark: "1.000,50" stays text)
        plain.append(Frame.load(tmp_path / "f.csv", **roles))
    codes, labels = pd.factorize(pd.Series(cluster), sort=True)
    assert from_parquet.cluster.tolist() == codes.tolist() and from_parquet.cluster_labels == tuple(labels)
    expect = sorted({float(v.replace(".", "").replace(",", ".")) for v in names} if as_numbers else set(names))
    assert list(from_parquet.stratum_labels) == expect
    for other in plain:
        for name in ("stratum", "stratum_labels", "cluster", "cluster_labels", "strata_units", "cluster_units"):
            assert np.array_equal(np.asarray(getattr(from_parquet, name)), np.asarray(getattr(other, name))), name
        assert np.array_equal(from_parquet.sort_orders["region"], other.sort_orders["region"])
        assert from_parquet.content_hash == other.content_hash


def test_csv_over_the_limit_is_refused_with_a_conversion_that_works(tmp_path, monkeypatch):
    p = write_rows(tmp_path / "f.csv", rows_of(frame_df(), european), ";", encoding="cp1252")
    monkeypatch.setattr(reading, "MAX_CSV_BYTES", p.stat().st_size - 1)
    with pytest.raises(InputError, match="convert it once to Parquet") as refusal:
        read_table(p)
    command = str(refusal.value).split(": python3 -c ", 1)[1]
    done = subprocess.run([sys.executable, "-c", shlex.split(command)[0]], capture_output=True, text=True, check=False)
    assert done.returncode == 0, done.stderr
    df = read_table(tmp_path / "f.parquet")
    # pyarrow reads "1.234,50" as text (no thousands option): the frame reader turns it into the number
    expect_frame(df)


# ------------------------------------------------------------------ the same frame in every format
def scenario(tmp_path: Path, frame_file: str, frame_keys: str) -> Path:
    text = (f'seed = 11\nreplicates = 200\n[frame]\npath = "{frame_file}"\n{frame_keys}\n'
            '[[design]]\nlabel = "srs"\nmethod = "srs"\nn = 6\n'
            '[[design]]\nlabel = "strat"\nmethod = "stratified"\nn = 6\nallocation = "proportional"\n')
    p = tmp_path / f"{Path(frame_file).stem}.toml"
    p.write_text(text, encoding="utf-8")
    return p


def refused(argv, capsys, *needles) -> str:
    code = main([str(a) for a in argv])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and err[0].startswith("error: "), err
    for n in needles:
        assert n in err[0], (n, err[0])
    return err[0]


def test_same_frame_in_every_format_gives_the_same_summary(tmp_path):
    df = frame_df()
    files = {
        "comma.csv": lambda p: df.to_csv(p, index=False),
        "euro.csv": lambda p: write_rows(p, rows_of(df, european), ";", newline="\r\n", tail="\r\n"),
        "tabs.tsv": lambda p: write_rows(p, rows_of(df, repr), "\t"),
        "wide.csv": lambda p: write_rows(p, rows_of(df, repr), ",", encoding="utf-16"),
        "ansi.csv": lambda p: write_rows(p, rows_of(df, european), ";", encoding="cp1252"),
        "book.xlsx": lambda p: write_xlsx(p, rows_of(df, float)),
        "columns.parquet": lambda p: df.to_parquet(p, index=False),
    }
    summaries = {}
    for name, write in files.items():
        write(tmp_path / name)
        sc = scenario(tmp_path, name, 'target = "amount"\nstratum = "region"')
        out = tmp_path / f"out_{Path(name).stem}"
        assert main(["run", str(sc), "--out", str(out), "--quiet", "--no-report"]) == 0
        summaries[name] = (out / "summary.csv").read_bytes()
    first = summaries["comma.csv"]
    assert len(first) > 100
    assert {name for name, s in summaries.items() if s != first} == set()


def test_inspect_takes_the_reading_keys_as_flags(tmp_path, capsys):
    write_rows(tmp_path / "f.csv", [["y", "g"], ["1,234", "a"], ["2,5", "b"], ["3,75", "a"]], ";")
    assert main(["inspect", str(tmp_path / "f.csv"), "--target", "y", "--separator", ";", "--decimal", ",",
                 "--json"]) == 0
    out = capsys.readouterr().out
    assert '"max": 3.75' in out and '"min": 1.234' in out


def test_synth_converts_a_frame_file_with_its_keys(tmp_path, capsys):
    write_rows(tmp_path / "f.csv", rows_of(frame_df(), european), ";", encoding="cp1252")
    sc = scenario(tmp_path, "f.csv", 'target = "amount"\nencoding = "cp1252"\ndecimal = ","')
    assert main(["synth", str(sc), "--out", str(tmp_path / "f.parquet")]) == 0
    expect_frame(pd.read_parquet(tmp_path / "f.parquet"))


def test_reading_keys_are_checked(tmp_path, capsys):
    write_rows(tmp_path / "f.csv", rows_of(frame_df(), repr), ",")
    for keys, needle in (('separator = ":"', "separator = ':' is not accepted"),
                         ('decimal = ","\nthousands = ","', "must differ"),
                         ('encoding = "klingon"', "not known"),
                         ("header_row = 0", "header_row"),
                         ('percent = "yes"', "percent must be true or false")):
        sc = scenario(tmp_path, "f.csv", 'target = "amount"\n' + keys)
        refused(["run", sc, "--out", tmp_path / "out"], capsys, "[frame]", needle)


def test_xlsx_formula_saved_without_value_is_refused_by_cell(tmp_path):
    # openpyxl writes a formula without the value a spreadsheet would save beside it
    p = write_xlsx(tmp_path / "f.xlsx", [["y", "double"], [2.5, 5.0], [4.0, "=A3*2"]], title="Sheet1")
    with pytest.raises(InputError, match="cell Sheet1!B3 holds a formula saved without its value"):
        read_table(p)


def test_xlsx_filled_column_under_a_blank_header_is_refused(tmp_path):
    p = write_xlsx(tmp_path / "f.xlsx", [["y", "g"], [1.0, "a", 7.0], [2.0, "b"]], title="Sheet1")
    with pytest.raises(InputError, match="Sheet1!C1 is blank"):
        read_table(p)
