"""samplewright synth SCENARIO --out FRAME.csv|.parquet: write a scenario's frame to a file.

A [frame.synthetic] table is generated; a frame file (any format and [frame] reading keys
``run`` accepts) is converted, e.g. a European CSV or a sheet of a workbook to Parquet.
"""

from __future__ import annotations

from pathlib import Path

from samplewright.errors import InputError

NAME = "synth"
HELP = "write the frame a scenario describes (synthetic, or a file in any format read) to a CSV or Parquet file"


def add_arguments(p) -> None:
    p.add_argument("scenario", help="scenario file (TOML) with a [frame.synthetic] table or a frame path")
    p.add_argument("--out", required=True, help="frame file to write (.csv or .parquet); required")
    p.add_argument("--force", action="store_true", help="overwrite an existing file (default: off, refuse)")


def main(args) -> int:
    from samplewright.files import write_csv, write_parquet
    from samplewright.simulation.scenario import load_scenario

    sc = load_scenario(args.scenario)
    out = Path(args.out)
    suffix = out.suffix.lower()
    if suffix not in (".csv", ".parquet"):
        raise InputError(f"--out {str(out)!r}: use a .csv or .parquet file name")
    if out.exists() and not args.force:
        raise InputError(f"--out {str(out)!r} exists; use --force to overwrite it")
    if not out.parent.exists():
        raise InputError(f"--out {str(out)!r}: folder {str(out.parent)!r} does not exist")
    df = sc.frame.dataframe()
    (write_csv if suffix == ".csv" else write_parquet)(df, out)
    print(f"wrote {len(df)} units to {out}")
    return 0
